/**
 * Loading a dataset into a DuckDB table whose columns are already in the form the aggregates need
 * (SchemaColumn in ../types.ts): used for `source: <file>` (into memory at start) and by
 * `hush prepare` (into a DuckDB database file, once).
 *
 *   c<i>, k<i> -> the stored value and clamping flag (columns.ts)
 *   __u        -> UBIGINT hash of the unit id (only when a unit column is declared)
 *   __n        -> number of rows of that unit
 *   __rk       -> the row's rank in a random order of its unit's rows (1 for units with at most
 *                 maxRows rows); the random order comes from a CSPRNG seed drawn at load
 *
 * Rows that do not fit the declared schema are left out and counted per reason, for the steward
 * only (LoadReport and one line on stderr): unparseable numbers, dates or booleans, non-finite
 * numbers, non-whole numbers in integer columns, category values outside the declared list, dates
 * outside the declared range, missing unit ids, and CSV lines with the wrong number of fields (the
 * CSV header comes from the file's first line, never from DuckDB's sniffer). Numbers outside their
 * declared range are NOT rejected but clamped to it: clamping is what bounds the sensitivity
 * (docs/methods.md §6 recipe), and dropping such rows would make a row's presence depend on its
 * value. Empty cells are NULL.
 *
 * Hash collisions of unit ids can only merge two units into one, which keeps fewer rows of each
 * (maxRows bounds the merged unit); they can never let one unit exceed its bound.
 */
import { existsSync } from "node:fs";
import type { DuckDBConnection } from "@duckdb/node-api";
import { PolicyError } from "../../../errors.js";
import type { Bits } from "../../../core/index.js";
import type { DatasetPolicy } from "../../policy.js";
import type { LoadReport } from "../types.js";
import { engineMessage, finalSelect, quoteIdent, quoteString, rejectArms, stagingSelect, storedNames } from "./columns.js";
import { type CsvLayout, MAX_HEADER_BYTES, csvRejectReason, readCsvLayout } from "./csv-header.js";

/** A source to load from: a CSV or Parquet file, or a table (a FROM item) already in DuckDB. */
export type LoadFrom = { kind: "file"; path: string; format: "csv" | "parquet" } | { kind: "table"; from: string };

/** The source as a FROM item, its column names, and how a declared name maps to its column. */
interface SourceRead {
  from: string;
  header: string[];
  srcName: (name: string) => string;
  csv: { rejects: string; scans: string } | null;
  isCsv: boolean;
}

/**
 * CSV: no sniffing; header skipped, every column read as text under a positional name (h0, h1,
 * ...), and lines that cannot be split into exactly the header's fields are skipped and recorded
 * in the rejects tables (counted as rows left out).
 */
export function csvCall(paths: string | readonly string[], layout: CsvLayout, rejects: { rejects: string; scans: string } | null): string {
  const cols = layout.header.map((_, j) => `${quoteString(`h${j}`)}: 'VARCHAR'`).join(", ");
  const list = typeof paths === "string" ? quoteString(paths) : `[${paths.map(quoteString).join(", ")}]`;
  return (
    `read_csv(${list}, header = true, auto_detect = false, delim = ${quoteString(layout.delim)}, ` +
    `quote = '"', escape = '"', columns = {${cols}}, ignore_errors = true` +
    (rejects === null ? "" : `, store_rejects = true, rejects_table = ${quoteString(rejects.rejects)}, rejects_scan = ${quoteString(rejects.scans)}`) +
    ")"
  );
}

/** Reads a CSV header, as a PolicyError naming the dataset on failure. */
export function csvLayoutOf(file: string, where: string): CsvLayout {
  let layout: CsvLayout | null;
  try {
    layout = readCsvLayout(file);
  } catch (e) {
    throw new PolicyError(`${where}: cannot be read (${e instanceof Error && "code" in e ? String(e.code) : "error"})`);
  }
  if (layout === null) throw new PolicyError(`${where}: line 1 is not a CSV header (an open quote, or longer than ${MAX_HEADER_BYTES} bytes)`);
  return layout;
}

