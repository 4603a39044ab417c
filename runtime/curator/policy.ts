/**
 * The steward's policy file (YAML): which datasets exist, their public schema, the privacy unit,
 * the privacy-loss cap, and who may ask. The format is documented in DEVELOPERS.md.
 *
 * Every error names the file, the path inside it (e.g. `datasets.visits.columns.age.range`) and
 * what is wrong. Relative paths are resolved against the policy file's directory.
 */
import { readFileSync, statSync } from "node:fs";
import { dirname, extname, isAbsolute, resolve } from "node:path";
import { parse as parseYaml } from "yaml";
import { z } from "zod";
import { PolicyError } from "../errors.js";
import { type Grid, Rational, makeGrid, rhoFromEpsilonDelta } from "../core/index.js";
import { assignPopulations } from "./populations.js";
import { parseTokenHash } from "./tokens.js";

export type ColumnPolicy =
  | {
      name: string;
      /** Column name in the source file (defaults to `name`). */
      from: string;
      type: "integer" | "number";
      lower: string;
      upper: string;
      step: string;
      grid: Grid;
    }
  | { name: string; from: string; type: "category"; values: string[] }
  | { name: string; from: string; type: "date"; lower: string; upper: string }
  | { name: string; from: string; type: "boolean" };

export type AccountingPolicy =
  | { mode: "pure"; capEpsilon: Rational }
  | { mode: "zcdp"; capEpsilon: Rational; delta: Rational; capRho: Rational };

/**
 * Where a dataset's rows live (the policy's `source`). Paths are absolute.
 *   memory:   a CSV or Parquet file copied into DuckDB's memory at start (`source: data/x.csv`)
 *   files:    Parquet (a file, folder or glob) or CSV queried in place by DuckDB
 *   duckdb:   a table in a DuckDB database file, prepared once by `hush prepare`
 *   postgres: a table or view in a PostgreSQL server (engines/postgres/); the password comes from
 *             a file or an environment variable, never from the policy text
 */
export type SourcePolicy =
  | { kind: "memory"; path: string; format: "csv" | "parquet" }
  | { kind: "files"; pattern: string; format: "csv" | "parquet" }
  | { kind: "duckdb"; path: string; table: string }
  | {
      kind: "postgres";
      host: string;
      port: number;
      database: string;
      user: string;
      /** Schema and table (or view) name, unquoted. */
      schema: string;
      table: string;
      passwordFile: string | null;
      passwordEnv: string | null;
      sslmode: "disable" | "prefer" | "require" | "verify-ca" | "verify-full" | null;
    };

/** DuckDB's own limits for the curator's DuckDB instance (policy `engine:`). */
export interface EngineLimits {
  /** DuckDB memory_limit, e.g. "2GB" (null: DuckDB's default, 80% of RAM). */
  memoryLimit: string | null;
  /** DuckDB threads (null: DuckDB's default, the number of cores). */
  threads: number | null;
}

export interface DatasetPolicy {
  name: string;
  description: string;
  /**
   * What the dataset reads, as one string: the absolute path of the file or glob, `<file>#<table>`
   * for a table of a DuckDB file, or `postgresql://user@host:port/database/schema.table` (no password). Populations are
   * keyed on it (populations.ts).
   */
  source: string;
  /** The source in full. */
  origin: SourcePolicy;
  /**
   * The people the dataset is about, by name. Spend is accounted per (analyst, population): every
   * dataset of one population draws on one cap. See populations.ts for how the name is chosen.
   */
  population: string;
  /** Data format: the file format for memory/files sources, else the engine ("duckdb", "postgres"). */
  format: "csv" | "parquet" | "duckdb" | "postgres";
  /** column null: each row is its own unit (then maxRows = maxGroups = 1). */
  unit: { column: string | null; maxRows: number; maxGroups: number };
  accounting: AccountingPolicy;
  analysts: string[];
  columns: ColumnPolicy[];
}

