/**
 * The curator's data engine: DuckDB in memory. Each dataset is read once at start into a table
 * whose columns are already in the form the aggregates need:
 *
 *   numeric column  -> BIGINT grid units, clamp(round(x / step)) to the declared range
 *   category column -> USMALLINT index into the declared list of values
 *   date column     -> DATE,  boolean column -> BOOLEAN
 *   __u             -> UBIGINT hash of the unit id (only when a unit column is declared)
 *   __n             -> number of rows of that unit
 *   __rk            -> the row's rank in a random order of its unit's rows (1 for units with at most
 *                      maxRows rows); the random order comes from a CSPRNG seed drawn at load
 *
 * Internal column names are positional (c0, c1, ...), so no name from a plan or even from the
 * policy ever appears in query SQL; plan column names are mapped through the declared schema.
 *
 * Rows that do not fit the declared schema are left out and counted per reason, for the steward
 * only (loadReport and one line on stderr): unparseable numbers, dates or booleans, non-finite
 * numbers, non-whole numbers in integer columns, category values outside the declared list, dates
 * outside the declared range, missing unit ids, and CSV lines with the wrong number of fields (the
 * CSV header comes from the file's first line, never from DuckDB's sniffer). Numbers outside their declared range are NOT
 * rejected but clamped to it: clamping is what bounds the sensitivity (docs/methods.md §6 recipe), and
 * dropping such rows would make a row's presence depend on its value. Empty cells are NULL.
 *
 * Hash collisions of unit ids can only merge two units into one, which keeps fewer rows of each
 * (maxRows bounds the merged unit); they can never let one unit exceed its bound.
 */
import { closeSync, existsSync, openSync, readSync } from "node:fs";
import { DuckDBConnection, DuckDBInstance, type DuckDBPreparedStatement } from "@duckdb/node-api";
import { PolicyError, UnknownDatasetError } from "../errors.js";
import { Bits, cryptoBytes } from "../core/index.js";
import type { ColumnPolicy, DatasetPolicy, LoadedPolicy } from "./policy.js";

/** A value bound to a `$n` placeholder. */
export type SqlParam =
  | { type: "bigint"; value: bigint }
  | { type: "integer"; value: number }
  | { type: "varchar"; value: string }
  | { type: "boolean"; value: boolean };

export interface TableColumn {
  policy: ColumnPolicy;
  /** Quoted internal identifier, e.g. "c3". */
  ident: string;
  /** Numeric columns: quoted clamping-flag identifier, e.g. "k3" (see clampFlagSelect). */
  flag?: string;
}

export interface TableInfo {
  dataset: DatasetPolicy;
  /** Quoted internal table identifier. */
  table: string;
  /** Public columns by name (the unit column is not here). */
  columns: Map<string, TableColumn>;
  hasUnit: boolean;
}

export interface LoadReport {
  rows: number;
  rejected: number;
  reasons: Record<string, number>;
}

/** SQL identifier quoting (double quotes, inner quotes doubled). */
export function quoteIdent(name: string): string {
  return `"${name.replace(/"/g, '""')}"`;
}

/** SQL string literal for steward-trusted text (paths, declared values); never for plan input. */
function quoteString(s: string): string {
  return `'${s.replace(/'/g, "''")}'`;
}

/** Idle connections kept for reuse. */
const MAX_IDLE = 4;
/** Prepared statements kept per connection (least recently used dropped first). */
const MAX_STATEMENTS = 64;

interface PooledConnection {
  conn: DuckDBConnection;
  statements: Map<string, DuckDBPreparedStatement>;
}

function closePooled(p: PooledConnection): void {
  for (const s of p.statements.values()) s.destroySync();
  p.statements.clear();
  p.conn.closeSync();
}

function bindAll(stmt: DuckDBPreparedStatement, params: readonly SqlParam[]): void {
  params.forEach((p, i) => {
    const at = i + 1;
    switch (p.type) {
      case "bigint":
        stmt.bindBigInt(at, p.value);
        break;
      case "integer":
        stmt.bindInteger(at, p.value);
        break;
      case "varchar":
        stmt.bindVarchar(at, p.value);
        break;
      case "boolean":
        stmt.bindBoolean(at, p.value);
        break;
    }
  });
}

/** How a CSV file is read: its header names (from its first line) and the delimiter. */
interface CsvLayout {
  header: string[];
  delim: string;
}