/** Column names of a FROM item, as DuckDB describes it. */
export async function describeColumns(conn: DuckDBConnection, from: string, where: string, what: string): Promise<{ name: string; type: string }[]> {
  try {
    const r = await conn.runAndReadAll(`DESCRIBE SELECT * FROM ${from}`);
    return r.getRows().map((row) => ({ name: String(row[0]), type: String(row[1]) }));
  } catch (e) {
    throw new PolicyError(`${where}: cannot be read as ${what} (${engineMessage(e)})`);
  }
}

/** Every declared column (and the unit column) exists exactly once in the source. */
export function checkHeader(d: DatasetPolicy, header: readonly string[], where: string, what = "the data file"): void {
  const twice = (name: string) => header.indexOf(name) !== header.lastIndexOf(name);
  for (const c of d.columns) {
    if (!header.includes(c.from)) throw new PolicyError(`${where}.columns.${c.name}: ${what} has no column ${JSON.stringify(c.from)}`);
    if (twice(c.from)) throw new PolicyError(`${where}.columns.${c.name}: ${what} has more than one column ${JSON.stringify(c.from)}`);
  }
  const unit = d.unit.column;
  if (unit !== null && !header.includes(unit)) throw new PolicyError(`${where}.unit.column: ${what} has no column ${JSON.stringify(unit)}`);
  if (unit !== null && twice(unit)) throw new PolicyError(`${where}.unit.column: ${what} has more than one column ${JSON.stringify(unit)}`);
}

async function openSource(conn: DuckDBConnection, d: DatasetPolicy, from: LoadFrom, where: string, index: number): Promise<SourceRead> {
  if (from.kind === "table") {
    const header = (await describeColumns(conn, from.from, `${where}.source`, "a table")).map((c) => c.name);
    return { from: from.from, header, srcName: (n) => n, csv: null, isCsv: false };
  }
  if (!existsSync(from.path)) throw new PolicyError(`${where}.source: file not found`);
  if (from.format === "csv") {
    const layout = csvLayoutOf(from.path, `${where}.source`);
    const csv = { rejects: `rejects${index}`, scans: `rejectscans${index}` };
    return { from: csvCall(from.path, layout, csv), header: layout.header, srcName: (n) => `h${layout.header.indexOf(n)}`, csv, isCsv: true };
  }
  const from2 = `read_parquet(${quoteString(from.path)})`;
  const header = (await describeColumns(conn, from2, `${where}.source`, "parquet")).map((c) => c.name);
  return { from: from2, header, srcName: (n) => n, csv: null, isCsv: false };
}

/**
 * Loads one dataset into `table` (a quoted, possibly qualified name) over `conn`; temporary
 * tables are suffixed with `index`. Returns the steward's report.
 */