export interface LoadedPolicy {
  file: string;
  dir: string;
  keyPath: string;
  ledgerPath: string;
  /** How releases are answered: the time limit per release and the first reply slot (workers/pacing.ts). */
  answering: { timeLimitMs: number; paceMs: number };
  analysts: Map<string, { tokenHash: string }>;
  datasets: Map<string, DatasetPolicy>;
  /** Population name -> the datasets over it, in policy order. */
  populations: Map<string, string[]>;
  /** DuckDB's memory and thread limits (policy `engine:`). */
  engine: EngineLimits;
}

/** Largest grid: (upper - lower)/step. Keeps squares of centred grid units inside SQL BIGINT. */
export const MAX_GRID_POINTS = 2 ** 30;
export const MAX_CATEGORY_VALUES = 1000;
export const MAX_ROWS_PER_UNIT = 10000;
/** Defaults of curator.answering: a release gets 30 s; replies leave on slots from 50 ms on. */
export const DEFAULT_TIME_LIMIT_SECONDS = 30;
export const DEFAULT_PACE_MS = 50;
const MAX_TIME_LIMIT_SECONDS = 3600;

const NAME = /^[A-Za-z][A-Za-z0-9_-]{0,63}$/;
const ISO_DATE = /^(\d{4})-(\d{2})-(\d{2})$/;

// ---- raw shapes (zod) ------------------------------------------------------------------------

const scalar = z.union([z.string(), z.number()], { error: "must be a number or a decimal string" });

const columnSchema = z.discriminatedUnion(
  "type",
  [
    z.strictObject({
      type: z.literal(["integer", "number"]),
      range: z.tuple([scalar, scalar], { error: "must be [lower, upper]" }),
      step: scalar.optional(),
      from: z.string().min(1).optional(),
    }),
    z.strictObject({
      type: z.literal("category"),
      values: z
        .array(z.union([z.string(), z.number(), z.boolean()]), { error: "must be a list of values" })
        .min(1, { message: "must list at least one value" })
        .max(MAX_CATEGORY_VALUES, { message: `must list at most ${MAX_CATEGORY_VALUES} values` }),
      from: z.string().min(1).optional(),
    }),
    z.strictObject({
      type: z.literal("date"),
      range: z.tuple([z.union([z.string(), z.date()]), z.union([z.string(), z.date()])], {
        error: "must be [\"YYYY-MM-DD\", \"YYYY-MM-DD\"]",
      }),
      from: z.string().min(1).optional(),
    }),
    z.strictObject({ type: z.literal("boolean"), from: z.string().min(1).optional() }),
  ],
  { error: "must have type integer, number, category, date or boolean" },
);

const exact = z.union([z.string(), z.number()], { error: "must be an exact number, e.g. \"1\" or \"1e-6\"" });

const pgName = z
  .string({ error: "must be a string" })
  .min(1, { message: "must not be empty" })
  .max(255, { message: "must be at most 255 characters" })
  .refine((s) => !/[\u0000-\u001f]/.test(s), { message: "must not contain control characters" });

const sourceSchema = z.union(
  [
    z.string().min(1),
    z.strictObject({
      files: z.string({ error: "must be a path, folder or glob of .parquet or .csv files" }).min(1),
      format: z.literal(["csv", "parquet"], { error: "must be csv or parquet" }).optional(),
    }),
    z.strictObject({
      duckdb: z.string({ error: "must be the path of a DuckDB database file" }).min(1),
      table: z.string({ error: "must name the table in the DuckDB file" }).min(1).max(255),
    }),
    z.object({ postgres: z.unknown() }),
  ],
  {
    error:
      "must be a file path (copied into memory), { files: <path, folder or glob> }, { duckdb: <file>, table: <name> } or { postgres: { host, port, database, user, table } }",
  },
);