/** The header line may be at most this long (bytes). */
const MAX_HEADER_BYTES = 1 << 20;

/**
 * Reads the first line of a CSV file in Node and splits it into names (RFC 4180 quoting; a UTF-8
 * BOM and a trailing CR are dropped). The header is read here rather than by DuckDB's sniffer,
 * because the sniffer can take a ragged data line for the header and then misname every column.
 * The delimiter is a comma, or a tab or semicolon when the header line has no comma.
 * Returns null when the first line is not a well-formed header (open quote, too long).
 */
function readCsvLayout(file: string): CsvLayout | null {
  const fd = openSync(file, "r");
  let bytes: Buffer;
  try {
    const buf = Buffer.alloc(MAX_HEADER_BYTES + 1);
    const n = readSync(fd, buf, 0, buf.length, 0);
    bytes = buf.subarray(0, n);
  } finally {
    closeSync(fd);
  }
  let text = bytes.toString("utf8");
  if (text.startsWith("\uFEFF")) text = text.slice(1);
  // End of the first line: the first newline outside quotes.
  let inQuote = false;
  let end = -1;
  for (let i = 0; i < text.length; i++) {
    const ch = text[i];
    if (ch === '"') inQuote = !inQuote;
    else if (ch === "\n" && !inQuote) {
      end = i;
      break;
    }
  }
  if (end < 0) {
    if (bytes.length > MAX_HEADER_BYTES || inQuote) return null;
    end = text.length;
  }
  const line = text.slice(0, end).replace(/\r$/, "");
  const delim = line.includes(",") || line.length === 0 ? "," : line.includes("\t") ? "\t" : line.includes(";") ? ";" : ",";
  const header: string[] = [];
  let field = "";
  let quoted = false;
  for (let i = 0; i < line.length; i++) {
    const ch = line[i];
    if (quoted) {
      if (ch === '"' && line[i + 1] === '"') {
        field += '"';
        i++;
      } else if (ch === '"') quoted = false;
      else field += ch;
    } else if (ch === '"') quoted = true;
    else if (ch === delim) {
      header.push(field);
      field = "";
    } else field += ch;
  }
  if (line.length > 0) header.push(field);
  return { header, delim };
}

/** Line-level CSV problems (DuckDB reject error types) as steward-facing reasons; never values. */
function csvRejectReason(errorType: string): string {
  switch (errorType) {
    case "MISSING COLUMNS":
    case "TOO MANY COLUMNS":
      return "wrong number of fields";
    case "INVALID UNICODE":
      return "not valid UTF-8";
    case "UNQUOTED VALUE":
      return "malformed quoting";
    case "LINE SIZE OVER MAXIMUM":
      return "line too long";
    default:
      return "malformed line";
  }
}

/**
 * The source as a table function. CSV: no sniffing; header skipped, every column read as text
 * under a positional name (h0, h1, ...), and lines that cannot be split into exactly the header's
 * fields are skipped and recorded in the rejects tables (counted as rows left out).
 */
function sourceCall(d: DatasetPolicy, csv: { layout: CsvLayout; rejects: string; scans: string } | null): string {
  if (d.format !== "csv" || csv === null) return `read_parquet(${quoteString(d.source)})`;
  const cols = csv.layout.header.map((_, j) => `${quoteString(`h${j}`)}: 'VARCHAR'`).join(", ");
  return (
    `read_csv(${quoteString(d.source)}, header = true, auto_detect = false, delim = ${quoteString(csv.layout.delim)}, ` +
    `quote = '"', escape = '"', columns = {${cols}}, ignore_errors = true, store_rejects = true, ` +
    `rejects_table = ${quoteString(csv.rejects)}, rejects_scan = ${quoteString(csv.scans)})`
  );
}

/** Typed value and a "was something there" flag for one column of the staging table. */
function stagingSelect(c: ColumnPolicy, i: number, srcName: (name: string) => string): string[] {
  const src = `src.${quoteIdent(srcName(c.from))}`;
  const present = `${src} IS NOT NULL AS p${i}`;
  switch (c.type) {
    case "integer":
    case "number":
      return [`TRY_CAST(${src} AS DOUBLE) AS x${i}`, present];
    case "category": {
      const arms = c.values.map((v, j) => `WHEN ${quoteString(v)} THEN ${j}`).join(" ");
      return [`CASE CAST(${src} AS VARCHAR) ${arms} END AS x${i}`, present];
    }
    case "date":
      return [`TRY_CAST(${src} AS DATE) AS x${i}`, present];
    case "boolean":
      return [`TRY_CAST(${src} AS BOOLEAN) AS x${i}`, present];
  }
}

