/**
 * Row-level steps as DuckDB SQL, shared by the load into memory (load.ts), the prepared file
 * (prepare.ts) and the in-place view (in-place.ts): typing a raw value by its declared column,
 * the reasons a value does not fit, and the stored form (grid units, clamping flag, category
 * index). Only steward-trusted text (declared values, bounds we computed) is written into SQL.
 */
import { decimalStepDigits, decimalText } from "../../../core/index.js";
import type { ColumnPolicy } from "../../policy.js";

/** SQL identifier quoting (double quotes, inner quotes doubled). */
export function quoteIdent(name: string): string {
  return `"${name.replace(/"/g, '""')}"`;
}

/** SQL string literal for steward-trusted text (paths, declared values); never for plan input. */
export function quoteString(s: string): string {
  return `'${s.replace(/'/g, "''")}'`;
}

/** Typed value x<i> and a "was something there" flag p<i> for one column. */
export function stagingSelect(c: ColumnPolicy, i: number, src: string): string[] {
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

/** Why a staged value does not fit (first reason wins), as CASE arms. Reasons name columns, never values. */
export function rejectArms(c: ColumnPolicy, i: number): string[] {
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

/**
 * Stored form of a typed column: c<i>, and for numeric columns the clamping flag k<i> (-1 below
 * the lower bound, 1 above the upper bound, 0 inside, NULL when missing). Grid bounds are integers
 * we computed from the policy. `x` is the typed value expression (NULL when missing or unfit).
 */
export function finalSelect(c: ColumnPolicy, i: number, x = `x${i}`): string[] {
  switch (c.type) {
    case "integer":
    case "number": {
      const lo = c.grid.lowerUnits.toString();
      const hi = c.grid.upperUnits.toString();
      // Clamp in floating point first (so the cast cannot overflow), then round to the grid:
      // the result is an integer in [lo, hi] whatever the rounding error of x / step.
      // DuckDB's LEAST/GREATEST skip NULLs, so a missing value must be kept NULL explicitly.
      const value = `CASE WHEN ${x} IS NULL THEN NULL ELSE CAST(round(LEAST(GREATEST(${x} / CAST(${quoteString(c.step)} AS DOUBLE), ${lo}), ${hi})) AS BIGINT) END AS c${i}`;
      // The raw value against the declared bounds (as doubles: the bound's nearest double).
      const flag =
        `CAST(CASE WHEN ${x} IS NULL THEN NULL WHEN ${x} < CAST(${quoteString(c.lower)} AS DOUBLE) THEN -1 ` +
        `WHEN ${x} > CAST(${quoteString(c.upper)} AS DOUBLE) THEN 1 ELSE 0 END AS TINYINT) AS k${i}`;
      return [value, flag];
    }
    case "category":
      return [`CAST(${x} AS USMALLINT) AS c${i}`];
    default:
      return [`${x} AS c${i}`];
  }
}

/** The stored column names of a dataset, in order (c<i> and k<i>). */
export function storedNames(cols: readonly ColumnPolicy[]): string[] {
  return cols.flatMap((c, i) => (c.type === "integer" || c.type === "number" ? [`c${i}`, `k${i}`] : [`c${i}`]));
}

/** What determines a stored table: the source, the declared columns and the unit. */
export function tableKey(d: { source: string; format: string; columns: readonly ColumnPolicy[]; unit: { column: string | null; maxRows: number } }): string {
  const cols = d.columns.map((c) => {
    const { grid: _grid, ...rest } = c as ColumnPolicy & { grid?: unknown };
    return rest;
  });
  return JSON.stringify([d.source, d.format, cols, d.unit.column, d.unit.maxRows]);
}

const INTEGER_TYPES = /^(TINYINT|SMALLINT|INTEGER|BIGINT|HUGEINT|UTINYINT|USMALLINT|UINTEGER|UBIGINT|UHUGEINT)$/;
const SIGNED_64 = /^(TINYINT|SMALLINT|INTEGER|BIGINT)$/;

/**
 * Whether a numeric column can be converted in integer arithmetic: a signed source integer of at
 * most 64 bits on a grid step of exactly 1, where grid units are the values themselves and
 * round(clamp(x / 1)) is clamp(x). (Unsigned and 128-bit sources keep the binary64 path: their
 * comparisons with negative bounds would need wider types.)
 */
function integerPath(c: ColumnPolicy, type: string): boolean {
  return (c.type === "integer" || c.type === "number") && SIGNED_64.test(type.toUpperCase()) && c.grid.step.num === 1n && c.grid.step.den === 1n;
}

const DECIMAL_TYPE = /^DECIMAL\((\d{1,2}),\s*(\d{1,2})\)$/;

/** A DECIMAL(w, s) source on a step of 10^-t with t >= s (decimalPath). */
export interface DecimalPath {
  /** 10^t: grid units are x * pow. */
  pow: bigint;
  /** t, the step's decimals. */
  t: number;
  /** s, the column's scale. */
  scale: number;
}

/**
 * When a numeric column can be converted in exact decimal arithmetic: a DECIMAL(w, s) source
 * (fixed point, so no NaN or infinity) on a grid step of 10^-t with s <= t <= 18. Every value then
 * lies on the grid, grid units are x * 10^t with no rounding, and clamping compares decimals. The
 * binary64 path gives the same units for every value inside the declared range, but at a bound it
 * cannot tell a value 10^-s past the bound from the bound when s is large.
 */
export function decimalPath(c: ColumnPolicy, type: string): DecimalPath | null {
  if (c.type !== "integer" && c.type !== "number") return null;
  const m = DECIMAL_TYPE.exec(type.toUpperCase());
  if (m === null) return null;
  const scale = Number(m[2]);
  const t = decimalStepDigits(c.grid);
  return t !== null && t >= scale && t <= 18 ? { pow: 10n ** BigInt(t), t, scale } : null;
}

/**
 * A bound `units` (grid units, step 10^-t) as a DECIMAL(38, s) literal at the column's own scale s,
 * rounded down or up (decimalText) so that comparing a DECIMAL(w, s) value with it gives the
 * comparison with the bound itself. At scale s the comparison needs no type wider than the
 * column's: at scale t a DECIMAL(38, s) column would have to widen to 38 - s + t digits, which
 * DuckDB does not have, and the comparison would fail on the largest stored values alone (an
 * error that would depend on the data).
 */
function decimalBound(units: bigint, d: DecimalPath, dir: "floor" | "ceil"): string {
  return `CAST(${quoteString(decimalText(units, d.t, d.scale, dir))} AS DECIMAL(38, ${d.scale}))`;
}

/**
 * In place (in-place.ts), the typed value x<i> of a source column of DuckDB type `type`, read as
 * cheaply as the type allows (no cast when the column already has the declared type).
 */
export function inPlaceTyped(c: ColumnPolicy, i: number, src: string, type: string): string {
  const t = type.toUpperCase();
  switch (c.type) {
    case "integer":
    case "number":
      if (t === "DOUBLE" || integerPath(c, t) || decimalPath(c, t) !== null) return `${src} AS x${i}`;
      if (INTEGER_TYPES.test(t) || t === "FLOAT" || t.startsWith("DECIMAL")) return `CAST(${src} AS DOUBLE) AS x${i}`;
      return `TRY_CAST(${src} AS DOUBLE) AS x${i}`;
    case "category": {
      // The index in the declared list (exact text equality, NULL when absent or missing), as
      // the CASE of a load computes it; list_position is several times faster over many rows.
      const list = `[${c.values.map(quoteString).join(", ")}]`;
      return `CAST(list_position(${list}, ${t === "VARCHAR" ? src : `CAST(${src} AS VARCHAR)`}) - 1 AS USMALLINT) AS x${i}`;
    }
    case "date":
      return t === "DATE" ? `${src} AS x${i}` : `TRY_CAST(${src} AS DATE) AS x${i}`;
    case "boolean":
      return t === "BOOLEAN" ? `${src} AS x${i}` : `TRY_CAST(${src} AS BOOLEAN) AS x${i}`;
  }
}

/**
 * In place, the stored form of x<i>: the same values as a load into memory gives for every value
 * that fits (finalSelect), and NULL (missing) for a value that does not fit (the in-place rule).
 * Integer sources need no whole-number check; every check is one CASE.
 */
export function inPlaceFinal(c: ColumnPolicy, i: number, type: string): string[] {
  const x = `x${i}`;
  switch (c.type) {
    case "integer":
    case "number": {
      const lo = c.grid.lowerUnits.toString();
      const hi = c.grid.upperUnits.toString();
      if (integerPath(c, type)) {
        // Integer arithmetic: the value itself, clamped (the ELSE arm lies strictly between the
        // bounds, so its cast to BIGINT cannot overflow); a NULL reaches the ELSE arm and stays NULL.
        const value = `CASE WHEN ${x} <= ${lo} THEN ${lo} WHEN ${x} >= ${hi} THEN ${hi} ELSE CAST(${x} AS BIGINT) END AS c${i}`;
        // On a step of 1 the declared bounds are the end units themselves (fixedpoint.ts: bounds lie on the grid).
        const flag = `CAST(CASE WHEN ${x} IS NULL THEN NULL WHEN ${x} < ${lo} THEN -1 WHEN ${x} > ${hi} THEN 1 ELSE 0 END AS TINYINT) AS k${i}`;
        return [value, flag];
      }
      const dec = decimalPath(c, type);
      if (dec !== null) {
        // Exact decimal arithmetic: clamped in the column's units, then scaled by 10^t (a whole
        // number: t >= the column's scale); the ELSE arm lies strictly between the bounds, so its
        // cast to BIGINT cannot overflow; a NULL reaches it and stays NULL. (An integer column
        // here is on a step of 1 over a scale of 0: every value is whole.) The bounds are whole
        // grid units (fixedpoint.ts), compared at the column's scale (decimalBound).
        const atOrBelow = decimalBound(c.grid.lowerUnits, dec, "floor"); // x <= lower
        const atOrAbove = decimalBound(c.grid.upperUnits, dec, "ceil"); // x >= upper
        const below = decimalBound(c.grid.lowerUnits, dec, "ceil"); // x < lower
        const above = decimalBound(c.grid.upperUnits, dec, "floor"); // x > upper
        const value = `CASE WHEN ${x} <= ${atOrBelow} THEN ${lo} WHEN ${x} >= ${atOrAbove} THEN ${hi} ELSE CAST(${x} * ${dec.pow} AS BIGINT) END AS c${i}`;
        const flag = `CAST(CASE WHEN ${x} IS NULL THEN NULL WHEN ${x} < ${below} THEN -1 WHEN ${x} > ${above} THEN 1 ELSE 0 END AS TINYINT) AS k${i}`;
        return [value, flag];
      }
      const whole = c.type === "integer" && !INTEGER_TYPES.test(type.toUpperCase()) ? ` AND ${x} = round(${x})` : "";
      // isfinite(NULL) is NULL, so a missing value stays missing.
      const fits = `isfinite(${x})${whole}`;
      // The same value as a load's round(clamp(x / step)), as one CASE (cheaper than LEAST and
      // GREATEST per row): at or beyond a bound, the bound (-inf and inf are missing; DuckDB
      // orders NaN above every number, so NaN reaches the second arm and is missing too); inside,
      // the rounded value. A non-whole number in an integer column is missing.
      const u = `(${x} / CAST(${quoteString(c.step)} AS DOUBLE))`;
      const inside = whole === "" ? `CAST(round(${u}) AS BIGINT)` : `CASE WHEN ${x} = round(${x}) THEN CAST(round(${u}) AS BIGINT) END`;
      const value =
        `CASE WHEN ${u} <= ${lo} THEN (CASE WHEN ${x} > CAST('-inf' AS DOUBLE)${whole} THEN ${lo} END) ` +
        `WHEN ${u} >= ${hi} THEN (CASE WHEN ${x} < CAST('inf' AS DOUBLE)${whole} THEN ${hi} END) ` +
        `ELSE ${inside} END AS c${i}`;
      const flag =
        `CAST(CASE WHEN NOT (${fits}) THEN NULL WHEN ${x} < CAST(${quoteString(c.lower)} AS DOUBLE) THEN -1 ` +
        `WHEN ${x} > CAST(${quoteString(c.upper)} AS DOUBLE) THEN 1 ELSE 0 END AS TINYINT) AS k${i}`;
      return [value, flag];
    }
    case "date":
      return [`CASE WHEN ${x} BETWEEN DATE ${quoteString(c.lower)} AND DATE ${quoteString(c.upper)} THEN ${x} END AS c${i}`];
    default:
      return [`${x} AS c${i}`];
  }
}

/**
 * The first line of a DuckDB error for a steward-facing start error, with every quoted part
 * (which could hold a value read from the data) replaced by "…".
 */
export function engineMessage(e: unknown): string {
  if (!(e instanceof Error)) return "error";
  return e.message.split("\n")[0].replace(/'[^']*'|"[^"]*"/g, "…").slice(0, 300);
}
