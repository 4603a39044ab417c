/**
 * The statements every SQL engine runs, built from a CellsRequest or BucketsRequest over the
 * engine's relation (see SchemaColumn in types.ts for its columns). Dialect-neutral: differences
 * go through the Dialect of the Params (sql.ts).
 *
 * One shape for every aggregate: rows -> per-unit bounded rows -> GROUP BY the public keys.
 *
 * Per-unit bounding (docs/methods.md §7, "Enforcing the bounds"): each unit keeps at most k =
 * maxRows rows, chosen by a random order of the unit's rows fixed when the engine opened (never
 * by the values). The engine names how its relation exposes that order (Bounding):
 *   small   true when the row's unit has at most k rows (it keeps every row),
 *   kept    true when the row is kept without a filter (small, or among the first k in the order),
 *   order   an expression giving the row's place in its unit's order (distinct within a unit),
 *   unit    the unit key (a hash of the unit id).
 * With a filter, rows are bounded after filtering: in a unit with more than k rows the matching
 * rows come first in the order and the first k of them are kept, a uniformly random subset of the
 * matching rows. The filter becomes a flag __m over every row (never a smaller scan), so the
 * statement's work does not follow how many rows match (issue 9, data-independent timing).
 */
import { BadInputError } from "../../errors.js";
import type { GroupKey } from "../../protocol/messages.js";
import { type GroupSpec, Params, compileGroup, compileWhere, resolveColumn } from "../sql.js";
import type { Dialect } from "../sql.js";
import type { BucketsRequest, CellTerm, CellsRequest, DatasetSchema, MomentCode, SchemaColumn, SqlParam } from "./types.js";

export interface Bounding {
  /** `k()` gives the placeholder of maxRows (bound on first use). */
  small(k: () => string): string;
  kept(k: () => string): string;
  order: string;
  unit: string;
}

/** A dataset as an engine presents it to these statements. */
export interface Relation {
  schema: DatasetSchema;
  /** FROM item: a quoted table or view name. */
  from: string;
  /**
   * A FROM item over exactly the rows of `from`, for a statement that reads no column of them (a
   * count of every row, without a filter, grouping or bounding). Parquet in place gives the files
   * themselves, whose row count DuckDB reads from their metadata; a view over them with its
   * per-row steps is scanned instead.
   */
  rows?: string;
  /** null when each row is its own unit. */
  bounding: Bounding | null;
}

export interface Statement {
  sql: string;
  params: SqlParam[];
}

/**
 * The kept rows as a FROM item with columns `cols` and, with a filter, the flag __m. Without a
 * filter it is a plain (bounded) scan, the same shape as the plain aggregate.
 */
export function keptRowsFrom(r: Relation, where: string | null, cols: readonly string[], ps: Params): string {
  const uniq = [...new Set(cols)];
  const list = uniq.length === 0 ? "1 AS __one" : uniq.join(", ");
  const names = uniq.length === 0 ? "__one" : uniq.map((c) => c.split(" AS ").pop()).join(", ");
  const b = r.bounding;
  let kp: string | null = null;
  const k = () => (kp ??= ps.add({ type: "integer", value: r.schema.dataset.unit.maxRows }));
  if (where === null) {
    if (b === null) return `${uniq.length === 0 && r.rows !== undefined ? r.rows : r.from} AS __kept`;
    return `(SELECT ${list} FROM ${r.from} WHERE ${b.kept(k)}) AS __kept`;
  }
  // A NULL filter result (a missing value) does not match, as in WHERE.
  const hit = `COALESCE(${where}, FALSE)`;
  if (b === null) return `(SELECT ${list}, ${hit} AS __m FROM ${r.from}) AS __kept`;
  return (
    `(SELECT ${list}, ${hit} AS __m FROM ${r.from} WHERE ${b.small(k)} ` +
    `UNION ALL SELECT ${names}, __hit AND __k <= ${k()} AS __m FROM (SELECT ${list}, ${hit} AS __hit, ` +
    `row_number() OVER (PARTITION BY ${b.unit} ORDER BY ${hit} DESC, ${b.order}) AS __k FROM ${r.from} WHERE NOT (${b.small(k)})) AS __big) AS __kept`
  );
}

function numeric(t: DatasetSchema, name: string, path: string): SchemaColumn {
  const c = resolveColumn(t, name, path);
  if (c.policy.type !== "integer" && c.policy.type !== "number") throw new BadInputError(`${path}: column ${JSON.stringify(name.slice(0, 40))} is not numeric`);
  return c;
}