/** Why a staged row is rejected (first reason wins), as SQL CASE arms. Reasons name columns, never values. */
function rejectArms(c: ColumnPolicy, i: number): string[] {
  const why = (s: string) => quoteString(`${c.name}: ${s}`);
  switch (c.type) {
    case "integer":
    case "number": {
      const arms = [
        `WHEN p${i} AND x${i} IS NULL THEN ${why("not a number")}`,
        `WHEN p${i} AND NOT isfinite(x${i}) THEN ${why("not a finite number")}`,
      ];
      if (c.type === "integer") arms.push(`WHEN p${i} AND x${i} <> round(x${i}) THEN ${why("not a whole number")}`);
      return arms;
    }
    case "category":
      return [`WHEN p${i} AND x${i} IS NULL THEN ${why("value outside the declared list")}`];
    case "date":
      return [
        `WHEN p${i} AND x${i} IS NULL THEN ${why("not a date")}`,
        `WHEN x${i} < DATE ${quoteString(c.lower)} OR x${i} > DATE ${quoteString(c.upper)} THEN ${why("date outside the declared range")}`,
      ];
    case "boolean":
      return [`WHEN p${i} AND x${i} IS NULL THEN ${why("not a boolean")}`];
  }
}

/** Final stored form of a staged column. Grid bounds are integers we computed from the policy. */
function finalSelect(c: ColumnPolicy, i: number): string {
  switch (c.type) {
    case "integer":
    case "number": {
      const lo = c.grid.lowerUnits.toString();
      const hi = c.grid.upperUnits.toString();
      // Clamp in floating point first (so the cast cannot overflow), then round to the grid:
      // the result is an integer in [lo, hi] whatever the rounding error of x / step.
      // DuckDB's LEAST/GREATEST skip NULLs, so a missing value must be kept NULL explicitly.
      return `CASE WHEN x${i} IS NULL THEN NULL ELSE CAST(round(LEAST(GREATEST(x${i} / CAST(${quoteString(c.step)} AS DOUBLE), ${lo}), ${hi})) AS BIGINT) END AS c${i}`;
    }
    case "category":
      return `CAST(x${i} AS USMALLINT) AS c${i}`;
    default:
      return `x${i} AS c${i}`;
  }
}

// ---- [clamping flags, issue 13] ------------------------------------------------------------
// One small column k<i> per numeric column: -1 when the raw value was below the declared lower
// bound, 1 above the upper bound, 0 inside (a value exactly at a bound is not clamped), NULL when
// missing. The clamped-share release (aggregates/clamped.ts) counts them; nothing else reads them.
// Same rule as the engine interface's atLower/atUpper terms (engines/types.ts on the engine split).
function clampFlagSelect(c: ColumnPolicy, i: number): string[] {
  if (c.type !== "integer" && c.type !== "number") return [];
  return [
    `CAST(CASE WHEN x${i} IS NULL THEN NULL WHEN x${i} < CAST(${quoteString(c.lower)} AS DOUBLE) THEN -1 ` +
      `WHEN x${i} > CAST(${quoteString(c.upper)} AS DOUBLE) THEN 1 ELSE 0 END AS TINYINT) AS k${i}`,
  ];
}
function clampFlagNames(cols: readonly ColumnPolicy[]): string[] {
  return cols.flatMap((c, i) => (c.type === "integer" || c.type === "number" ? [`k${i}`] : []));
}
// ---- [end clamping flags] ------------------------------------------------------------------

/** What determines a loaded table: the file, its format, the declared columns and the unit. */
function tableKey(d: DatasetPolicy): string {
  const cols = d.columns.map((c) => {
    const { grid: _grid, ...rest } = c as ColumnPolicy & { grid?: unknown };
    return rest;
  });
  return JSON.stringify([d.source, d.format, cols, d.unit.column, d.unit.maxRows]);
}

