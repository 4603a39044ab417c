/**
 * Files queried where they are: Parquet (a file, a folder or a glob) or CSV, read by DuckDB at
 * query time through a view that applies every row-level step (columns.ts) as the rows stream
 * past. Nothing is copied into memory: DuckDB's memory stays within the policy's memoryLimit
 * (spilling to a private temporary folder), whatever the size of the files.
 *
 * The rule for values that do not fit the schema (there is no load to reject them at): a value
 * that cannot be read as its declared type, a non-finite number, a non-whole number in an integer
 * column, a category value outside the declared list or a date outside the declared range is
 * MISSING, the same for every query; a row whose unit id is missing is left out. Numbers outside
 * their declared range are clamped, as in memory. CSV lines that cannot be split into the header's
 * fields are skipped. Every file of a CSV source must have the first file's header.
 *
 * The files are the ones matched at start (sorted); each one's size and modification time are
 * checked again while and after every statement runs, and a change refuses the release (nothing is
 * spent) until the curator is restarted: per-unit bounding below rests on the rows being the ones
 * seen at start. (A file rewritten with the same size and modification time is not noticed: the
 * steward must not change the files under a running curator.)
 *
 * Per-unit bounding, copying only the rows of units above maxRows. Each row's place in its unit's
 * random order is a keyed hash __h = hash(hash(file name, row number in the file) XOR seed) of its
 * POSITION, never of its values, with a 64-bit seed drawn from the CSPRNG at start. The start pass
 * reads the unit column of every file, finds the units with more than maxRows rows (the "big"
 * units) and copies their rows, in stored form and with their __h, into a table; for each big unit
 * the maxRows-th smallest __h is its threshold. Without a filter a row of a big unit is kept when
 * its __h is at or below the threshold: exactly maxRows rows of each big unit, uniformly chosen
 * under the seed. The start pass also checks that no two rows of a big unit share an __h (else it
 * draws a new seed), so "at or below the threshold" can never keep more. With a filter the window
 * of shapes.ts runs over the big units' rows only.
 *
 * Statements take the split path (InPlaceSplit): the aggregate over every row of the files as a
 * plain scan (no join, no position), minus the same over the big units' rows, plus the same over
 * their kept rows. Every aggregate is an exact integer per cell or bucket, so the sum is the
 * bounded relation's answer; the work per statement is a plain scan plus two over the big units'
 * rows, whatever the filter matches. The view `v<i>` is the bounded relation itself (tests and
 * plain-SQL comparisons read it).
 *
 * The start pass's result (the thresholds and the big units' rows, values in stored form) is kept
 * in the steward's state folder (beside the ledger, mode 0600, like the signing key: it is a copy
 * of those rows) and read from there by the next start over the same files (sizes and times) and
 * declaration, so only the first start pays for it; `hush prepare` runs it ahead of any start.
 * Units are told apart by their id values themselves (no hash), so in place no two units are
 * ever merged. Per-unit bounding needs row positions, which DuckDB gives for Parquet only: a CSV
 * source in place with a unit column is refused at start (prepare it instead).
 */
import { createHash } from "node:crypto";
import { chmodSync, existsSync, mkdirSync, renameSync, rmSync } from "node:fs";
import { stat } from "node:fs/promises";
import { join } from "node:path";
import type { DuckDBConnection } from "@duckdb/node-api";
import { PolicyError, UnreachableError } from "../../../errors.js";
import type { Bits } from "../../../core/index.js";
import type { ColumnPolicy, DatasetPolicy } from "../../policy.js";
import type { Bounding, Relation } from "../shapes.js";
import { type LoadReport, schemaOf } from "../types.js";
import { engineMessage, inPlaceFinal, inPlaceTyped, quoteIdent, quoteString, tableKey } from "./columns.js";
import { checkHeader, csvCall, csvLayoutOf, describeColumns } from "./load.js";

type FilesSource = Extract<DatasetPolicy["origin"], { kind: "files" }>;

