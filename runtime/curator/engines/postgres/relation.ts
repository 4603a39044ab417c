/**
 * PostgreSQL SQL for the answering code: the row-level steps as expressions over the steward's
 * table, and the one aggregate shape every release uses. Nothing here reads data.
 *
 * The source relation (`sourceSelect`) exposes, for every row of the table:
 *
 *   c<i>  numeric column -> BIGINT grid units, clamp(round(x / step)) to the declared range
 *         category column -> INTEGER index into the declared list (NULL for a missing value)
 *         date / boolean  -> the value itself
 *   k<i>  numeric column: -1 when the raw value lay below the declared lower bound, 1 above the
 *         upper bound, 0 otherwise, NULL when missing (the clamping flag of engines/types.ts)
 *   __u   the unit id as stored (only with a unit column)
 *   __r   the row's place in a random order of the table (hashtextextended of the row's ctid under
 *         a 64-bit seed drawn from the CSPRNG at start; a view, which has no ctid, hashes the whole
 *         row under the seed). It never looks at a value of a table row
 *   __ok  the row has a unit id (always true without a unit column); rows without one are left out
 *
 * A value that does not fit its declared type is MISSING (NULL), the same for every query, as in
 * DuckDB's files-in-place engine (engines/duckdb/in-place.ts): NaN or an infinity, a non-whole
 * number in an integer column, a category value outside the declared list, a date outside the
 * declared range. Only the columns a statement reads are checked, so a count reads no value at all.
 *
 * Rounding is exact: x * (den/num of the step) in PostgreSQL's numeric, rounded half away from
 * zero (round(numeric)), the same rule DuckDB's round applies to its binary64 quotient; integer
 * columns on an integer step stay in bigint arithmetic. Clamping happens before the cast to
 * bigint, so no value, however large, can make the cast fail.
 *
 * Identifiers of the steward's table and columns come from the policy and are quoted; declared
 * category values and grid bounds are steward-trusted literals written by us; everything from a
 * plan (filter literals, bins, maxRows, the seed) is a bound parameter ($1, $2, ...).
 */
import type { Grid } from "../../../core/index.js";
import type { ColumnPolicy, DatasetPolicy } from "../../policy.js";
import type { Params } from "../../sql.js";

/** SQL identifier quoting (double quotes, inner quotes doubled). */
export function quoteIdent(name: string): string {
  return `"${name.replace(/"/g, '""')}"`;
}

/** SQL string literal (standard_conforming_strings is forced on for every connection). */
export function quoteString(s: string): string {
  return `'${s.replace(/'/g, "''")}'`;
}

/** How PostgreSQL stores a declared column, as read from information_schema at start. */
export type PgKind = "int" | "numeric" | "float" | "text" | "date" | "boolean" | "enum";

export interface SourceColumn {
  policy: ColumnPolicy;
  kind: PgKind;
}

export interface SourceShape {
  /** Quoted, schema-qualified relation. */
  relation: string;
  /** Tables (plain, partitioned, foreign) have a ctid; views do not. */
  hasCtid: boolean;
  dataset: DatasetPolicy;
  columns: SourceColumn[];
  /** Secret 64-bit seed of the rank order __r (drawn from the CSPRNG at start, never sent anywhere else). */
  seed: bigint;
}

const INT_SAFE = 1n << 62n;

/**
 * clamp(x, lo, hi) as a searched CASE. Not LEAST/GREATEST: postgres_fdw does not send those to a
 * shard, and CASE it does, so a sharded table's row-level steps can run on the shards. A NULL
 * falls through to the ELSE and stays NULL.
 */
function clamp(x: string, lo: string, hi: string): string {
  return `CASE WHEN ${x} < ${lo} THEN ${lo} WHEN ${x} > ${hi} THEN ${hi} ELSE ${x} END`;
}