export class Engine {
  private readonly instance: DuckDBInstance;
  private readonly tables: Map<string, TableInfo>;
  private readonly reports: Map<string, LoadReport>;
  private readonly policy: LoadedPolicy;
  private readonly bits: Bits;
  private closed = false;
  private readonly idle: PooledConnection[] = [];

  private constructor(policy: LoadedPolicy, instance: DuckDBInstance, bits: Bits) {
    this.policy = policy;
    this.instance = instance;
    this.bits = bits;
    this.tables = new Map();
    this.reports = new Map();
  }

  /** Loads every dataset of the policy (or the named subset) into memory. */
  static async open(policy: LoadedPolicy, opts: { datasets?: string[]; quiet?: boolean; bits?: Bits } = {}): Promise<Engine> {
    const names = opts.datasets ?? [...policy.datasets.keys()];
    for (const n of names) {
      if (!policy.datasets.has(n)) throw new UnknownDatasetError(`no dataset named ${JSON.stringify(n.slice(0, 64))} in the policy`);
    }
    const instance = await DuckDBInstance.create(":memory:");
    const engine = new Engine(policy, instance, opts.bits ?? new Bits(cryptoBytes));
    try {
      const conn = await instance.connect();
      try {
        for (const [i, n] of names.entries()) {
          const d = policy.datasets.get(n)!;
          // Datasets that differ only in caps or analysts (same file, schema and unit) share one table.
          const same = [...engine.tables.values()].find((t) => tableKey(t.dataset) === tableKey(d));
          if (same !== undefined) {
            engine.tables.set(n, { ...same, dataset: d });
            engine.reports.set(n, engine.reports.get(same.dataset.name)!);
          } else {
            await engine.load(conn, d, i);
          }
          if (!opts.quiet) {
            const r = engine.reports.get(n)!;
            const why = Object.entries(r.reasons)
              .map(([k, v]) => `${k}: ${v}`)
              .join("; ");
            process.stderr.write(
              `hush curator: dataset ${n}: ${same !== undefined ? `shares the table of ${same.dataset.name}: ` : ""}loaded ${r.rows} rows, left out ${r.rejected}${r.rejected > 0 ? ` (${why})` : ""}\n`,
            );
          }
        }
      } finally {
        conn.closeSync();
      }
    } catch (e) {
      instance.closeSync();
      throw e;
    }
    return engine;
  }

