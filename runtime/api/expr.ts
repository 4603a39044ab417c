/**
 * Filters on public columns: a small expression builder (`col("age").ge(65).and(col("sex").eq("female"))`)
 * that produces the protocol's Condition, plus the plain-object forms a cell may write instead.
 * Every node is frozen, so a filter can be shared between queries without one changing another.
 */
import { BadInputError } from "../errors.js";
import type { ColumnInfo, Condition, Literal } from "../protocol/messages.js";

export type { Literal } from "../protocol/messages.js";

/** Comparison operators accepted in the object shorthand `{ age: { ge: 65, lt: 80 } }`. */
export interface ColumnTest {
  eq?: Literal;
  ne?: Literal;
  lt?: Literal;
  le?: Literal;
  gt?: Literal;
  ge?: Literal;
  in?: Literal[];
  between?: [Literal, Literal];
  isNull?: true;
}

/**
 * Object shorthand: each entry is one test, all must hold. `{ district: "Northgate" }` is equality,
 * `{ district: ["Northgate", "Riverside"] }` membership, `{ age: { ge: 65 } }` comparisons,
 * `{ insured: null }` a missing value.
 */
export type FilterObject = Record<string, Literal | Literal[] | null | ColumnTest>;

/** Anything `.where(...)` takes: a built Filter, a protocol Condition, or the object shorthand. */
export type FilterInput = Filter | Condition | FilterObject;

const COMPARE = new Set(["eq", "ne", "lt", "le", "gt", "ge"]);
const OPS = new Set([...COMPARE, "in", "between", "isNull", "and", "or", "not"]);
const SYMBOL: Record<string, string> = { eq: "=", ne: "≠", lt: "<", le: "≤", gt: ">", ge: "≥" };

function deepFreeze<T>(v: T): T {
  if (v !== null && typeof v === "object") {
    for (const x of Object.values(v)) deepFreeze(x);
    Object.freeze(v);
  }
  return v;
}

function describeValue(v: unknown): string {
  if (typeof v === "string") return JSON.stringify(v);
  if (typeof v === "number" || typeof v === "boolean") return String(v);
  if (v === null) return "null";
  if (Array.isArray(v)) return "an array";
  return typeof v === "object" ? "an object" : typeof v;
}

function literal(v: unknown, what: string): Literal {
  if (typeof v === "string" || typeof v === "boolean") return v;
  if (typeof v === "number") {
    if (!Number.isFinite(v)) throw new BadInputError(`${what} must be a finite number, got ${v}`);
    return v;
  }
  throw new BadInputError(`${what} must be a string, number or boolean, got ${describeValue(v)}`);
}

function columnName(v: unknown, what: string): string {
  if (typeof v !== "string" || v.trim() === "") throw new BadInputError(`${what} must be a column name (a non-empty string)`);
  return v;
}

/** A boolean test on public columns. Immutable: `and`, `or` and `not` return new filters. */
export class Filter {
  /** The protocol form sent to the curator. */
  readonly condition: Condition;

  constructor(condition: Condition) {
    this.condition = deepFreeze(structuredClone(condition));
    Object.freeze(this);
  }

  /** Both this and every other test must hold. */
  and(...others: FilterInput[]): Filter {
    return new Filter({ op: "and", of: [this.condition, ...others.map((o, i) => toCondition(o, `and(...)[${i}]`))] });
  }

  /** This or any other test holds. */
  or(...others: FilterInput[]): Filter {
    return new Filter({ op: "or", of: [this.condition, ...others.map((o, i) => toCondition(o, `or(...)[${i}]`))] });
  }

  /** The opposite test. */
  not(): Filter {
    return new Filter({ op: "not", of: this.condition });
  }

  toJSON(): Condition {
    return this.condition;
  }

  /** Readable form, e.g. `age ≥ 65 and district = "Northgate"`. */
  toString(): string {
    return conditionText(this.condition);
  }
}