function gridUnits(x: string, kind: PgKind, g: Grid): string {
  const s = g.step;
  if (kind === "int" && s.den === 1n) {
    // Integer column, integer step: clamp in value units, then round half away from zero with
    // bigint arithmetic: sign(v) * ((2|v| + s) / (2s)).
    if (s.num === 1n) return `(${clamp(`${x}::bigint`, `${g.lowerUnits}::bigint`, `${g.upperUnits}::bigint`)})`;
    const vlo = g.lowerUnits * s.num;
    const vhi = g.upperUnits * s.num;
    if (vlo > -INT_SAFE && vhi < INT_SAFE && s.num < INT_SAFE / 4n) {
      const v = `(${clamp(`${x}::bigint`, `${vlo}::bigint`, `${vhi}::bigint`)})`;
      return `(sign(${v}) * ((2 * abs(${v}) + ${s.num}) / ${2n * s.num}))::bigint`;
    }
  }
  // Clamp in value units to the grid's end points lo*step and hi*step (exact numeric constants,
  // folded when the statement is planned), then x / step = x * den / num in numeric, rounded half
  // away from zero. The clamp keeps the result inside [lo, hi] and the bigint cast from failing.
  const lo = `(${g.lowerUnits * s.num}::numeric / ${s.den})`;
  const hi = `(${g.upperUnits * s.num}::numeric / ${s.den})`;
  const scaled = `(${clamp(x, lo, hi)})::numeric * ${s.den}${s.num === 1n ? "" : ` / ${s.num}`}`;
  return `round(${scaled})::bigint`;
}

/**
 * TRUE when `e` is true, FALSE when it is false or NULL (a missing value does not match, as in
 * WHERE). Written as CASE rather than COALESCE: postgres_fdw ships CASE to a shard, not COALESCE.
 */
export function isTrue(e: string): string {
  return `CASE WHEN ${e} THEN TRUE ELSE FALSE END`;
}

/** NaN or an infinity (numeric and double precision hold both). Plain comparisons, which postgres_fdw ships. */
function nonFinite(x: string): string {
  return `(${x} = 'NaN' OR ${x} = 'Infinity' OR ${x} = '-Infinity')`;
}

/** The c<i> expression and the reasons the row does not fit (SQL booleans, NULL-safe). */
function columnSql(c: SourceColumn, raw: string): { value: string; misfit: string[]; flag?: string } {
  const p = c.policy;
  switch (p.type) {
    case "integer":
    case "number": {
      const misfit: string[] = [];
      if (c.kind !== "int") {
        misfit.push(`${raw} IS NOT NULL AND ${nonFinite(raw)}`);
        if (p.type === "integer") misfit.push(`${raw} IS NOT NULL AND NOT ${nonFinite(raw)} AND ${raw} <> trunc(${raw})`);
      }
      const lower = c.kind === "int" ? p.lower : `${quoteString(p.lower)}::numeric`;
      const upper = c.kind === "int" ? p.upper : `${quoteString(p.upper)}::numeric`;
      const asNum = c.kind === "float" ? `${raw}::numeric` : raw;
      const safe = c.kind === "float" ? `NOT ${nonFinite(raw)} AND ` : "";
      return {
        value: `CASE WHEN ${raw} IS NULL THEN NULL ELSE ${gridUnits(raw, c.kind, p.grid)} END`,
        misfit,
        // A NaN or infinite value is missing (sourceSelect); the guard keeps the comparison exact.
        flag: `CASE WHEN ${raw} IS NULL THEN NULL WHEN ${safe}${asNum} < ${lower} THEN -1 WHEN ${safe}${asNum} > ${upper} THEN 1 ELSE 0 END`,
      };
    }
    case "category": {
      const text = c.kind === "text" ? raw : `${raw}::text`;
      // A searched CASE (postgres_fdw ships it; the simple form CASE x WHEN ... it may not).
      const arms = p.values.map((v, j) => `WHEN ${text} = ${quoteString(v)} THEN ${j}`).join(" ");
      const value = `(CASE ${arms} END)`;
      // A value outside the list matches no arm: NULL, missing.
      return { value, misfit: [] };
    }
    case "date":
      return {
        value: raw,
        misfit: [`${raw} < DATE ${quoteString(p.lower)} OR ${raw} > DATE ${quoteString(p.upper)}`],
      };
    case "boolean":
      return { value: raw, misfit: [] };
  }
}

/**
 * The source relation (see the file header). `seed` is the placeholder of the 64-bit rank seed.
 * Only the columns a query names are computed: PostgreSQL drops unused outputs of a subquery it
 * flattens.
 */