/**
 * The aggregate of a `moment` term in a dialect whose exact wide integer type is `wide` (DuckDB
 * HUGEINT, PostgreSQL numeric): a centred code is at most the grid width (< 2^33) in size, so the
 * product of two needs more than 64 bits. Only CASE and arithmetic, which postgres_fdw ships too.
 * Constants are integers computed by the curator (bigint/number, written as digits), never plan text.
 */
export function momentSql(t: DatasetSchema, term: Extract<CellTerm, { kind: "moment" }>, path: string, wide: string): { agg: string; cols: string[] } {
  const code = (m: MomentCode, at: string): { sql: string; col: SchemaColumn | null } => {
    switch (m.kind) {
      case "one":
        return { sql: `CAST(1 AS ${wide})`, col: null };
      case "centred": {
        const c = numeric(t, m.column, `${at}.column`);
        return { sql: `(CAST(${c.ident} AS ${wide}) * 2 - ${BigInt(m.twiceCentre).toString()})`, col: c };
      }
      case "level": {
        const c = resolveColumn(t, m.column, `${at}.column`);
        if (c.policy.type !== "category" || !Number.isSafeInteger(m.index) || m.index < 0 || m.index >= c.policy.values.length) {
          throw new BadInputError(`${at}: not a declared level of a category column`);
        }
        return { sql: `CAST(CASE WHEN ${c.ident} = ${m.index} THEN 1 ELSE 0 END AS ${wide})`, col: c };
      }
      case "truth": {
        const c = resolveColumn(t, m.column, `${at}.column`);
        if (c.policy.type !== "boolean") throw new BadInputError(`${at}: not a boolean column`);
        return { sql: `CAST(CASE WHEN ${c.ident} = ${m.value ? "TRUE" : "FALSE"} THEN 1 ELSE 0 END AS ${wide})`, col: c };
      }
    }
  };
  const a = code(term.a, `${path}.a`);
  const b = code(term.b, `${path}.b`);
  const complete = term.complete.map((name, j) => resolveColumn(t, name, `${path}.complete[${j}]`));
  const cols = [...new Set([...complete.map((c) => c.ident), ...[a.col, b.col].filter((c): c is SchemaColumn => c !== null).map((c) => c.ident)])];
  const when = complete.length === 0 ? "TRUE" : complete.map((c) => `${c.ident} IS NOT NULL`).join(" AND ");
  return { agg: `sum(CASE WHEN ${when} THEN ${a.sql} * ${b.sql} END)`, cols };
}

/** How a dialect differs in the terms' SQL (both engines share termSql). */
export interface TermDialect {
  /** The exact wide integer type for products (DuckDB HUGEINT, PostgreSQL numeric). */
  wide: string;
  /** The relation column whose non-missing rows a `present` term counts (default: the column itself). */
  presentIdent?: (c: SchemaColumn) => string;
}

/** The aggregate expression of one term, and the relation columns it reads. */
export function termSql(t: DatasetSchema, term: CellTerm, i: number, d: TermDialect = { wide: "HUGEINT" }): { agg: string; cols: string[] } {
  const path = `terms[${i}]`;
  switch (term.kind) {
    case "count":
      return { agg: "count(*)", cols: [] };
    case "present": {
      const c = resolveColumn(t, term.column, `${path}.column`);
      const id = d.presentIdent?.(c) ?? c.ident;
      return { agg: `count(${id})`, cols: [id] };
    }
    case "sum": {
      const c = numeric(t, term.column, `${path}.column`);
      return { agg: `sum(${c.ident})`, cols: [c.ident] };
    }
    case "sumSquares": {
      // |units| <= 2^31 (policy limit), so a square fits BIGINT; the engines sum it exactly.
      const c = numeric(t, term.column, `${path}.column`);
      return { agg: `sum(${c.ident} * ${c.ident})`, cols: [c.ident] };
    }
    case "sumProduct": {
      const a = numeric(t, term.a, `${path}.a`);
      const b = numeric(t, term.b, `${path}.b`);
      return { agg: `sum(${a.ident} * ${b.ident})`, cols: [a.ident, b.ident] };
    }
    case "atLower":
    case "atUpper": {
      const c = numeric(t, term.column, `${path}.column`);
      return { agg: `count(CASE WHEN ${c.flag} ${term.kind === "atLower" ? "< 0" : "> 0"} THEN 1 END)`, cols: [c.flag] };
    }
    case "moment":
      return momentSql(t, term, path, d.wide);
  }
}