/** A public column to build a filter on: `col("age").ge(65)`. */
export class Column {
  readonly name: string;
  constructor(name: string) {
    this.name = columnName(name, "col(name)");
    Object.freeze(this);
  }
  /** Equal to a value (a declared category value, a number, a date "YYYY-MM-DD" or a boolean). */
  eq(value: Literal): Filter {
    return this.#cmp("eq", value);
  }
  /** Not equal to a value. */
  ne(value: Literal): Filter {
    return this.#cmp("ne", value);
  }
  /** Less than (numeric and date columns). */
  lt(value: Literal): Filter {
    return this.#cmp("lt", value);
  }
  /** Less than or equal (numeric and date columns). */
  le(value: Literal): Filter {
    return this.#cmp("le", value);
  }
  /** Greater than (numeric and date columns). */
  gt(value: Literal): Filter {
    return this.#cmp("gt", value);
  }
  /** Greater than or equal (numeric and date columns). */
  ge(value: Literal): Filter {
    return this.#cmp("ge", value);
  }
  /** One of the listed values. */
  isIn(values: Literal[]): Filter {
    if (!Array.isArray(values) || values.length === 0) {
      throw new BadInputError(`col(${JSON.stringify(this.name)}).isIn(values): values must be a non-empty array`);
    }
    return new Filter({ op: "in", column: this.name, values: values.map((v, i) => literal(v, `isIn value [${i}]`)) });
  }
  /** Between two values, both ends included (numeric and date columns). */
  between(low: Literal, high: Literal): Filter {
    return new Filter({ op: "between", column: this.name, low: literal(low, "between low"), high: literal(high, "between high") });
  }
  /** The value is missing. */
  isNull(): Filter {
    return new Filter({ op: "isNull", column: this.name });
  }
  /** The value is present. */
  notNull(): Filter {
    return this.isNull().not();
  }
  #cmp(op: "eq" | "ne" | "lt" | "le" | "gt" | "ge", value: Literal): Filter {
    return new Filter({ op, column: this.name, value: literal(value, `col(${JSON.stringify(this.name)}).${op}(value)`) });
  }
}

/** Starts a filter on a public column: `col("age").ge(65)`. */
export function col(name: string): Column {
  return new Column(name);
}

/** Checks a protocol Condition written by hand (shape and literal types) and returns a frozen copy. */
function checkCondition(c: unknown, what: string): Condition {
  if (c === null || typeof c !== "object" || Array.isArray(c)) throw new BadInputError(`${what} must be a condition object`);
  const o = c as Record<string, unknown>;
  const op = o.op;
  if (typeof op !== "string" || !OPS.has(op)) throw new BadInputError(`${what}.op ${describeValue(op)} is not a filter operator`);
  switch (op) {
    case "and":
    case "or": {
      if (!Array.isArray(o.of) || o.of.length === 0) throw new BadInputError(`${what}.of must be a non-empty array of conditions`);
      return { op, of: o.of.map((x, i) => checkCondition(x, `${what}.of[${i}]`)) };
    }
    case "not":
      return { op, of: checkCondition(o.of, `${what}.of`) };
    case "isNull":
      return { op, column: columnName(o.column, `${what}.column`) };
    case "in": {
      if (!Array.isArray(o.values) || o.values.length === 0) throw new BadInputError(`${what}.values must be a non-empty array`);
      return { op, column: columnName(o.column, `${what}.column`), values: o.values.map((v, i) => literal(v, `${what}.values[${i}]`)) };
    }
    case "between":
      return { op, column: columnName(o.column, `${what}.column`), low: literal(o.low, `${what}.low`), high: literal(o.high, `${what}.high`) };
    default:
      return {
        op: op as "eq" | "ne" | "lt" | "le" | "gt" | "ge",
        column: columnName(o.column, `${what}.column`),
        value: literal(o.value, `${what}.value`),
      };
  }
}

function fromObject(o: Record<string, unknown>, what: string): Condition {
  const parts: Condition[] = [];
  for (const [column, test] of Object.entries(o)) {
    const at = `${what}.${column}`;
    if (test === null) parts.push({ op: "isNull", column });
    else if (Array.isArray(test)) parts.push(col(column).isIn(test as Literal[]).condition);
    else if (typeof test === "object") {
      const entries = Object.entries(test as Record<string, unknown>);
      if (entries.length === 0) throw new BadInputError(`${at} is an empty test; write e.g. { ge: 65 }`);
      for (const [op, v] of entries) {
        if (COMPARE.has(op)) parts.push({ op: op as "eq", column, value: literal(v, `${at}.${op}`) });
        else if (op === "in") parts.push(col(column).isIn(v as Literal[]).condition);
        else if (op === "between") {
          if (!Array.isArray(v) || v.length !== 2) throw new BadInputError(`${at}.between must be [low, high]`);
          parts.push({ op: "between", column, low: literal(v[0], `${at}.between[0]`), high: literal(v[1], `${at}.between[1]`) });
        } else if (op === "isNull" && v === true) parts.push({ op: "isNull", column });
        else throw new BadInputError(`${at}: unknown test ${JSON.stringify(op)} (use eq, ne, lt, le, gt, ge, in, between or isNull)`);
      }
    } else parts.push({ op: "eq", column, value: literal(test, at) });
  }
  if (parts.length === 0) throw new BadInputError(`${what} is an empty filter object`);
  return parts.length === 1 ? parts[0] : { op: "and", of: parts };
}