/** Most files one source may match (each is stat-ed twice per statement). */
export const MAX_FILES = 10_000;
/** New seeds drawn when two rows of a big unit share a position hash (practically never). */
const SEED_TRIES = 4;

/** Relation columns of a view over files (shapes.ts Bounding). */
export const IN_PLACE_BOUNDING: Bounding = {
  small: () => "__thr IS NULL",
  kept: () => "(__thr IS NULL OR __h <= __thr)",
  order: "__h",
  unit: "__u",
};

interface FileStamp {
  path: string;
  size: number;
  mtimeMs: number;
}

async function stamps(paths: readonly string[]): Promise<FileStamp[]> {
  const out: FileStamp[] = [];
  // In slices, so a large folder does not open every file handle at once.
  for (let i = 0; i < paths.length; i += 256) {
    const part = await Promise.all(
      paths.slice(i, i + 256).map(async (p) => {
        const s = await stat(p);
        return { path: p, size: s.size, mtimeMs: s.mtimeMs };
      }),
    );
    out.push(...part);
  }
  return out;
}

/** Whether a source column of DuckDB type `type` can hold the declared column (else a clear error at start). */
function typeFits(c: ColumnPolicy, type: string): boolean {
  const t = type.toUpperCase();
  const text = t === "VARCHAR";
  const numeric = /^(TINYINT|SMALLINT|INTEGER|BIGINT|HUGEINT|UTINYINT|USMALLINT|UINTEGER|UBIGINT|UHUGEINT|FLOAT|DOUBLE|DECIMAL.*)$/.test(t);
  switch (c.type) {
    case "integer":
    case "number":
      return numeric || text;
    case "category":
      return numeric || text || t === "BOOLEAN";
    case "date":
      return text || t === "DATE" || t.startsWith("TIMESTAMP");
    case "boolean":
      return text || t === "BOOLEAN" || numeric;
  }
}

/** What a cached per-unit order was built for: the declaration and every file's size and time. */
function cacheKey(d: DatasetPolicy, start: readonly FileStamp[]): string {
  return createHash("sha256").update(JSON.stringify(["in-place-v4", tableKey(d), start])).digest("hex");
}

function cacheFile(dir: string, d: DatasetPolicy): string {
  return join(dir, `in-place-${createHash("sha256").update(tableKey(d)).digest("hex").slice(0, 24)}.duckdb`);
}

/** The order hash of a position under a seed; the seed goes through the mixer (see load.ts). */
function orderHash(file: string, row: string, seed: bigint): string {
  return `hash(xor(hash(${file}, ${row}), CAST(${seed} AS UBIGINT)))`;
}

/** Attaches a cache file read-only under a name of its own; null when it cannot be. */
async function attachCache(conn: DuckDBConnection, file: string): Promise<string | null> {
  const alias = quoteIdent(`cache_${createHash("sha256").update(`${file}\0${process.pid}\0${Date.now()}`).digest("hex").slice(0, 12)}`);
  try {
    await conn.run(`ATTACH ${quoteString(file)} AS ${alias} (READ_ONLY)`);
    return alias;
  } catch {
    return null;
  }
}

/**
 * The per-unit order kept from an earlier start over the same files and declaration, attached
 * read-only (its tables `big`, the thresholds, and `rows`, the big units' rows, are read from the
 * file by every statement); null when there is none (or it was built for other files or another
 * declaration, or cannot be read).
 */