export function sourceSelect(shape: SourceShape, seed: string): string {
  const sel: string[] = [];
  shape.columns.forEach((c, i) => {
    const raw = `__s.${quoteIdent(c.policy.from)}`;
    const sql = columnSql(c, raw);
    // A value that does not fit its declared type is missing (NULL), in this query and every other.
    const unfit = sql.misfit.length === 0 ? null : sql.misfit.map((m) => `(${m})`).join(" OR ");
    const missing = (e: string) => (unfit === null ? e : `CASE WHEN ${unfit} THEN NULL ELSE ${e} END`);
    sel.push(`${missing(sql.value)} AS c${i}`);
    if (sql.flag !== undefined) sel.push(`${missing(sql.flag)} AS k${i}`);
  });
  const unit = shape.dataset.unit.column;
  if (unit !== null) {
    const u = `__s.${quoteIdent(unit)}`;
    sel.push(`${u} AS __u`);
    const id = shape.hasCtid ? "__s.ctid::text" : "__s::text";
    sel.push(`hashtextextended(${id}, ${seed}) AS __r`);
  }
  // Only a missing unit id leaves a whole row out (it cannot be bounded).
  sel.push(unit === null ? "TRUE AS __ok" : `__s.${quoteIdent(unit)} IS NOT NULL AS __ok`);
  return `SELECT ${sel.join(", ")} FROM ${shape.relation} AS __s`;
}

/**
 * The kept rows, as a FROM item with a match flag __m: filtered rows, each unit bounded to at
 * most maxRows rows. Every row of the table that fits the schema is scanned, windowed and handed
 * to the aggregates whatever the filter matches (aggregates take FILTER (WHERE __m)), so the SQL's
 * work does not follow the filter. In a unit with more than maxRows rows, the matching rows come
 * first in the random order __r and the first maxRows of them are kept: a uniformly random subset
 * of its matching rows, chosen from its own rows only (the stability argument of docs/methods.md §7).
 *
 * `cols` are the c<i>/k<i> names the aggregate reads; `where` is compiled over c<i>.
 */
export function flaggedFrom(shape: SourceShape, where: string, cols: readonly string[], ps: Params): string {
  const uniq = [...new Set(cols)];
  const list = uniq.length === 0 ? "" : `${uniq.join(", ")}, `;
  const seedless = shape.dataset.unit.column === null;
  const hit = where === "TRUE" ? "TRUE" : isTrue(where);
  if (seedless) {
    // Each row is its own unit: no window, and the filter is a flag, not a WHERE.
    return `(SELECT ${list}${hit} AS __m FROM (${sourceSelect(shape, "0")}) AS __v WHERE __ok) AS __kept`;
  }
  const seed = ps.add({ type: "bigint", value: shape.seed });
  const k = ps.add({ type: "integer", value: shape.dataset.unit.maxRows });
  return (
    `(SELECT ${list}(__h AND row_number() OVER (PARTITION BY __u ORDER BY __h DESC, __r) <= ${k}) AS __m ` +
    `FROM (SELECT ${list}${hit} AS __h, __u, __r FROM (${sourceSelect(shape, seed)}) AS __v WHERE __ok) AS __w) AS __kept`
  );
}

/**
 * Per unit, min(matching rows, maxRows) as __n, grouped by the unit column itself: the kept count
 * of each unit, whichever rows the window of flaggedFrom would keep. The GROUP BY is on the raw
 * unit column, so over a table hash-partitioned on it PostgreSQL aggregates each partition on its
 * own (enable_partitionwise_aggregate) and postgres_fdw sends that aggregate to the shard.
 */
export function unitCounts(shape: SourceShape, where: string, ps: Params): string {
  const hit = where === "TRUE" ? "TRUE" : isTrue(where);
  const k = ps.add({ type: "integer", value: shape.dataset.unit.maxRows });
  return (
    `(SELECT least(count(*) FILTER (WHERE __h), ${k}) AS __n FROM (SELECT ${hit} AS __h, __u FROM (${sourceSelect(shape, "0")}) AS __v WHERE __ok) AS __w ` +
    `GROUP BY __u) AS __p`
  );
}
