/**
 * PostgreSQL SQL for the answering code: the row-level steps as expressions over the steward's
 * table, and the one aggregate shape every release uses. Nothing here reads data.
 *
 * The source relation (`sourceSelect`) exposes, for every row of the table:
 *
 *   c<i>  numeric column -> BIGINT grid units, clamp(round(x / step)) to the declared range
 *         category column -> INTEGER index into the declared list (NULL for a missing value)
 *         date / boolean  -> the value itself
 *   p<i>  numeric column: non-NULL exactly when c<i> is (what a count of values reads)
 *   r<i>  category column: the value as stored (grouped on first, then mapped to c<i>'s index)
 *   v<i>  numeric column stored on the declared grid (see onGrid): the clamped value in the
 *         column's own units, NULL exactly when c<i> is; a sum reads it and scales once
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
 * zero by the cast to bigint (the rule of round(numeric), and the rule DuckDB's round applies to
 * its binary64 quotient; a double precision value enters numeric with 15 significant digits); integer
 * columns on an integer step stay in bigint arithmetic. Clamping happens before the cast to
 * bigint, so no value, however large, can make the cast fail.
 *
 * Identifiers of the steward's table and columns come from the policy and are quoted; declared
 * category values and grid bounds are steward-trusted literals written by us; everything from a
 * plan (filter literals, bins, maxRows, the seed) is a bound parameter ($1, $2, ...).
 */
import { type Grid, decimalStepDigits, decimalText } from "../../../core/index.js";
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

/** How PostgreSQL stores a declared column, as read from the catalog (pg_attribute) at start. */
export type PgKind = "int" | "numeric" | "float" | "text" | "date" | "boolean" | "enum";