/** The protocol Condition for any accepted filter form; malformed input is refused with its path. */
export function toCondition(input: FilterInput, what = "where(...)"): Condition {
  if (input instanceof Filter) return input.condition;
  if (input === null || typeof input !== "object" || Array.isArray(input)) {
    throw new BadInputError(`${what} takes a filter such as col("age").ge(65) or { district: "Northgate" }, got ${describeValue(input)}`);
  }
  const o = input as Record<string, unknown>;
  const asCondition = typeof o.op === "string" && OPS.has(o.op);
  return deepFreeze(asCondition ? checkCondition(o, what) : fromObject(o, what));
}

/** Human-readable text of a condition. */
export function conditionText(c: Condition): string {
  switch (c.op) {
    case "and":
    case "or":
      return c.of.map((x) => (x.op === "and" || x.op === "or" ? `(${conditionText(x)})` : conditionText(x))).join(` ${c.op} `);
    case "not":
      return c.of.op === "isNull" ? `${c.of.column} is present` : `not (${conditionText(c.of)})`;
    case "isNull":
      return `${c.column} is missing`;
    case "in":
      return `${c.column} in [${c.values.map((v) => describeValue(v)).join(", ")}]`;
    case "between":
      return `${c.column} between ${describeValue(c.low)} and ${describeValue(c.high)}`;
    default:
      return `${c.column} ${SYMBOL[c.op]} ${describeValue(c.value)}`;
  }
}

const ISO_DATE = /^\d{4}-\d{2}-\d{2}$/;

function checkLiteral(col: ColumnInfo, v: Literal, what: string): void {
  switch (col.type) {
    case "integer":
    case "number":
      if (typeof v !== "number") throw new BadInputError(`${what}: column ${col.name} is numeric, so compare it with a number, not ${describeValue(v)}`);
      return;
    case "category":
      if (typeof v !== "string" || !col.values.includes(v)) {
        throw new BadInputError(`${what}: ${describeValue(v)} is not a declared value of column ${col.name} (declared: ${col.values.join(", ")})`);
      }
      return;
    case "date":
      if (typeof v !== "string" || !ISO_DATE.test(v) || Number.isNaN(Date.parse(`${v}T00:00:00Z`))) {
        throw new BadInputError(`${what}: column ${col.name} holds dates, so write the value as "YYYY-MM-DD"`);
      }
      return;
    case "boolean":
      if (typeof v !== "boolean") throw new BadInputError(`${what}: column ${col.name} is boolean, so compare it with true or false`);
      return;
  }
}

/**
 * Checks a condition against a dataset's public schema before it is sent: the columns exist and
 * are not the privacy unit, each value fits its column's type, order tests only on ordered columns.
 */
export function checkAgainstSchema(c: Condition, columns: readonly ColumnInfo[], unitColumn: string | null, what = "where"): void {
  const find = (name: string): ColumnInfo => {
    const found = columns.find((x) => x.name === name);
    if (found) return found;
    if (name === unitColumn) throw new BadInputError(`${what}: ${name} is the privacy unit column, which cannot be queried`);
    throw new BadInputError(`${what}: no column ${JSON.stringify(name)} (columns: ${columns.map((x) => x.name).join(", ")})`);
  };
  const ordered = (info: ColumnInfo, op: string): void => {
    if (info.type === "category" || info.type === "boolean") {
      throw new BadInputError(`${what}: ${op} does not apply to ${info.type} column ${info.name} (use eq, ne or isIn)`);
    }
  };
  switch (c.op) {
    case "and":
    case "or":
      c.of.forEach((x) => checkAgainstSchema(x, columns, unitColumn, what));
      return;
    case "not":
      checkAgainstSchema(c.of, columns, unitColumn, what);
      return;
    case "isNull":
      find(c.column);
      return;
    case "in": {
      const info = find(c.column);
      c.values.forEach((v) => checkLiteral(info, v, what));
      return;
    }
    case "between": {
      const info = find(c.column);
      ordered(info, "between");
      checkLiteral(info, c.low, what);
      checkLiteral(info, c.high, what);
      if (c.low > c.high) throw new BadInputError(`${what}: between(${describeValue(c.low)}, ${describeValue(c.high)}) has low above high`);
      return;
    }
    default: {
      const info = find(c.column);
      if (c.op !== "eq" && c.op !== "ne") ordered(info, c.op);
      checkLiteral(info, c.value, what);
    }
  }
}