  private async load(conn: DuckDBConnection, d: DatasetPolicy, index: number): Promise<void> {
    const where = `policy ${this.policy.file}: datasets.${d.name}`;
    if (!existsSync(d.source)) throw new PolicyError(`${where}.source: file not found`);
    let header: string[];
    let csv: { layout: CsvLayout; rejects: string; scans: string } | null = null;
    if (d.format === "csv") {
      let layout: CsvLayout | null;
      try {
        layout = readCsvLayout(d.source);
      } catch (e) {
        throw new PolicyError(`${where}.source: cannot be read (${e instanceof Error && "code" in e ? String(e.code) : "error"})`);
      }
      if (layout === null) throw new PolicyError(`${where}.source: line 1 is not a CSV header (an open quote, or longer than ${MAX_HEADER_BYTES} bytes)`);
      csv = { layout, rejects: `rejects${index}`, scans: `rejectscans${index}` };
      header = layout.header;
    } else {
      try {
        const r = await conn.runAndReadAll(`DESCRIBE SELECT * FROM ${sourceCall(d, null)}`);
        header = r.getRows().map((row) => String(row[0]));
      } catch (e) {
        throw new PolicyError(`${where}.source: cannot be read as ${d.format} (${e instanceof Error ? e.message.split("\n")[0] : "error"})`);
      }
    }
    const twice = (name: string) => header.indexOf(name) !== header.lastIndexOf(name);
    for (const c of d.columns) {
      if (!header.includes(c.from)) throw new PolicyError(`${where}.columns.${c.name}: the data file has no column ${JSON.stringify(c.from)}`);
      if (twice(c.from)) throw new PolicyError(`${where}.columns.${c.name}: the data file has more than one column ${JSON.stringify(c.from)}`);
    }
    const unit = d.unit.column;
    if (unit !== null && !header.includes(unit)) throw new PolicyError(`${where}.unit.column: the data file has no column ${JSON.stringify(unit)}`);
    if (unit !== null && twice(unit)) throw new PolicyError(`${where}.unit.column: the data file has more than one column ${JSON.stringify(unit)}`);
    // CSV columns are read under positional names (h0, h1, ...); Parquet columns under their own.
    const srcName = (name: string) => (csv === null ? name : `h${header.indexOf(name)}`);
    const source = sourceCall(d, csv);

    const stage = quoteIdent(`stage${index}`);
    const table = quoteIdent(`d${index}`);
    const staged: string[] = [];
    const arms: string[] = [];
    if (unit !== null) {
      const u = `src.${quoteIdent(srcName(unit))}`;
      // Hash of the id in its own type (a collision can only merge units, see the header).
      staged.push(`hash(${u}) AS __u`);
      staged.push(d.format === "csv" ? `(${u} IS NULL OR trim(${u}) = '') AS __nou` : `${u} IS NULL AS __nou`);
      arms.push(`WHEN __nou THEN 'unit id missing'`);
    }
    d.columns.forEach((c, i) => {
      staged.push(...stagingSelect(c, i, srcName));
    });
    // Reasons are computed in the staging pass, where both raw and typed values are visible; only
    // the final column values and the reason are materialised.
    const reasonSql = (() => {
      const all = [...arms];
      d.columns.forEach((c, i) => all.push(...rejectArms(c, i)));
      return all.length === 0 ? "CAST(NULL AS VARCHAR)" : `CASE ${all.join(" ")} END`;
    })();
    const stagedFinals = [
      ...(unit !== null ? ["__u"] : []),
      ...d.columns.map((c, i) => finalSelect(c, i)),
      ...d.columns.flatMap((c, i) => clampFlagSelect(c, i)), // [clamping flags, issue 13]
      "__why",
    ].join(", ");
    try {
      await conn.run(
        `CREATE TEMP TABLE ${stage} AS SELECT ${stagedFinals} FROM (SELECT *, ${reasonSql} AS __why FROM (SELECT ${staged.join(", ")} FROM ${source} AS src))`,
      );
    } catch (e) {
      // DuckDB's message quotes the offending line; only its number is passed on.
      const line = e instanceof Error ? /line:?\s*(\d+)/i.exec(e.message)?.[1] : undefined;
      throw new PolicyError(`${where}.source: cannot be read as ${d.format}${line !== undefined ? ` (problem at line ${line})` : ""}`);
    }
    const finals = [...d.columns.map((_, i) => `c${i}`), ...clampFlagNames(d.columns)].join(", "); // [clamping flags, issue 13]
    if (unit === null) {
      await conn.run(`CREATE TABLE ${table} AS SELECT ${finals} FROM ${stage} WHERE __why IS NULL`);
    } else {
      // __n: the unit's row count. __rk: the row's place in a uniformly random order of its unit's
      // rows (hash of the row id under a seed from the CSPRNG), computed only for units above
      // maxRows; rows of smaller units get 1. Queries keep rows with __rk <= maxRows.
      const k = d.unit.maxRows;
      const sizes = quoteIdent(`sizes${index}`);
      await conn.run(`CREATE TEMP TABLE ${sizes} AS SELECT __u, CAST(count(*) AS INTEGER) AS __n FROM ${stage} WHERE __why IS NULL GROUP BY __u`);
      const joined = `FROM ${stage} AS s JOIN ${sizes} AS z USING (__u) WHERE s.__why IS NULL`;
      const big = quoteIdent(`big${index}`);
      const stmt = await conn.prepare(
        `CREATE TEMP TABLE ${big} AS SELECT __u, z.__n, CAST(row_number() OVER (PARTITION BY __u ORDER BY hash(s.rowid, $1)) AS INTEGER) AS __rk, ${finals} ${joined} AND z.__n > ${k}`,
      );
      stmt.bindBigInt(1, this.bits.uniformInt(1n << 63n));
      await stmt.run();
      stmt.destroySync();
      // Rows kept without a filter come first, so the scans of unfiltered queries see row groups
      // whose __rk statistics already satisfy the bound.
      await conn.run(
        `CREATE TABLE ${table} AS SELECT __u, z.__n, 1 AS __rk, ${finals} ${joined} AND z.__n <= ${k} ` +
          `UNION ALL SELECT * FROM ${big} WHERE __rk <= ${k} UNION ALL SELECT * FROM ${big} WHERE __rk > ${k}`,
      );
      await conn.run(`DROP TABLE ${big}`);
      await conn.run(`DROP TABLE ${sizes}`);
    }
    const rejected = await conn.runAndReadAll(`SELECT __why, count(*) FROM ${stage} WHERE __why IS NOT NULL GROUP BY __why ORDER BY __why`);
    const kept = await conn.runAndReadAll(`SELECT count(*) FROM ${table}`);
    await conn.run(`DROP TABLE ${stage}`);

    const reasons: Record<string, number> = {};
    let total = 0;
    for (const [why, n] of rejected.getRows()) {
      reasons[String(why)] = Number(n);
      total += Number(n);
    }
    if (csv !== null) {
      // Lines DuckDB could not split into the header's fields; one reason per line (a line with
      // several extra fields is reported once per field).
      const bad = await conn.runAndReadAll(
        `SELECT min(error_type) FROM ${quoteIdent(csv.rejects)} GROUP BY scan_id, file_id, line`,
      );
      for (const [type] of bad.getRows()) {
        const why = csvRejectReason(String(type));
        reasons[why] = (reasons[why] ?? 0) + 1;
        total += 1;
      }
      await conn.run(`DROP TABLE ${quoteIdent(csv.rejects)}`);
      await conn.run(`DROP TABLE ${quoteIdent(csv.scans)}`);
    }
    this.reports.set(d.name, { rows: Number(kept.getRows()[0][0]), rejected: total, reasons });
    const columns = new Map<string, TableColumn>();
    d.columns.forEach((c, i) =>
      columns.set(c.name, { policy: c, ident: quoteIdent(`c${i}`), ...(c.type === "integer" || c.type === "number" ? { flag: quoteIdent(`k${i}`) } : {}) }),
    ); // flag: [clamping flags, issue 13]
    this.tables.set(d.name, { dataset: d, table, columns, hasUnit: unit !== null });
  }

