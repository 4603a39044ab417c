/**
 * Query plan -> parameterized SQL over an engine's relation, with the schema checks that go with
 * it. Dialect-neutral: the SQL here is the same in DuckDB and PostgreSQL apart from what the
 * Dialect hook says (placeholder typing, integer division), so every SQL engine reuses it
 * (engines/shapes.ts builds the statements around it).
 *
 * Nothing from a plan is ever spliced into SQL text: column names are looked up in the declared
 * schema and replaced by internal identifiers (c0, c1, ...), and every literal becomes a bound
 * parameter ($1, $2, ...). Literals are checked against the column's declared type first:
 * category values must be in the declared list (and are bound as their index), dates must be ISO
 * calendar dates, numbers finite, ranges not reversed. Errors name the path inside the plan and
 * the problem, never a value.
 *
 * Numeric comparisons are exact: the stored value is the grid point clamp(round(x/step)), and a
 * literal v is turned into grid units v/step as an exact rational, so `x < 2.5` on a step-1 grid
 * compares `units < 3`. Filters see the clamped value.
 */
import { BadInputError } from "../errors.js";
import { Rational } from "../core/index.js";
import type { Condition, GroupKey, Literal } from "../protocol/messages.js";
import type { DatasetSchema, SchemaColumn, SqlParam } from "./engines/types.js";
import type { ColumnPolicy } from "./policy.js";

/** What differs between the SQL dialects the engines speak. */
export interface Dialect {
  /** The placeholder text for the n-th parameter (1-based) of this type, e.g. "$3" or "$3::bigint". */
  placeholder(n: number, type: SqlParam["type"]): string;
  /** Integer division of two non-negative BIGINT expressions (floor). */
  intDiv(a: string, b: string): string;
}

/** DuckDB: `$n` placeholders (types come from the prepared statement), `//` integer division. */
export const DUCKDB_DIALECT: Dialect = {
  placeholder: (n) => `$${n}`,
  intDiv: (a, b) => `(${a}) // (${b})`,
};

/** Collects bound parameters in order: add() returns the placeholder ("$3") for the value. */
export class Params {
  private readonly list: SqlParam[] = [];
  readonly dialect: Dialect;

  constructor(dialect: Dialect = DUCKDB_DIALECT) {
    this.dialect = dialect;
  }

  add(p: SqlParam): string {
    this.list.push(p);
    return this.dialect.placeholder(this.list.length, p.type);
  }
  big(v: bigint): string {
    return this.add({ type: "bigint", value: v });
  }
  values(): SqlParam[] {
    return this.list.slice();
  }
  get count(): number {
    return this.list.length;
  }
}

const ISO_DATE = /^\d{4}-\d{2}-\d{2}$/;

function isIsoDate(s: string): boolean {
  if (!ISO_DATE.test(s)) return false;
  const d = new Date(`${s}T00:00:00Z`);
  return !Number.isNaN(d.getTime()) && d.toISOString().slice(0, 10) === s;
}

/** Exact value of a JS number as written in decimal (0.1 is 1/10, not its binary neighbour). */
export function decimalOf(x: number): Rational {
  return Rational.parse(String(x).replace("e+", "e"));
}

function shown(name: string): string {
  return JSON.stringify(name.length > 40 ? `${name.slice(0, 40)}...` : name);
}

/** The declared column behind a plan's column name; BadInputError naming the path otherwise. */
export function resolveColumn(t: DatasetSchema, name: string, path: string): SchemaColumn {
  const c = t.columns.get(name);
  if (c !== undefined) return c;
  if (t.dataset.unit.column !== null && name === t.dataset.unit.column) {
    throw new BadInputError(`${path}: ${shown(name)} is the privacy unit column of dataset ${t.dataset.name}, which cannot be queried`);
  }
  const declared = [...t.columns.keys()].join(", ");
  throw new BadInputError(`${path}: unknown column ${shown(name)} in dataset ${t.dataset.name} (declared: ${declared})`);
}

type Cmp = "eq" | "ne" | "lt" | "le" | "gt" | "ge";
const SQL_OP: Record<Cmp, string> = { eq: "=", ne: "<>", lt: "<", le: "<=", gt: ">", ge: ">=" };

/** Keeps a grid-unit bound inside BIGINT without changing any comparison with stored values. */
function clampUnits(u: bigint, c: Extract<ColumnPolicy, { grid: unknown }>): bigint {
  const lo = c.grid.lowerUnits - 1n;
  const hi = c.grid.upperUnits + 1n;
  return u < lo ? lo : u > hi ? hi : u;
}