async function readCache(conn: DuckDBConnection, dir: string, d: DatasetPolicy, start: readonly FileStamp[]): Promise<{ alias: string; missing: number } | null> {
  const file = cacheFile(dir, d);
  if (!existsSync(file)) return null;
  const alias = await attachCache(conn, file);
  if (alias === null) return null;
  try {
    const meta = (await conn.runAndReadAll(`SELECT key, missing FROM ${alias}.meta`)).getRows();
    const missing = meta.length === 1 ? Number(meta[0][1]) : NaN;
    if (meta.length === 1 && meta[0][0] === cacheKey(d, start) && Number.isSafeInteger(missing) && missing >= 0) {
      // Both tables must be there with the columns the statements read.
      await conn.runAndReadAll(`SELECT __u, __thr FROM ${alias}.big LIMIT 0`);
      await conn.runAndReadAll(`SELECT __u, __h, __thr FROM ${alias}.rows LIMIT 0`);
      return { alias, missing };
    }
  } catch {
    // fall through: not usable
  }
  await conn.run(`DETACH ${alias}`).catch(() => undefined);
  return null;
}

/**
 * Keeps the per-unit order for the next start (folder and file readable by the curator's user
 * only) and attaches the written file read-only; its name, or null when it cannot be written.
 */
async function writeCache(conn: DuckDBConnection, dir: string, d: DatasetPolicy, start: readonly FileStamp[], big: string, rows: string, missing: number): Promise<string | null> {
  const file = cacheFile(dir, d);
  const tmp = `${file}.${process.pid}.tmp`;
  const alias = quoteIdent(`cachew_${process.pid}`);
  try {
    mkdirSync(dir, { recursive: true, mode: 0o700 });
    rmSync(tmp, { force: true });
    await conn.run(`ATTACH ${quoteString(tmp)} AS ${alias}`);
    try {
      await conn.run(`CREATE TABLE ${alias}.big AS SELECT * FROM ${big}`);
      await conn.run(`CREATE TABLE ${alias}.rows AS SELECT * FROM ${rows}`);
      await conn.run(`CREATE TABLE ${alias}.meta AS SELECT ${quoteString(cacheKey(d, start))} AS key, CAST(${missing} AS BIGINT) AS missing`);
    } finally {
      await conn.run(`DETACH ${alias}`);
    }
    chmodSync(tmp, 0o600);
    renameSync(tmp, file);
  } catch {
    // A cache that cannot be written costs the next start the pass again, nothing else (and a
    // leftover that cannot be removed, e.g. under a path that is not a folder, is no error either).
    try {
      rmSync(tmp, { force: true });
    } catch {
      // nothing to remove
    }
    return null;
  }
  return attachCache(conn, file);
}

/** What a start did with the start cache: read it, wrote it, could not write it, or had no folder for it. */
export type StartCache = "read" | "written" | "unwritable" | "none";

/**
 * The split path of a dataset in place with a unit: the statements run over every row without
 * bounding (`all`, a plain scan of the files), minus the same over the big units' rows without
 * bounding, plus the same over the big units' rows with bounding (`big`, a table of the start
 * pass). All three are exact integer sums per cell, so the result equals the bounded relation's
 * (shapes.ts) without a join per row over the files.
 */
export interface InPlaceSplit {
  all: string;
  /** The files themselves, when every row of them has a unit id (Relation.rows of `all`). */
  allRows?: string;
  big: string;
}

/** Relation columns of the big units' rows (every row is in a unit with more than k rows). */
export const BIG_ROWS_BOUNDING: Bounding = {
  small: () => "FALSE",
  kept: () => "__h <= __thr",
  order: "__h",
  unit: "__u",
};