  /** Steward-only: how many rows were kept and why others were left out. Never sent to analysts. */
  loadReport(dataset: string): LoadReport {
    const r = this.reports.get(dataset);
    if (r === undefined) throw new UnknownDatasetError(`dataset ${JSON.stringify(dataset.slice(0, 64))} is not loaded`);
    return { rows: r.rows, rejected: r.rejected, reasons: { ...r.reasons } };
  }

  /** The loaded table behind a dataset. */
  table(dataset: string): TableInfo {
    const t = this.tables.get(dataset);
    if (t === undefined) throw new UnknownDatasetError(`dataset ${JSON.stringify(dataset.slice(0, 64))} is not loaded`);
    return t;
  }

  hasDataset(dataset: string): boolean {
    return this.tables.has(dataset);
  }

  /**
   * Runs one parameterized statement and returns all rows. Every value comes in through `params`
   * (bound to $1, $2, ...); `sql` is built only from internal identifiers and placeholders.
   */
  async query(sql: string, params: readonly SqlParam[]): Promise<unknown[][]> {
    if (this.closed) throw new Error("engine is closed");
    // Connections are reused: a fresh DuckDB connection costs milliseconds on its first statement.
    // Each keeps its prepared statements by SQL text: every plan of one shape has the same text
    // (all values are bound), so DuckDB parses and plans it once per connection, not per release.
    const pooled = this.idle.pop() ?? { conn: await this.instance.connect(), statements: new Map<string, DuckDBPreparedStatement>() };
    let healthy = false;
    try {
      let stmt = pooled.statements.get(sql);
      if (stmt === undefined) {
        stmt = await pooled.conn.prepare(sql);
        if (pooled.statements.size >= MAX_STATEMENTS) {
          const [oldest, old] = pooled.statements.entries().next().value!;
          pooled.statements.delete(oldest);
          old.destroySync();
        }
      } else {
        pooled.statements.delete(sql); // re-inserted below: Map order is least recently used first
      }
      pooled.statements.set(sql, stmt);
      stmt.clearBindings();
      bindAll(stmt, params);
      const reader = await stmt.runAndReadAll();
      healthy = true;
      return reader.getRows() as unknown[][];
    } finally {
      if (healthy && !this.closed && this.idle.length < MAX_IDLE) this.idle.push(pooled);
      else closePooled(pooled);
    }
  }

  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    for (const c of this.idle.splice(0)) closePooled(c);
    this.instance.closeSync();
  }
}