function numberLiteral(v: Literal, path: string, col: ColumnPolicy): Rational {
  if (typeof v !== "number" || !Number.isFinite(v)) throw new BadInputError(`${path}: column ${shown(col.name)} is numeric, so this must be a finite number`);
  return decimalOf(v);
}

function categoryIndex(v: Literal, path: string, col: Extract<ColumnPolicy, { type: "category" }>): number {
  const i = typeof v === "string" ? col.values.indexOf(v) : -1;
  if (i < 0) throw new BadInputError(`${path}: must be one of the declared values of column ${shown(col.name)}`);
  return i;
}

function dateLiteral(v: Literal, path: string, col: ColumnPolicy): string {
  if (typeof v !== "string" || !isIsoDate(v)) throw new BadInputError(`${path}: column ${shown(col.name)} holds dates, so this must be a date written YYYY-MM-DD`);
  return v;
}

function booleanLiteral(v: Literal, path: string, col: ColumnPolicy): boolean {
  if (typeof v !== "boolean") throw new BadInputError(`${path}: column ${shown(col.name)} is boolean, so this must be true or false`);
  return v;
}

function compare(op: Cmp, col: SchemaColumn, v: Literal, path: string, params: Params): string {
  const c = col.policy;
  const id = col.ident;
  switch (c.type) {
    case "integer":
    case "number": {
      const r = numberLiteral(v, path, c).div(c.grid.step);
      const whole = r.den === 1n;
      switch (op) {
        case "eq":
          return whole ? `${id} = ${params.big(clampUnits(r.num, c))}` : "FALSE";
        case "ne":
          return whole ? `${id} <> ${params.big(clampUnits(r.num, c))}` : `${id} IS NOT NULL`;
        case "lt":
          return `${id} < ${params.big(clampUnits(r.ceil(), c))}`;
        case "le":
          return `${id} <= ${params.big(clampUnits(r.floor(), c))}`;
        case "gt":
          return `${id} > ${params.big(clampUnits(r.floor(), c))}`;
        case "ge":
          return `${id} >= ${params.big(clampUnits(r.ceil(), c))}`;
      }
      break;
    }
    case "category": {
      if (op !== "eq" && op !== "ne") throw new BadInputError(`${path}: ${op} does not apply to category column ${shown(c.name)} (use eq, ne or in)`);
      return `${id} ${SQL_OP[op]} ${params.add({ type: "integer", value: categoryIndex(v, path, c) })}`;
    }
    case "date":
      return `${id} ${SQL_OP[op]} CAST(${params.add({ type: "varchar", value: dateLiteral(v, path, c) })} AS DATE)`;
    case "boolean":
      if (op !== "eq" && op !== "ne") throw new BadInputError(`${path}: ${op} does not apply to boolean column ${shown(c.name)} (use eq, ne or in)`);
      return `${id} ${SQL_OP[op]} ${params.add({ type: "boolean", value: booleanLiteral(v, path, c) })}`;
  }
  throw new BadInputError(`${path}: unsupported comparison`);
}

function inList(col: SchemaColumn, values: Literal[], path: string, params: Params): string {
  const c = col.policy;
  const slots: string[] = [];
  values.forEach((v, i) => {
    const p = `${path}.values[${i}]`;
    switch (c.type) {
      case "integer":
      case "number": {
        const r = numberLiteral(v, p, c).div(c.grid.step);
        if (r.den === 1n) slots.push(params.big(clampUnits(r.num, c)));
        break;
      }
      case "category":
        slots.push(params.add({ type: "integer", value: categoryIndex(v, p, c) }));
        break;
      case "date":
        slots.push(`CAST(${params.add({ type: "varchar", value: dateLiteral(v, p, c) })} AS DATE)`);
        break;
      case "boolean":
        slots.push(params.add({ type: "boolean", value: booleanLiteral(v, p, c) }));
        break;
    }
  });
  return slots.length === 0 ? "FALSE" : `${col.ident} IN (${slots.join(", ")})`;
}

function between(col: SchemaColumn, low: Literal, high: Literal, path: string, params: Params): string {
  const c = col.policy;
  switch (c.type) {
    case "integer":
    case "number": {
      const lo = numberLiteral(low, `${path}.low`, c);
      const hi = numberLiteral(high, `${path}.high`, c);
      if (lo.gt(hi)) throw new BadInputError(`${path}: low is above high (reversed range)`);
      const a = lo.div(c.grid.step).ceil();
      const b = hi.div(c.grid.step).floor();
      return `${col.ident} BETWEEN ${params.big(clampUnits(a, c))} AND ${params.big(clampUnits(b, c))}`;
    }
    case "date": {
      const lo = dateLiteral(low, `${path}.low`, c);
      const hi = dateLiteral(high, `${path}.high`, c);
      if (lo > hi) throw new BadInputError(`${path}: low is after high (reversed range)`);
      return `${col.ident} BETWEEN CAST(${params.add({ type: "varchar", value: lo })} AS DATE) AND CAST(${params.add({ type: "varchar", value: hi })} AS DATE)`;
    }
    default:
      throw new BadInputError(`${path}: between applies to numeric and date columns, not to ${c.type} column ${shown(c.name)}`);
  }
}