export async function loadTable(
  conn: DuckDBConnection,
  d: DatasetPolicy,
  from: LoadFrom,
  table: string,
  index: number,
  where: string,
  bits: Bits,
): Promise<LoadReport> {
  const src = await openSource(conn, d, from, where, index);
  checkHeader(d, src.header, where);
  const unit = d.unit.column;
  const stage = quoteIdent(`stage${index}`);
  const staged: string[] = [];
  const arms: string[] = [];
  if (unit !== null) {
    const u = `src.${quoteIdent(src.srcName(unit))}`;
    // Hash of the id in its own type (a collision can only merge units, see the header).
    staged.push(`hash(${u}) AS __u`);
    staged.push(src.isCsv ? `(${u} IS NULL OR trim(${u}) = '') AS __nou` : `${u} IS NULL AS __nou`);
    arms.push(`WHEN __nou THEN 'unit id missing'`);
  }
  d.columns.forEach((c, i) => staged.push(...stagingSelect(c, i, `src.${quoteIdent(src.srcName(c.from))}`)));
  // Reasons are computed in the staging pass, where both raw and typed values are visible; only
  // the final column values and the reason are materialised.
  const all = [...arms];
  d.columns.forEach((c, i) => all.push(...rejectArms(c, i)));
  const reasonSql = all.length === 0 ? "CAST(NULL AS VARCHAR)" : `CASE ${all.join(" ")} END`;
  const stagedFinals = [...(unit !== null ? ["__u"] : []), ...d.columns.flatMap((c, i) => finalSelect(c, i)), "__why"].join(", ");
  try {
    await conn.run(
      `CREATE TEMP TABLE ${stage} AS SELECT ${stagedFinals} FROM (SELECT *, ${reasonSql} AS __why FROM (SELECT ${staged.join(", ")} FROM ${src.from} AS src))`,
    );
  } catch (e) {
    // DuckDB's message quotes the offending line; only its number is passed on.
    const line = e instanceof Error ? /line:?\s*(\d+)/i.exec(e.message)?.[1] : undefined;
    throw new PolicyError(`${where}.source: cannot be read as ${from.kind === "file" ? from.format : "a table"}${line !== undefined ? ` (problem at line ${line})` : ""}`);
  }
  const finals = storedNames(d.columns).join(", ");
  if (unit === null) {
    await conn.run(`CREATE TABLE ${table} AS SELECT ${finals} FROM ${stage} WHERE __why IS NULL`);
  } else {
    // __n: the unit's row count. __rk: the row's place in a uniformly random order of its unit's
    // rows, computed only for units above maxRows; rows of smaller units get 1. Queries keep rows
    // with __rk <= maxRows. The order is hash(hash(unit, j) XOR seed), j the row's place among its
    // own unit's rows in file order (__j), the seed from the CSPRNG. j, not the row's place in the
    // file: removing another unit's rows moves every later row in the file, and with it the order
    // of units it does not touch; j moves with nothing but the unit's own rows, so the kept subset
    // of a unit depends only on its rows and the seed (docs/methods.md §7).
    // The seed must go through the mixer. DuckDB's hash(row id, seed) combines the two hashes
    // without mixing the seed in, and its orders are far from uniform (over 20,000 random seeds,
    // one pair of 8 rows was kept together 10,075 times where a uniform 4-of-8 choice gives about
    // 4,286; this form gives 4,082-4,439 for every pair: test/engines/sources.test.ts).
    const k = d.unit.maxRows;
    const sizes = quoteIdent(`sizes${index}`);
    await conn.run(`CREATE TEMP TABLE ${sizes} AS SELECT __u, CAST(count(*) AS INTEGER) AS __n FROM ${stage} WHERE __why IS NULL GROUP BY __u`);
    const joined = `FROM ${stage} AS s JOIN ${sizes} AS z USING (__u) WHERE s.__why IS NULL`;
    const big = quoteIdent(`big${index}`);
    const stmt = await conn.prepare(
      `CREATE TEMP TABLE ${big} AS SELECT __u, __n, CAST(row_number() OVER (PARTITION BY __u ORDER BY hash(xor(hash(__u, __j), CAST($1 AS UBIGINT)))) AS INTEGER) AS __rk, ${finals} ` +
        `FROM (SELECT __u, z.__n, row_number() OVER (PARTITION BY __u ORDER BY s.rowid) AS __j, ${finals} ${joined} AND z.__n > ${k})`,
    );
    stmt.bindBigInt(1, bits.uniformInt(1n << 63n));
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
  if (src.csv !== null) {
    // Lines DuckDB could not split into the header's fields; one reason per line (a line with
    // several extra fields is reported once per field).
    const bad = await conn.runAndReadAll(`SELECT min(error_type) FROM ${quoteIdent(src.csv.rejects)} GROUP BY scan_id, file_id, line`);
    for (const [type] of bad.getRows()) {
      const why = csvRejectReason(String(type));
      reasons[why] = (reasons[why] ?? 0) + 1;
      total += 1;
    }
    await conn.run(`DROP TABLE ${quoteIdent(src.csv.rejects)}`);
    await conn.run(`DROP TABLE ${quoteIdent(src.csv.scans)}`);
  }
  return { rows: Number(kept.getRows()[0][0]), rejected: total, reasons };
}

/** The per-unit bounding of a loaded table (shapes.ts Bounding). */
export const LOADED_BOUNDING = {
  small: (k: () => string) => `__n <= ${k()}`,
  kept: (k: () => string) => `__rk <= ${k()}`,
  order: "__rk",
  unit: "__u",
};