export interface SourceColumn {
  policy: ColumnPolicy;
  kind: PgKind;
  /**
   * The scale s of a numeric(p, s) column whose stored values PostgreSQL itself keeps to that
   * typmod (a plain table, a materialized view, a partitioned table without foreign partitions);
   * null otherwise (no typmod, another type, a view, a foreign table or partition, whose values
   * PostgreSQL does not check against the local declaration). Such a column holds no infinity.
   */
  scale: number | null;
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

/** A bound as an SQL constant: a plain integer as is, anything else as an exact numeric. */
function constant(v: string): string {
  return /^-?[0-9]{1,18}$/.test(v) ? v : `${quoteString(v)}::numeric`;
}

/**
 * The power of ten 10^t when every value the column can hold lies on the declared grid, so that
 * grid units are the value times 10^t with no rounding: a numeric(p, s) column (scale s, trusted;
 * see SourceColumn.scale) on a step of 10^-t with t >= s. Then the sum of the clamped grid units
 * equals 10^t times the sum of the clamped values (exact numeric arithmetic; clamped values are
 * on the grid too, since the bounds are whole grid units), and a sum need not round or cast each
 * row. Null for any other column.
 */
export function onGrid(c: SourceColumn): bigint | null {
  if (c.kind !== "numeric" || c.scale === null) return null;
  const p = c.policy;
  if (p.type !== "integer" && p.type !== "number") return null;
  const t = decimalStepDigits(p.grid);
  return t !== null && t >= c.scale ? 10n ** BigInt(t) : null;
}

/** units / pow (pow = 10^t) as an exact numeric literal (PostgreSQL's numeric has no width limit). */
function decimal(units: bigint, pow: bigint): string {
  return `${quoteString(decimalText(units, pow.toString().length - 1))}::numeric`;
}

/**
 * v<i> of an on-grid column (onGrid): the value clamped to the declared range, in the column's
 * units; NULL for a missing value or one that does not fit (NaN; a non-whole number in an integer
 * column), exactly where c<i> is NULL. No infinity can be stored under a typmod.
 */
function onGridSql(x: string, p: Extract<ColumnPolicy, { grid: unknown }>, pow: bigint): string {
  const lo = decimal(p.grid.lowerUnits, pow);
  const hi = decimal(p.grid.upperUnits, pow);
  const whole = p.type === "integer" ? `WHEN ${x} <> trunc(${x}) THEN NULL ` : "";
  return `CASE ${whole}WHEN ${x} < ${lo} THEN ${lo} WHEN ${x} > ${hi} THEN CASE WHEN ${x} = 'NaN' THEN NULL ELSE ${hi} END ELSE ${x} END`;
}

/**
 * Grid units of a numeric column, and its clamping flag (-1 below the declared lower bound, 1 above
 * the upper, 0 inside, NULL when missing). A value that does not fit is NULL (missing): NaN or an
 * infinity, or a non-whole number in an integer column. NaN and +Infinity compare above every
 * number in PostgreSQL and -Infinity below, so they are looked for only in the out-of-range arms:
 * a value inside the range costs two comparisons before its rounding.
 */
function numericSql(x: string, kind: PgKind, p: Extract<ColumnPolicy, { grid: unknown }>): { value: string; flag: string } {
  const g = p.grid;
  const s = g.step;
  const whole = p.type === "integer" && kind !== "int" ? `WHEN ${x} <> trunc(${x}) THEN NULL ` : "";
  const flag = (below: string, above: string) =>
    `CASE ${whole}WHEN ${x} < ${below} THEN ${kind === "int" ? "-1" : `CASE WHEN ${x} = '-Infinity' THEN NULL ELSE -1 END`} ` +
    `WHEN ${x} > ${above} THEN ${kind === "int" ? "1" : `CASE WHEN ${x} = 'NaN' OR ${x} = 'Infinity' THEN NULL ELSE 1 END`} ` +
    `WHEN ${x} IS NULL THEN NULL ELSE 0 END`;
  const flagSql = flag(constant(p.lower), constant(p.upper));
  if (kind === "int" && s.den === 1n) {
    // Integer column, integer step: clamp in value units, then round half away from zero with
    // bigint arithmetic: sign(v) * ((2|v| + s) / (2s)). A NULL falls through and stays NULL.
    const vlo = g.lowerUnits * s.num;
    const vhi = g.upperUnits * s.num;
    if (s.num === 1n) {
      return { value: `CASE WHEN ${x} < ${vlo} THEN ${vlo}::bigint WHEN ${x} > ${vhi} THEN ${vhi}::bigint ELSE ${x}::bigint END`, flag: flagSql };
    }
    if (vlo > -INT_SAFE && vhi < INT_SAFE && s.num < INT_SAFE / 4n) {
      const v = `(CASE WHEN ${x} < ${vlo} THEN ${vlo}::bigint WHEN ${x} > ${vhi} THEN ${vhi}::bigint ELSE ${x}::bigint END)`;
      return { value: `(sign(${v}) * ((2 * abs(${v}) + ${s.num}) / ${2n * s.num}))::bigint`, flag: flagSql };
    }
  }
  // Inside [lo*step, hi*step] (exact numeric constants, folded when the statement is planned):
  // x / step = x * den / num in numeric, rounded half away from zero by the cast to bigint (as
  // round() would: numeric to integer casts round ties away from zero); outside, the end units.
  const xn = kind === "float" ? `${x}::numeric` : x;
  const lo = `(${g.lowerUnits * s.num}::numeric / ${s.den})`;
  const hi = `(${g.upperUnits * s.num}::numeric / ${s.den})`;
  const scaled = `${xn}${kind === "int" ? "::numeric" : ""} * ${s.den}${s.num === 1n ? "" : ` / ${s.num}`}`;
  const value =
    `CASE ${whole}WHEN ${xn} < ${lo} THEN ${kind === "int" ? `${g.lowerUnits}::bigint` : `CASE WHEN ${xn} = '-Infinity' THEN NULL ELSE ${g.lowerUnits}::bigint END`} ` +
    `WHEN ${xn} > ${hi} THEN ${kind === "int" ? `${g.upperUnits}::bigint` : `CASE WHEN ${xn} = 'NaN' OR ${xn} = 'Infinity' THEN NULL ELSE ${g.upperUnits}::bigint END`} ` +
    `ELSE (${scaled})::bigint END`;
  return { value, flag: flagSql };
}

/**
 * TRUE when `e` is true, FALSE when it is false or NULL (a missing value does not match, as in
 * WHERE). Written as CASE rather than COALESCE: postgres_fdw ships CASE to a shard, not COALESCE.
 */
export function isTrue(e: string): string {
  return `CASE WHEN ${e} THEN TRUE ELSE FALSE END`;
}

/**
 * The index of a category value in the declared list, NULL for a missing value or one outside the
 * list. A searched CASE (postgres_fdw ships it; the simple form CASE x WHEN ... it may not).
 */
export function categoryIndex(c: SourceColumn, raw: string): string {
  if (c.policy.type !== "category") throw new Error("internal: not a category column");
  const text = c.kind === "text" ? raw : `${raw}::text`;
  const arms = c.policy.values.map((v, j) => `WHEN ${text} = ${quoteString(v)} THEN ${j}`).join(" ");
  return `(CASE ${arms} END)`;
}

/** The c<i> expression and the reasons the row does not fit (SQL booleans, NULL-safe). */
function columnSql(c: SourceColumn, raw: string): { value: string; misfit: string[]; flag?: string; present?: string; units?: string } {
  const p = c.policy;
  switch (p.type) {
    case "integer":
    case "number": {
      const { value, flag } = numericSql(raw, c.kind, p);
      // Non-NULL exactly when c<i> is (a count of values need not round them): NaN compares
      // above 'Infinity', so the two comparisons leave out NaN and both infinities.
      const whole = p.type === "integer" && c.kind !== "int" ? ` AND ${raw} = trunc(${raw})` : "";
      // Under a trusted typmod no infinity can be stored, so one comparison leaves out NaN.
      const present =
        c.kind === "int"
          ? raw
          : c.scale !== null
            ? `CASE WHEN ${raw} < 'NaN'${whole} THEN 1 END`
            : `CASE WHEN ${raw} < 'Infinity' AND ${raw} > '-Infinity'${whole} THEN 1 END`;
      const pow = onGrid(c);
      return { value, misfit: [], flag, present, ...(pow === null ? {} : { units: onGridSql(raw, p, pow) }) };
    }
    case "category":
      // A value outside the list matches no arm: NULL, missing.
      return { value: categoryIndex(c, raw), misfit: [] };
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
    if (sql.present !== undefined) sel.push(`${sql.present} AS p${i}`);
    if (sql.units !== undefined) sel.push(`${sql.units} AS v${i}`);
    if (c.policy.type === "category") sel.push(`${raw} AS r${i}`);
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
  if (hit === "TRUE") {
    return (
      `(SELECT ${list}row_number() OVER (PARTITION BY __u ORDER BY __r) <= ${k} AS __m ` +
      `FROM (SELECT ${list}__u, __r FROM (${sourceSelect(shape, seed)}) AS __v WHERE __ok) AS __w) AS __kept`
    );
  }
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