export async function openInPlace(
  conn: DuckDBConnection,
  d: DatasetPolicy,
  o: FilesSource,
  index: number,
  where: string,
  bits: Bits,
  cacheDir: string | null = null,
  say: ((message: string) => void) | null = null,
): Promise<{ relation: Relation; report: LoadReport; access: string; check: () => Promise<void>; split?: InPlaceSplit; startCache?: StartCache }> {
  const schema = schemaOf(d);
  // The files, matched once (sorted, so the same files give the same positions).
  let files: string[];
  try {
    const stmt = await conn.prepare("SELECT file FROM glob($1) ORDER BY file");
    stmt.bindVarchar(1, o.pattern);
    files = ((await stmt.runAndReadAll()).getRows() as unknown[][]).map((r) => String(r[0]));
    stmt.destroySync();
  } catch (e) {
    throw new PolicyError(`${where}.source.files: cannot be listed (${engineMessage(e)})`);
  }
  if (files.length === 0) throw new PolicyError(`${where}.source.files: no file matches ${JSON.stringify(o.pattern)}`);
  if (files.length > MAX_FILES) throw new PolicyError(`${where}.source.files: matches ${files.length} files, more than ${MAX_FILES}; combine them into fewer, larger files`);
  let start: FileStamp[];
  try {
    start = await stamps(files);
  } catch {
    throw new PolicyError(`${where}.source.files: a matched file cannot be read`);
  }
  const list = `[${files.map(quoteString).join(", ")}]`;
  const unit = d.unit.column;
  let source: string;
  let header: string[];
  let srcName: (n: string) => string;
  /** DuckDB type of each source column (CSV: all text). */
  let typeOf: (n: string) => string = () => "VARCHAR";
  if (o.format === "parquet") {
    if (unit !== null) source = `read_parquet(${list}, filename = '__hush_file', file_row_number = true, union_by_name = true)`;
    else source = `read_parquet(${list}, union_by_name = true)`;
    const described = await describeColumns(conn, `read_parquet(${list}, union_by_name = true)`, `${where}.source.files`, "parquet");
    header = described.map((c) => c.name);
    srcName = (n) => n;
    typeOf = (n) => described.find((x) => x.name === n)?.type ?? "VARCHAR";
    for (const c of d.columns) {
      const found = described.find((x) => x.name === c.from);
      if (found !== undefined && !typeFits(c, found.type)) {
        throw new PolicyError(`${where}.columns.${c.name}: the files' column ${JSON.stringify(c.from)} has type ${found.type}, which cannot hold a ${c.type} column`);
      }
    }
    if (unit !== null && header.some((h) => h === "file_row_number" || h === "__hush_file")) {
      throw new PolicyError(`${where}.source.files: a column named file_row_number or __hush_file clashes with the row positions used for per-unit bounding; rename it in the files`);
    }
  } else {
    if (unit !== null) {
      throw new PolicyError(
        `${where}.unit.column: CSV files queried in place give no row positions, which per-unit bounding needs; convert them to Parquet or copy them into memory (source: <file>)`,
      );
    }
    const layout = csvLayoutOf(files[0], `${where}.source.files`);
    source = csvCall(files, layout, null);
    header = layout.header;
    srcName = (n) => `h${layout.header.indexOf(n)}`;
  }
  checkHeader(d, header, where, "the files");

  // Level 1: typed values x<i> (unfit text is NULL); level 2: the stored form (unfit values missing).
  const staged = d.columns.map((c, i) => inPlaceTyped(c, i, `src.${quoteIdent(srcName(c.from))}`, typeOf(c.from)));
  const finals = d.columns.flatMap((c, i) => inPlaceFinal(c, i, typeOf(c.from)));
  const view = quoteIdent(`v${index}`);
  const big = quoteIdent(`big${index}`);
  const k = d.unit.maxRows;
  let report: LoadReport;
  let split: InPlaceSplit | undefined;
  let startCache: StartCache | undefined;
  let access = `${o.format === "parquet" ? "Parquet" : "CSV"} in place, ${files.length} file${files.length === 1 ? "" : "s"}`;

  if (unit === null) {
    await conn.run(
      `CREATE VIEW ${view} AS SELECT ${finals.join(", ")} FROM (SELECT ${staged.join(", ")} FROM ${source} AS src)`,
    );
    report = { rows: null, rejected: 0, reasons: {} };
  } else {
    const u = `src.${quoteIdent(srcName(unit))}`;
    const rows = quoteIdent(`bigrows${index}`);
    const raw = quoteIdent(`bigraw${index}`);
    const all = quoteIdent(`all${index}`);
    // Columns of the stored form: c<i> and, for numbers, the clamping flag k<i>.
    const cols = d.columns.flatMap((c, i) => (c.type === "integer" || c.type === "number" ? [`c${i}`, `k${i}`] : [`c${i}`]));
    const plainSource = `read_parquet(${list}, union_by_name = true)`;
    const cached = cacheDir === null ? null : await readCache(conn, cacheDir, d, start);
    let bigRows: string;
    let bigUnits: string;
    /** Rows of the files without a unit id (counted by the start pass, never from file statistics). */
    let missing: number;
    if (cached !== null) {
      missing = cached.missing;
      bigRows = `${cached.alias}.rows`;
      bigUnits = `${cached.alias}.big`;
      access = `${access}; per-unit order from the start cache`;
      startCache = "read";
    } else {
      startCache = cacheDir === null ? "none" : "unwritable";
      // The one slow step of a first start (about 20 s per 100M rows on 2 cores): say so before it.
      say?.(
        `first start over these files: reading the unit column of every file to find the units above maxRows` +
          `${cacheDir === null ? "" : " (kept beside the ledger for later starts; `hush prepare` does this ahead of a start)"}`,
      );
      // The start pass: every row of a unit with more than k rows, its values in stored form and
      // its position. One read of the unit column finds the big units and, as the NULL group, the
      // rows without a unit id; one read of the files copies the big units' rows.
      const ids = quoteIdent(`bigids${index}`);
      try {
        await conn.run(
          `CREATE TEMP TABLE ${ids} AS SELECT ${u} AS __u, count(*) AS __n FROM ${plainSource} AS src ` +
            `GROUP BY 1 HAVING count(*) > ${k} OR ${u} IS NULL`,
        );
        missing = Number((await conn.runAndReadAll(`SELECT COALESCE(sum(__n), 0) FROM ${ids} WHERE __u IS NULL`)).getRows()[0][0]);
        // The big units' rows with their positions, filtered before any value is converted.
        await conn.run(
          `CREATE TABLE ${raw} AS SELECT ${finals.join(", ")}, __u, __f, __r FROM ` +
            `(SELECT ${staged.join(", ")}, ${u} AS __u, hash(src.__hush_file) AS __f, src.file_row_number AS __r ` +
            `FROM ${source} AS src SEMI JOIN (SELECT __u FROM ${ids} WHERE __u IS NOT NULL) AS b ON ${u} = b.__u)`,
        );
        await conn.run(`DROP TABLE ${ids}`);
      } catch (e) {
        throw new PolicyError(`${where}.source.files: cannot be read as parquet (${engineMessage(e)})`);
      }
      let seed: bigint | null = null;
      for (let attempt = 0; attempt < SEED_TRIES && seed === null; attempt++) {
        // The seed goes through the mixer (see load.ts: hash(x, seed) alone is far from uniform);
        // it stays inside this DuckDB instance (and the steward's state folder, when cached).
        const s = bits.uniformInt(1n << 63n);
        await conn.run(`CREATE OR REPLACE TABLE ${rows} AS SELECT ${cols.join(", ")}, __u, ${orderHash("__f", "__r", s)} AS __h FROM ${raw}`);
        // No two rows of a big unit may share an order hash (else "at or below the threshold" could keep more).
        const ties = await conn.runAndReadAll(`SELECT count(*) FROM (SELECT __u, __h FROM ${rows} GROUP BY 1, 2 HAVING count(*) > 1)`);
        if (Number(ties.getRows()[0][0]) === 0) seed = s;
      }
      if (seed === null) throw new PolicyError(`${where}: could not draw a per-unit order without ties; check the files`);
      await conn.run(`DROP TABLE ${raw}`);
      await conn.run(
        `CREATE TABLE ${big} AS SELECT __u, __h AS __thr FROM (SELECT __u, __h, row_number() OVER (PARTITION BY __u ORDER BY __h) AS __pos FROM ${rows}) WHERE __pos = ${k}`,
      );
      // Each big-unit row carries its unit's threshold (the kept rows are those at or below it).
      await conn.run(`CREATE OR REPLACE TABLE ${rows} AS SELECT r.*, b.__thr FROM ${rows} AS r JOIN ${big} AS b USING (__u)`);
      bigRows = rows;
      bigUnits = big;
      if (cacheDir !== null) {
        const alias = await writeCache(conn, cacheDir, d, start, big, rows, missing);
        if (alias === null) access = `${access}; the start cache could not be written (the next start repeats the start pass)`;
        else {
          startCache = "written";
          // Read from the cache file from now on: the rows leave memory.
          await conn.run(`DROP TABLE ${rows}`);
          await conn.run(`DROP TABLE ${big}`);
          bigRows = `${alias}.rows`;
          bigUnits = `${alias}.big`;
        }
      }
    }
    // Every row with a unit, without positions, for the split path.
    // When the start pass found no row without a unit id, the test for one is left out (it would
    // read the unit column for nothing; a count is then read from the files' metadata). The files
    // are the ones counted at start (their stamps are checked at every statement).
    await conn.run(
      `CREATE VIEW ${all} AS SELECT ${finals.join(", ")}, __u FROM (SELECT ${staged.join(", ")}, ${u} AS __u FROM ${plainSource} AS src${missing === 0 ? "" : ` WHERE ${u} IS NOT NULL`})`,
    );
    // The bounded view: the rows of small units with no threshold, and the big units' rows with
    // theirs. It is the relation's meaning (plain-SQL comparisons in tests and the bench read it);
    // the engine's statements take the split path instead (InPlaceSplit).
    await conn.run(
      `CREATE VIEW ${view} AS SELECT ${cols.join(", ")}, __u, CAST(NULL AS UBIGINT) AS __thr, CAST(NULL AS UBIGINT) AS __h FROM ${all} ` +
        `WHERE __u NOT IN (SELECT __u FROM ${bigUnits}) UNION ALL SELECT ${cols.join(", ")}, __u, __thr, __h FROM ${bigRows}`,
    );
    const units = Number((await conn.runAndReadAll(`SELECT count(*) FROM ${bigUnits}`)).getRows()[0][0]);
    // The steward sees how large the copy beside the ledger is (a count of rows, never a value).
    const copied = Number((await conn.runAndReadAll(`SELECT count(*) FROM ${bigRows}`)).getRows()[0][0]);
    split = missing === 0 ? { all, allRows: plainSource, big: bigRows } : { all, big: bigRows };
    report = { rows: null, rejected: 0, reasons: {} };
    access = `${access}; ${units} unit${units === 1 ? "" : "s"} above maxRows (${copied} row${copied === 1 ? "" : "s"} of ${units === 1 ? "it" : "them"} ${bigRows === rows ? "held in memory" : "copied beside the ledger"})`;
  }
  if (o.format === "parquet") {
    // Row count from the files' metadata (no scan).
    const n = await conn.runAndReadAll(`SELECT count(*) FROM read_parquet(${list}, union_by_name = true)`);
    report.rows = Number(n.getRows()[0][0]);
  }

  const check = async (): Promise<void> => {
    let now: FileStamp[];
    try {
      now = await stamps(files);
    } catch {
      now = [];
    }
    const same = now.length === start.length && now.every((s, i) => s.size === start[i].size && s.mtimeMs === start[i].mtimeMs);
    if (!same) {
      throw new UnreachableError(`the data files of dataset ${d.name} changed after the curator started; nothing was spent (the steward must restart the curator)`);
    }
  };
  // Without a unit every row of the files is a row of the view: a count of all of them reads the
  // files' metadata (Relation.rows). With a unit the split path's `all` part does the same.
  const countFrom = unit === null && o.format === "parquet" ? { rows: `read_parquet(${list}, union_by_name = true)` } : {};
  return { relation: { schema, from: view, ...countFrom, bounding: unit === null ? null : IN_PLACE_BOUNDING }, report, access, check, split, startCache };
}