/** The PostgreSQL connection of a source; `password` is refused (see parsePostgres). */
const postgresSchema = z.strictObject({
  host: pgName,
  port: z.number({ error: "must be a port number" }).int({ message: "must be a whole number" }).min(1).max(65535).default(5432),
  database: pgName,
  user: pgName,
  table: z.string({ error: "must be schema.table (or a table name in schema public)" }).min(1).max(255),
  passwordFile: z.string({ error: "must be the path of a file holding the password" }).min(1).optional(),
  passwordEnv: z
    .string({ error: "must name an environment variable" })
    .regex(/^[A-Za-z_][A-Za-z0-9_]{0,127}$/, { message: "must name an environment variable (letters, digits, _)" })
    .optional(),
  sslmode: z.literal(["disable", "prefer", "require", "verify-ca", "verify-full"], { error: "must be disable, prefer, require, verify-ca or verify-full" }).optional(),
});

const datasetSchema = z.strictObject({
  description: z.string({ error: "must be a string" }).default(""),
  source: sourceSchema,
  format: z.literal(["csv", "parquet"], { error: "must be csv or parquet" }).optional(),
  population: z.string({ error: "must be a name such as clinic-patients" }).optional(),
  unit: z
    .strictObject({
      column: z.string().min(1).nullable().optional(),
      maxRows: z.number().int({ message: "must be a whole number" }).min(1).max(MAX_ROWS_PER_UNIT).optional(),
      maxGroups: z.number().int({ message: "must be a whole number" }).min(1).max(MAX_ROWS_PER_UNIT).optional(),
    })
    .optional(),
  accounting: z.discriminatedUnion(
    "mode",
    [
      z.strictObject({ mode: z.literal("pure"), cap: z.strictObject({ epsilon: exact }) }),
      z.strictObject({ mode: z.literal("zcdp"), cap: z.strictObject({ epsilon: exact, delta: exact }) }),
    ],
    { error: "must be { mode: pure, cap: { epsilon } } or { mode: zcdp, cap: { epsilon, delta } }" },
  ),
  analysts: z.array(z.string(), { error: "must be a list of analyst names" }).default([]),
  columns: z.record(z.string(), columnSchema, { error: "must map column names to column declarations" }),
});

/** DuckDB size text: a number and a unit, e.g. "512MB", "2GB", "1.5GiB". */
const MEMORY_LIMIT = /^[0-9]{1,6}(\.[0-9]{1,3})?\s?(B|KB|MB|GB|TB|KiB|MiB|GiB|TiB)$/;

const fileSchema = z.strictObject({
  engine: z
    .strictObject({
      memoryLimit: z
        .string({ error: "must be a size such as \"2GB\" or \"512MiB\"" })
        .regex(MEMORY_LIMIT, { message: "must be a size such as \"2GB\" or \"512MiB\"" })
        .optional(),
      threads: z.number({ error: "must be a whole number of threads" }).int({ message: "must be a whole number" }).min(1).max(256).optional(),
    })
    .optional(),
  curator: z
    .strictObject({
      key: z.string().min(1).optional(),
      ledger: z.string().min(1).optional(),
      answering: z
        .strictObject({
          timeLimit: z
            .number({ error: "must be a number of seconds" })
            .min(0.01, { message: "must be at least 0.01 (seconds)" })
            .max(MAX_TIME_LIMIT_SECONDS, { message: `must be at most ${MAX_TIME_LIMIT_SECONDS} (seconds)` })
            .optional(),
          pace: z
            .number({ error: "must be a number of milliseconds" })
            .int({ message: "must be a whole number of milliseconds" })
            .min(0, { message: "must not be negative" })
            .max(10_000, { message: "must be at most 10000 (milliseconds)" })
            .optional(),
        })
        .optional(),
    })
    .optional(),
  analysts: z
    .record(z.string(), z.strictObject({ token: z.string({ error: "must be a token hash made by `hush token`" }) }))
    .default({}),
  datasets: z.record(z.string(), datasetSchema, { error: "must map dataset names to dataset declarations" }),
});

// ---- helpers ---------------------------------------------------------------------------------

function pathOf(parts: readonly PropertyKey[]): string {
  let out = "";
  for (const p of parts) out += typeof p === "number" ? `[${p}]` : `${out === "" ? "" : "."}${String(p)}`;
  return out === "" ? "(top level)" : out;
}

function fail(file: string, path: string, what: string): never {
  throw new PolicyError(`policy ${file}: ${path}: ${what}`);
}