/** SQL boolean expression for a plan's `where` ("TRUE" when absent). */
export function compileWhere(cond: Condition | undefined, t: DatasetSchema, params: Params, path = "plan.where"): string {
  if (cond === undefined) return "TRUE";
  switch (cond.op) {
    case "and":
    case "or":
      return `(${cond.of.map((c, i) => compileWhere(c, t, params, `${path}.of[${i}]`)).join(cond.op === "and" ? " AND " : " OR ")})`;
    case "not":
      return `(NOT ${compileWhere(cond.of, t, params, `${path}.of`)})`;
    case "isNull":
      return `${resolveColumn(t, cond.column, `${path}.column`).ident} IS NULL`;
    case "in":
      return inList(resolveColumn(t, cond.column, `${path}.column`), cond.values, path, params);
    case "between":
      return between(resolveColumn(t, cond.column, `${path}.column`), cond.low, cond.high, path, params);
    default:
      return compare(cond.op, resolveColumn(t, cond.column, `${path}.column`), cond.value, `${path}.value`, params);
  }
}

/** Checks a plan's filter against the schema (every literal's type and range); builds no statement. */
export function checkWhere(cond: Condition | undefined, t: DatasetSchema): void {
  compileWhere(cond, t, new Params());
}

/** A public grouping: the SQL expression gives the key index 0..labels.length-1 (NULL for a missing value). */
export interface GroupSpec {
  column: string;
  labels: string[];
  /** Expression over the kept relation's columns. */
  expr: string;
  /** Internal column the expression reads. */
  ident: string;
}

/** Labels of equal-width bins over [lower, upper]: "[a, b)" and a closed last bin. */
export function binLabels(lower: Rational, upper: Rational, bins: number): string[] {
  const width = upper.sub(lower).div(Rational.of(bins));
  const edge = (j: number) => lower.add(width.mul(Rational.of(j))).toDecimal(6);
  return Array.from({ length: bins }, (_, j) => `[${edge(j)}, ${edge(j + 1)}${j === bins - 1 ? "]" : ")"}`);
}

/** Bin index expression over grid units: floor((u - lo) * bins / (hi - lo)), the top edge in the last bin. */
export function binExpr(col: SchemaColumn, bins: number, params: Params): string {
  const c = col.policy;
  if (c.type !== "integer" && c.type !== "number") throw new Error("binExpr on a non-numeric column");
  const lo = params.big(c.grid.lowerUnits);
  const span = params.big(c.grid.upperUnits - c.grid.lowerUnits);
  const b = params.big(BigInt(bins));
  const last = params.big(BigInt(bins - 1));
  // DuckDB's LEAST skips NULLs, so a missing value must stay NULL explicitly (it is then left out).
  return `CASE WHEN ${col.ident} IS NULL THEN NULL ELSE LEAST(${params.dialect.intDiv(`(${col.ident} - ${lo}) * ${b}`, span)}, ${last}) END`;
}

export function compileGroup(key: GroupKey, t: DatasetSchema, params: Params, path: string): GroupSpec {
  const col = resolveColumn(t, key.column, `${path}.column`);
  const c = col.policy;
  const bins = "bins" in key ? key.bins : undefined;
  switch (c.type) {
    case "category":
      if (bins !== undefined) throw new BadInputError(`${path}.bins: category column ${shown(c.name)} is grouped by its declared values; leave bins out`);
      return { column: c.name, labels: c.values.slice(), expr: col.ident, ident: col.ident };
    case "boolean":
      if (bins !== undefined) throw new BadInputError(`${path}.bins: boolean column ${shown(c.name)} takes no bins`);
      return { column: c.name, labels: ["false", "true"], expr: `CAST(${col.ident} AS INTEGER)`, ident: col.ident };
    case "integer":
    case "number":
      if (bins === undefined) throw new BadInputError(`${path}: grouping by numeric column ${shown(c.name)} needs bins (equal-width bins over its declared range)`);
      return {
        column: c.name,
        labels: binLabels(Rational.parse(c.lower), Rational.parse(c.upper), bins),
        expr: binExpr(col, bins, params),
        ident: col.ident,
      };
    case "date":
      throw new BadInputError(`${path}: grouping by date column ${shown(c.name)} is not supported (filter by date ranges instead)`);
  }
}
