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
 * checked again before every statement, and a change refuses the release (nothing is spent) until
 * the curator is restarted: per-unit bounding below rests on the rows being the ones seen at start.
 *
 * Per-unit bounding without a copy. Each row's place in its unit's random order is a keyed hash
 * __h = hash(file name, row number in the file, seed) of its POSITION, never of its values, with a
 * 64-bit seed drawn from the CSPRNG at start. At start one pass finds the units with more than
 * maxRows rows (the "big" units; a small table in memory) and, for each, the maxRows-th smallest
 * __h, its threshold. Without a filter a row is kept when its unit is not big or its __h is at or
 * below the threshold: exactly maxRows rows of each big unit, uniformly chosen under the seed. The
 * start pass also checks that no two rows of a big unit share an __h (else it draws a new seed),
 * so "at or below the threshold" can never keep more. With a filter the window of shapes.ts runs
 * over the big units' rows only. Hash collisions of unit ids can only merge units (fewer rows kept
 * per unit), as in memory. Per-unit bounding needs row positions, which DuckDB gives for Parquet
 * only: a CSV source in place with a unit column is refused at start (prepare it instead).
 */
import { stat } from "node:fs/promises";
import type { DuckDBConnection } from "@duckdb/node-api";
import { PolicyError, UnreachableError } from "../../../errors.js";
import type { Bits } from "../../../core/index.js";
import type { ColumnPolicy, DatasetPolicy } from "../../policy.js";
import type { Bounding, Relation } from "../shapes.js";
import { type LoadReport, schemaOf } from "../types.js";
import { inPlaceFinal, inPlaceTyped, quoteIdent, quoteString } from "./columns.js";
import { checkHeader, csvCall, csvLayoutOf, describeColumns } from "./load.js";

type FilesSource = Extract<DatasetPolicy["origin"], { kind: "files" }>;

/** Most files one source may match (each is stat-ed before every statement). */
export const MAX_FILES = 100_000;
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

export async function openInPlace(
  conn: DuckDBConnection,
  d: DatasetPolicy,
  o: FilesSource,
  index: number,
  where: string,
  bits: Bits,
): Promise<{ relation: Relation; report: LoadReport; access: string; check: () => Promise<void> }> {
  const schema = schemaOf(d);
  // The files, matched once (sorted, so the same files give the same positions).
  let files: string[];
  try {
    const stmt = await conn.prepare("SELECT file FROM glob($1) ORDER BY file");
    stmt.bindVarchar(1, o.pattern);
    files = ((await stmt.runAndReadAll()).getRows() as unknown[][]).map((r) => String(r[0]));
    stmt.destroySync();
  } catch (e) {
    throw new PolicyError(`${where}.source.files: cannot be listed (${e instanceof Error ? e.message.split("\n")[0] : "error"})`);
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
  const srcView = quoteIdent(`src${index}`);
  const view = quoteIdent(`v${index}`);
  const big = quoteIdent(`big${index}`);
  const k = d.unit.maxRows;
  let report: LoadReport;
  let access = `${o.format === "parquet" ? "Parquet" : "CSV"} in place, ${files.length} file${files.length === 1 ? "" : "s"}`;

  if (unit === null) {
    await conn.run(
      `CREATE VIEW ${view} AS SELECT ${finals.join(", ")} FROM (SELECT ${staged.join(", ")} FROM ${source} AS src)`,
    );
    report = { rows: null, rejected: 0, reasons: {} };
  } else {
    const u = `src.${quoteIdent(srcName(unit))}`;
    for (let attempt = 0; ; attempt++) {
      if (attempt >= SEED_TRIES) throw new PolicyError(`${where}: could not draw a per-unit order without ties; check the files`);
      // The seed is written into the view's text: it stays inside this DuckDB instance.
      const seed = bits.uniformInt(1n << 63n);
      await conn.run(`DROP VIEW IF EXISTS ${view}`);
      await conn.run(`DROP TABLE IF EXISTS ${big}`);
      await conn.run(`DROP VIEW IF EXISTS ${srcView}`);
      const h = (f: string, r: string) => `hash(${f}, ${r}, CAST(${seed} AS UBIGINT))`;
      await conn.run(
        `CREATE VIEW ${srcView} AS SELECT ${finals.join(", ")}, __u, __f, __r FROM ` +
          `(SELECT ${staged.join(", ")}, hash(${u}) AS __u, src.__hush_file AS __f, src.file_row_number AS __r ` +
          `FROM ${source} AS src WHERE ${u} IS NOT NULL)`,
      );
      try {
        await conn.run(
          `CREATE TABLE ${big} AS SELECT __u, __h AS __thr FROM (SELECT __u, __h, row_number() OVER (PARTITION BY __u ORDER BY __h) AS __pos ` +
            `FROM (SELECT __u, ${h("__f", "__r")} AS __h FROM ${srcView} WHERE __u IN (SELECT __u FROM ${srcView} GROUP BY __u HAVING count(*) > ${k}))) WHERE __pos = ${k}`,
        );
      } catch (e) {
        throw new PolicyError(`${where}.source.files: cannot be read as parquet (${e instanceof Error ? e.message.split("\n")[0] : "error"})`);
      }
      const ties = await conn.runAndReadAll(
        `SELECT count(*) FROM (SELECT __u, ${h("__f", "__r")} AS __h FROM ${srcView} WHERE __u IN (SELECT __u FROM ${big}) GROUP BY 1, 2 HAVING count(*) > 1)`,
      );
      if (Number(ties.getRows()[0][0]) === 0) {
        // The order hash is computed only for rows of big units (after the join), the rest need none.
        const cols = d.columns.flatMap((c, i) => (c.type === "integer" || c.type === "number" ? [`c${i}`, `k${i}`] : [`c${i}`]));
        await conn.run(
          `CREATE VIEW ${view} AS SELECT ${cols.map((c) => `s.${c}`).join(", ")}, s.__u, b.__thr, ` +
            `CASE WHEN b.__thr IS NULL THEN NULL ELSE ${h("s.__f", "s.__r")} END AS __h FROM ${srcView} AS s LEFT JOIN ${big} AS b USING (__u)`,
        );
        break;
      }
    }
    const units = Number((await conn.runAndReadAll(`SELECT count(*) FROM ${big}`)).getRows()[0][0]);
    report = { rows: null, rejected: 0, reasons: {} };
    access = `${access}; ${units} unit${units === 1 ? "" : "s"} above maxRows`;
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
  return { relation: { schema, from: view, bounding: unit === null ? null : IN_PLACE_BOUNDING }, report, access, check };
}