function exactOf(file: string, path: string, v: string | number, what: string): Rational {
  try {
    return Rational.parse(typeof v === "number" ? String(v) : v);
  } catch {
    return fail(file, path, `${what} must be an exact number such as "0.5", "1e-6" or "1/3"`);
  }
}

/** Exact decimal string of a rational that has a finite decimal expansion, else null. */
function finiteDecimal(r: Rational): string | null {
  let d = r.den;
  while (d % 2n === 0n) d /= 2n;
  while (d % 5n === 0n) d /= 5n;
  return d === 1n ? r.toDecimal(1000) : null;
}

function isoDate(file: string, path: string, v: string | Date): string {
  const s = v instanceof Date ? v.toISOString().slice(0, 10) : v;
  const m = ISO_DATE.exec(s);
  if (m) {
    const d = new Date(`${s}T00:00:00Z`);
    if (!Number.isNaN(d.getTime()) && d.toISOString().slice(0, 10) === s) return s;
  }
  return fail(file, path, "must be a calendar date written YYYY-MM-DD");
}

function numericColumn(
  file: string,
  path: string,
  name: string,
  raw: { type: "integer" | "number"; range: [string | number, string | number]; step?: string | number; from?: string },
): ColumnPolicy {
  const lower = exactOf(file, `${path}.range[0]`, raw.range[0], "the lower bound");
  const upper = exactOf(file, `${path}.range[1]`, raw.range[1], "the upper bound");
  if (!lower.lt(upper)) fail(file, `${path}.range`, "lower bound must be below the upper bound");
  if (raw.step === undefined && raw.type === "number") fail(file, `${path}.step`, "a number column needs a step (the grid spacing), e.g. \"0.01\"");
  const step = raw.step === undefined ? Rational.ONE : exactOf(file, `${path}.step`, raw.step, "the step");
  if (step.sign() <= 0) fail(file, `${path}.step`, "must be positive");
  if (raw.type === "integer" && step.den !== 1n) fail(file, `${path}.step`, "an integer column needs a whole-number step");
  const lu = lower.div(step);
  const uu = upper.div(step);
  if (lu.den !== 1n || uu.den !== 1n) fail(file, `${path}.range`, "both bounds must be multiples of the step");
  if (uu.num - lu.num > BigInt(MAX_GRID_POINTS)) {
    fail(file, `${path}.step`, `the range holds more than 2^30 grid points; choose a coarser step`);
  }
  const max = lu.num < 0n ? -lu.num : lu.num;
  const maxU = uu.num < 0n ? -uu.num : uu.num;
  if ((max > maxU ? max : maxU) > BigInt(MAX_GRID_POINTS) * 2n) {
    fail(file, `${path}.range`, "bounds are too far from zero for this step (at most 2^31 steps); choose a coarser step");
  }
  const ls = finiteDecimal(lower);
  const us = finiteDecimal(upper);
  const ss = finiteDecimal(step);
  if (ls === null || us === null || ss === null) fail(file, path, "bounds and step must be finite decimals");
  let grid: Grid;
  try {
    grid = makeGrid({ lower: ls, upper: us, step: ss });
  } catch (e) {
    return fail(file, path, `invalid grid (${e instanceof Error ? e.message : String(e)})`);
  }
  return { name, from: raw.from ?? name, type: raw.type, lower: ls, upper: us, step: ss, grid };
}

/** Format of a path from its extension (a glob's extension counts), or from `format:`. */
function formatOf(file: string, path: string, p: string, given: "csv" | "parquet" | undefined, what: string): "csv" | "parquet" {
  if (given !== undefined) return given;
  const ext = extname(p).toLowerCase();
  if (ext === ".csv") return "csv";
  if (ext === ".parquet" || ext === ".pq") return "parquet";
  return fail(file, path, `${what} must end in .csv or .parquet (or give format: csv|parquet)`);
}