export interface CellsStatement extends Statement {
  /** Number of declared values of each group key, in order. */
  sizes: number[];
}

/**
 * `SELECT __g0.., aggs.. FROM kept GROUP BY keys`: rows of (key indexes..., term values...).
 * Keys are index expressions 0..labels-1 (NULL for a missing value).
 */
export function cellsStatement(r: Relation, where: CellsRequest["where"], keys: readonly GroupKey[], terms: readonly CellTerm[], dialect: Dialect): CellsStatement {
  const ps = new Params(dialect);
  const t = r.schema;
  const w = where === undefined ? null : compileWhere(where, t, ps);
  const groups: GroupSpec[] = keys.map((k, i) => compileGroup(k, t, ps, `plan.groupBy[${i}]`));
  const parts = terms.map((term, i) => termSql(t, term, i));
  const cols = [...groups.map((g) => g.ident), ...parts.flatMap((p) => p.cols)];
  const from = keptRowsFrom(r, w, cols, ps);
  const aggs = parts.map((p) => (w === null ? p.agg : `${p.agg} FILTER (WHERE __m)`));
  let sql: string;
  if (groups.length === 0) {
    sql = `SELECT ${aggs.join(", ")} FROM ${from}`;
  } else {
    const keySel = groups.map((g, i) => `${g.expr} AS __g${i}`).join(", ");
    const by = groups.map((_, i) => String(i + 1)).join(", ");
    sql = `SELECT ${keySel}, ${aggs.join(", ")} FROM ${from} GROUP BY ${by}`;
  }
  return { sql, params: ps.values(), sizes: groups.map((g) => g.labels.length) };
}

/** Rows of (key indexes, term values) -> one vector per declared cell (zeros for absent cells). */
export function cellsFromRows(rows: readonly (readonly unknown[])[], sizes: readonly number[], terms: number, toBig: (v: unknown) => bigint): bigint[][] {
  const cells = sizes.reduce((n, s) => n * s, 1);
  const out: bigint[][] = Array.from({ length: cells }, () => Array.from({ length: terms }, () => 0n));
  for (const row of rows) {
    // A missing key value is not a declared key: those rows are left out (a public rule).
    if (row.slice(0, sizes.length).some((k) => k === null)) continue;
    let index = 0;
    for (let i = 0; i < sizes.length; i++) {
      const k = Number(row[i]);
      if (!Number.isInteger(k) || k < 0 || k >= sizes[i]) throw new Error("internal: group index outside the declared keys");
      index = index * sizes[i] + k;
    }
    out[index] = row.slice(sizes.length).map(toBig);
  }
  return out;
}

/**
 * `SELECT bucket, count(*) FROM kept GROUP BY 1 ORDER BY 1` for BucketsRequest's candidates:
 * b = min((x - lo) // s + 1, m - 1) below hi, m at hi (and above: values are clamped to hi).
 */
export function bucketsStatement(r: Relation, req: BucketsRequest, dialect: Dialect): Statement {
  const ps = new Params(dialect);
  const t = r.schema;
  const w = req.where === undefined ? null : compileWhere(req.where, t, ps);
  const c = numeric(t, req.column, "column");
  const id = c.ident;
  const from = keptRowsFrom(r, w, [id], ps);
  const hi = ps.big(req.upperUnits);
  const b =
    `CASE WHEN ${id} IS NULL THEN NULL WHEN ${id} >= ${hi} THEN ${ps.big(req.count)} ` +
    `ELSE LEAST(${dialect.intDiv(`${id} - ${ps.big(req.lowerUnits)}`, ps.big(req.stride))} + 1, ${ps.big(req.count - 1n)}) END`;
  return { sql: `SELECT ${b} AS __b, count(*)${w === null ? "" : " FILTER (WHERE __m)"} FROM ${from} GROUP BY 1 ORDER BY 1`, params: ps.values() };
}

/** Exact integer of a result value (DuckDB: bigint/number; PostgreSQL: numeric/int8 text). */
export function toBigInt(v: unknown): bigint {
  if (v === null || v === undefined) return 0n;
  if (typeof v === "bigint") return v;
  if (typeof v === "number" && Number.isSafeInteger(v)) return v === 0 ? 0n : BigInt(v);
  if (typeof v === "string" && /^-?[0-9]{1,40}$/.test(v)) return BigInt(v);
  throw new Error("internal: aggregate is not an exact integer");
}