/** Parses a dataset's `source` (the forms of SourcePolicy). `at` resolves relative paths. */
function parseSource(
  file: string,
  path: string,
  raw: z.infer<typeof sourceSchema>,
  format: "csv" | "parquet" | undefined,
  at: (p: string) => string,
): SourcePolicy {
  if (typeof raw === "string") {
    const p = at(raw);
    return { kind: "memory", path: p, format: formatOf(file, path, p, format, "the source") };
  }
  if ("files" in raw) {
    if (format !== undefined && raw.format !== undefined && format !== raw.format) fail(file, `${path}.format`, "disagrees with the dataset's format");
    let p = at(raw.files);
    // A folder means every Parquet (or CSV) file in it, at any depth below.
    const f = raw.format ?? format;
    let isDir = false;
    try {
      isDir = !/[*?[]/.test(p) && statSync(p).isDirectory();
    } catch {
      // Missing paths are reported by the engine when it opens the source, naming the problem.
    }
    if (isDir) {
      if (f === undefined) fail(file, `${path}.format`, "a folder needs format: parquet or format: csv");
      p = `${p.replace(/\/+$/, "")}/**/*.${f}`;
    }
    return { kind: "files", pattern: p, format: formatOf(file, `${path}.files`, p, f, "files") };
  }
  if ("duckdb" in raw) {
    if (format !== undefined) fail(file, `${path}`, "format does not apply to a DuckDB file source");
    return { kind: "duckdb", path: at(raw.duckdb), table: raw.table };
  }
  if (format !== undefined) fail(file, `${path}`, "format does not apply to a PostgreSQL source");
  return parsePostgres(file, `${path}.postgres`, raw.postgres, at);
}

function parsePostgres(file: string, path: string, raw: unknown, at: (p: string) => string): SourcePolicy {
  if (raw === null || typeof raw !== "object" || Array.isArray(raw)) fail(file, path, "must be a mapping { host, port, database, user, table }");
  if (Object.hasOwn(raw, "password")) {
    fail(file, `${path}.password`, "a password must not be written in the policy; give passwordFile (a file readable by the curator only) or passwordEnv (an environment variable)");
  }
  const parsed = postgresSchema.safeParse(raw);
  if (!parsed.success) {
    const issue = parsed.error.issues[0];
    const msg = issue.code === "unrecognized_keys" ? `unknown key ${issue.keys.map((k) => JSON.stringify(k)).join(", ")}` : issue.message;
    fail(file, issue.path.length ? `${path}.${pathOf(issue.path)}` : path, msg);
  }
  const pg = parsed.data;
  if (pg.passwordFile !== undefined && pg.passwordEnv !== undefined) fail(file, path, "give passwordFile or passwordEnv, not both");
  const parts = pg.table.split(".");
  if (parts.length > 2 || parts.some((x) => x.length === 0 || /[\u0000-\u001f"]/.test(x))) {
    fail(file, `${path}.table`, "must be schema.table or table (names without dots, quotes or control characters)");
  }
  const [schema, table] = parts.length === 2 ? parts : ["public", parts[0]];
  return {
    kind: "postgres",
    host: pg.host,
    port: pg.port,
    database: pg.database,
    user: pg.user,
    schema,
    table,
    passwordFile: pg.passwordFile === undefined ? null : at(pg.passwordFile),
    passwordEnv: pg.passwordEnv ?? null,
    sslmode: pg.sslmode ?? null,
  };
}

/** The one-string identity of a source (DatasetPolicy.source) and its format. */
function sourceIdentity(o: SourcePolicy): { source: string; format: DatasetPolicy["format"] } {
  switch (o.kind) {
    case "memory":
      return { source: o.path, format: o.format };
    case "files":
      return { source: o.pattern, format: o.format };
    case "duckdb":
      // One table of a database file: its own people, as one file is (populations.ts).
      return { source: `${o.path}#${o.table}`, format: "duckdb" };
    case "postgres":
      return {
        source: `postgresql://${encodeURIComponent(o.user)}@${o.host}:${o.port}/${encodeURIComponent(o.database)}/${o.schema}.${o.table}`,
        format: "postgres",
      };
  }
}

// ---- entry points ----------------------------------------------------------------------------

export function loadPolicy(file: string): LoadedPolicy {
  const abs = resolve(file);
  let text: string;
  try {
    text = readFileSync(abs, "utf8");
  } catch (e) {
    const code = e !== null && typeof e === "object" && "code" in e ? String((e as { code: unknown }).code) : "error";
    throw new PolicyError(`policy ${abs}: cannot be read (${code})`);
  }
  return parsePolicy(text, abs);
}

export function parsePolicy(text: string, file: string): LoadedPolicy {
  const abs = resolve(file);
  const dir = dirname(abs);
  let doc: unknown;
  try {
    doc = parseYaml(text, { prettyErrors: true, maxAliasCount: 100 });
  } catch (e) {
    const line = e !== null && typeof e === "object" && "linePos" in e ? (e as { linePos?: { line: number }[] }).linePos?.[0]?.line : undefined;
    throw new PolicyError(`policy ${abs}: not valid YAML${line === undefined ? "" : ` (line ${line})`}`);
  }
  if (doc === null || typeof doc !== "object" || Array.isArray(doc)) fail(abs, "(top level)", "must be a mapping with curator, analysts and datasets");
  const parsed = fileSchema.safeParse(doc);
  if (!parsed.success) {
    const issue = parsed.error.issues[0];
    const msg = issue.code === "unrecognized_keys" ? `unknown key ${issue.keys.map((k) => JSON.stringify(k)).join(", ")}` : issue.message;
    fail(abs, pathOf(issue.path), msg);
  }
  const raw = parsed.data;
  const at = (p: string) => (isAbsolute(p) ? p : resolve(dir, p));

  const analysts = new Map<string, { tokenHash: string }>();
  for (const [name, a] of Object.entries(raw.analysts)) {
    if (!NAME.test(name)) fail(abs, `analysts.${name}`, "analyst names use letters, digits, - and _ (at most 64, starting with a letter)");
    if (parseTokenHash(a.token) === null) fail(abs, `analysts.${name}.token`, "is not a token hash made by `hush token` (scrypt$N$r$p$salt$hash)");
    analysts.set(name, { tokenHash: a.token });
  }

  const datasets = new Map<string, DatasetPolicy>();
  const named = new Map<string, string | undefined>();
  for (const [dname, d] of Object.entries(raw.datasets)) {
    const dp = `datasets.${dname}`;
    if (!NAME.test(dname)) fail(abs, dp, "dataset names use letters, digits, - and _ (at most 64, starting with a letter)");
    if (d.population !== undefined && !NAME.test(d.population)) {
      fail(abs, `${dp}.population`, "population names use letters, digits, - and _ (at most 64, starting with a letter)");
    }
    named.set(dname, d.population);
    const origin = parseSource(abs, `${dp}.source`, d.source, d.format, at);
    const { source, format } = sourceIdentity(origin);

    const columns: ColumnPolicy[] = [];
    const sourceNames = new Set<string>();
    for (const [cname, c] of Object.entries(d.columns)) {
      const cp = `${dp}.columns.${cname}`;
      if (cname.length === 0 || cname.length > 64 || cname.startsWith("__") || /[\u0000-\u001f"]/.test(cname)) {
        fail(abs, cp, "column names are 1-64 characters, without quotes or control characters, not starting with __");
      }
      const from = c.from ?? cname;
      if (sourceNames.has(from)) fail(abs, `${cp}.from`, "two columns read the same source column");
      sourceNames.add(from);
      if (c.type === "integer" || c.type === "number") {
        columns.push(numericColumn(abs, cp, cname, c as Parameters<typeof numericColumn>[3]));
      } else if (c.type === "category") {
        const values = c.values.map((v) => String(v));
        if (new Set(values).size !== values.length) fail(abs, `${cp}.values`, "lists a value twice");
        if (values.some((v) => v.length === 0 || v.length > 200)) fail(abs, `${cp}.values`, "values must be 1-200 characters");
        columns.push({ name: cname, from, type: "category", values });
      } else if (c.type === "date") {
        const lower = isoDate(abs, `${cp}.range[0]`, c.range[0]);
        const upper = isoDate(abs, `${cp}.range[1]`, c.range[1]);
        if (lower > upper) fail(abs, `${cp}.range`, "the first date must not be after the second");
        columns.push({ name: cname, from, type: "date", lower, upper });
      } else {
        columns.push({ name: cname, from, type: "boolean" });
      }
    }
    if (columns.length === 0) fail(abs, `${dp}.columns`, "must declare at least one column");

    const u = d.unit ?? {};
    const unitColumn = u.column ?? null;
    let maxRows = 1;
    let maxGroups = 1;
    if (unitColumn === null) {
      if ((u.maxRows ?? 1) !== 1 || (u.maxGroups ?? 1) !== 1) {
        fail(abs, `${dp}.unit`, "without a unit column each row is its own unit, so maxRows and maxGroups must be 1 (or left out)");
      }
    } else {
      if (columns.some((c) => c.name === unitColumn || c.from === unitColumn)) {
        fail(abs, `${dp}.unit.column`, "the unit column must not also be a public column");
      }
      if (u.maxRows === undefined) fail(abs, `${dp}.unit.maxRows`, "is required when a unit column is given (largest number of rows kept per unit)");
      maxRows = u.maxRows;
      maxGroups = u.maxGroups ?? maxRows;
      if (maxGroups > maxRows) fail(abs, `${dp}.unit.maxGroups`, "must not exceed maxRows");
    }

    const acc = d.accounting;
    const capEpsilon = exactOf(abs, `${dp}.accounting.cap.epsilon`, acc.cap.epsilon, "the epsilon cap");
    if (capEpsilon.sign() <= 0) fail(abs, `${dp}.accounting.cap.epsilon`, "must be positive");
    let accounting: AccountingPolicy;
    if (acc.mode === "pure") {
      accounting = { mode: "pure", capEpsilon };
    } else {
      const delta = exactOf(abs, `${dp}.accounting.cap.delta`, acc.cap.delta, "delta");
      if (delta.sign() <= 0 || !delta.lt(Rational.ONE)) fail(abs, `${dp}.accounting.cap.delta`, "must lie strictly between 0 and 1");
      let capRho: Rational;
      try {
        capRho = rhoFromEpsilonDelta(capEpsilon, delta);
      } catch (e) {
        return fail(abs, `${dp}.accounting.cap`, `cannot convert to a rho cap (${e instanceof Error ? e.message : String(e)})`);
      }
      accounting = { mode: "zcdp", capEpsilon, delta, capRho };
    }

    const allowed: string[] = [];
    d.analysts.forEach((a, i) => {
      if (!analysts.has(a)) fail(abs, `${dp}.analysts[${i}]`, "names an analyst not listed under analysts");
      if (!allowed.includes(a)) allowed.push(a);
    });

    datasets.set(dname, {
      name: dname,
      description: d.description,
      source,
      origin,
      // Filled in below, once every dataset's source is known.
      population: "",
      format,
      unit: { column: unitColumn, maxRows, maxGroups },
      accounting,
      analysts: allowed,
      columns,
    });
  }

  const populations = assignPopulations(datasets, named, (path, what) => fail(abs, path, what));

  const timeLimitMs = Math.round((raw.curator?.answering?.timeLimit ?? DEFAULT_TIME_LIMIT_SECONDS) * 1000);
  const paceMs = raw.curator?.answering?.pace ?? DEFAULT_PACE_MS;
  if (paceMs > timeLimitMs) fail(abs, "curator.answering.pace", "must not exceed the time limit");
  return {
    file: abs,
    dir,
    engine: { memoryLimit: raw.engine?.memoryLimit ?? null, threads: raw.engine?.threads ?? null },
    answering: { timeLimitMs, paceMs },
    keyPath: at(raw.curator?.key ?? "keys/curator.key"),
    ledgerPath: at(raw.curator?.ledger ?? "state/ledger.sqlite"),
    analysts,
    datasets,
    populations,
  };
}
