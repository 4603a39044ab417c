/**
 * What every aggregate shares: the piece shape (prepared without data, run with data), and the
 * one SQL shape they all use: filtered rows -> per-unit bounded rows -> GROUP BY the public keys.
 */
import type { RatioShape } from "./ratio-preview.js";
import type { Rational } from "../../core/index.js";
import { BadInputError } from "../../errors.js";
import { PLAN_LIMITS } from "../../protocol/limits.js";
import type { Condition, GroupKey, MechanismRecord, Preview, ReleaseRow } from "../../protocol/messages.js";
import type { Engine, TableColumn, TableInfo } from "../engine.js";
import { type GroupSpec, Params, compileGroup, compileWhere, keptFrom } from "../sql.js";
import type { Finishers } from "./finishers.js";

/** Where an aggregate's rows come from: a dataset table and the plan's filter. */
export interface Source {
  t: TableInfo;
  where: Condition | undefined;
}

/** One part of a release: everything public is known at prepare time; `run` reads the data. */
export interface Piece {
  mechanisms: MechanismRecord[];
  cost: Rational;
  halfWidths: Preview["halfWidths"];
  notes: string[];
  /** Notes for a preview only (about what its half-widths are), not carried into releases. */
  previewNotes?: string[];
  /** Means, variances and std: what the expected error of the estimate itself needs (ratio-preview.ts). */
  ratioShape?: RatioShape;
  /** How the intervals of this piece are computed, in words. */
  methods: string[];
  /** Number of rows `run` returns, fixed by the plan and the policy (never by the data). */
  size: number;
  /** Rounds of SQL and CPU work `run` does (1, or one per part of a describe): public, for pacing. */
  steps: number;
  /** Reads the data (SQL on this thread; DuckDB works on its own threads) and hands the CPU part to `cpu`. */
  run(engine: Engine, cpu: Cpu): Promise<ReleaseRow[]>;
}

/**
 * Where the CPU part of a release runs (finishers.ts): the curator's worker pool, so the message
 * loop never waits on noise or a quantile draw, or this thread with given bits (tests that need
 * reproducible noise).
 */
export interface Cpu {
  finish<K extends keyof Finishers>(name: K, recipe: Parameters<Finishers[K]>[0], data: Parameters<Finishers[K]>[1]): Promise<ReleaseRow[]>;
}

/** Rows per privacy unit after bounding (1 when each row is its own unit). */
export function rowsPerUnit(src: Source): number {
  return src.t.hasUnit ? src.t.dataset.unit.maxRows : 1;
}

/** Public key labels of each group key, and the declared number of cells (their product). */
export function groupLabels(src: Source, keys: readonly GroupKey[]): { columns: string[]; labels: string[][]; cells: number } {
  const ps = new Params();
  const specs = keys.map((k, i) => compileGroup(k, src.t, ps, `plan.groupBy[${i}]`));
  const cells = specs.reduce((n, s) => n * s.labels.length, 1);
  // Answerer.build refuses this first, from the key sizes alone; kept here (prepare time, before
  // any cell array or debit) so no piece can be built past the limit by another route.
  if (cells > PLAN_LIMITS.maxCells) {
    throw new BadInputError(`plan.groupBy: declares ${cells} cells, above the curator's limit of ${PLAN_LIMITS.maxCells} (maxCells)`);
  }
  return { columns: specs.map((s) => s.column), labels: specs.map((s) => s.labels), cells };
}

/** Every key tuple in row-major order (the last key varies fastest); [[]] with no keys. */
export function keyTuples(labels: readonly string[][]): string[][] {
  let out: string[][] = [[]];
  for (const l of labels) out = out.flatMap((prefix) => l.map((v) => [...prefix, v]));
  return out;
}

/**
 * With a filter, the same rows the kept relation (sql.ts keptRelation) would keep, but as a flag
 * __m over every row of the table rather than as a smaller relation: aggregates then take
 * `FILTER (WHERE __m)`, so the scan, the per-unit window and the hash table see every row whatever
 * the filter matches, and the SQL's work does not follow how many rows matched (issue 9,
 * data-independent timing). The law is the same: in a unit with more than k rows, the matching
 * rows come first in its random order (__rk), and the first k of them are kept.
 */
function flaggedFrom(t: TableInfo, where: string, cols: readonly string[], ps: Params): string {
  const uniq = [...new Set(cols)];
  const list = uniq.length === 0 ? "1 AS __one" : uniq.join(", ");
  // A NULL filter result (a missing value) does not match, as in WHERE.
  const hit = `COALESCE(${where}, FALSE)`;
  if (!t.hasUnit) return `(SELECT ${list}, ${hit} AS __m FROM ${t.table}) AS __kept`;
  const k = ps.add({ type: "integer", value: t.dataset.unit.maxRows });
  const outer = uniq.length === 0 ? "__one" : uniq.map((c) => c.split(" AS ").pop()).join(", ");
  return (
    `(SELECT ${list}, ${hit} AS __m FROM ${t.table} WHERE __n <= ${k} ` +
    `UNION ALL SELECT ${outer}, __h AND __k <= ${k} AS __m FROM (SELECT ${list}, ${hit} AS __h, ` +
    `row_number() OVER (PARTITION BY __u ORDER BY ${hit} DESC, __rk) AS __k FROM ${t.table} WHERE __n > ${k})) AS __kept`
  );
}

/**
 * Runs `SELECT keys..., aggs... FROM kept GROUP BY keys` and returns one vector of exact integers
 * per declared cell, in keyTuples order. Cells with no rows get zeros (every declared key is
 * released, so no output depends on which keys occur). Rows whose key value is missing are left out.
 */
export async function fetchCells(
  engine: Engine,
  src: Source,
  keys: readonly GroupKey[],
  cols: readonly string[],
  aggs: (ps: Params) => string[],
): Promise<bigint[][]> {
  const ps = new Params();
  const where = compileWhere(src.where, src.t, ps);
  const groups: GroupSpec[] = keys.map((k, i) => compileGroup(k, src.t, ps, `plan.groupBy[${i}]`));
  const filtered = src.where !== undefined;
  const colList = [...groups.map((g) => g.ident), ...cols];
  const from = filtered ? flaggedFrom(src.t, where, colList, ps) : keptFrom(src.t, where, colList, ps);
  const aggList = aggs(ps).map((a) => (filtered ? `${a} FILTER (WHERE __m)` : a));
  const sizes = groups.map((g) => g.labels.length);
  const cells = sizes.reduce((n, s) => n * s, 1);
  const out: bigint[][] = Array.from({ length: cells }, () => aggList.map(() => 0n));
  let sql: string;
  if (groups.length === 0) {
    sql = `SELECT ${aggList.join(", ")} FROM ${from}`;
  } else {
    const keySel = groups.map((g, i) => `${g.expr} AS __g${i}`).join(", ");
    const by = groups.map((_, i) => String(i + 1)).join(", ");
    sql = `SELECT ${keySel}, ${aggList.join(", ")} FROM ${from} GROUP BY ${by}`;
  }
  const rows = await engine.query(sql, ps.values());
  for (const row of rows) {
    // A missing key value is not a declared key: those rows are left out (a public rule).
    if (row.slice(0, groups.length).some((k) => k === null)) continue;
    let index = 0;
    for (let i = 0; i < groups.length; i++) {
      const k = Number(row[i]);
      if (!Number.isInteger(k) || k < 0 || k >= sizes[i]) throw new Error("internal: group index outside the declared keys");
      index = index * sizes[i] + k;
    }
    out[index] = row.slice(groups.length).map(toBigInt);
  }
  return out;
}

function toBigInt(v: unknown): bigint {
  if (v === null || v === undefined) return 0n;
  if (typeof v === "bigint") return v;
  if (typeof v === "number" && Number.isSafeInteger(v)) return BigInt(v);
  throw new Error("internal: aggregate is not an exact integer");
}

/**
 * Sorted (bucket, number of kept rows) pairs of one numeric column; `bucket` maps the column's
 * identifier to an integer expression (binding its own parameters) that is NULL for a missing
 * value, and those rows are left out.
 */
export async function fetchBuckets(
  engine: Engine,
  src: Source,
  col: TableColumn,
  bucket: (ident: string, ps: Params) => string,
): Promise<[bigint, bigint][]> {
  const ps = new Params();
  const where = compileWhere(src.where, src.t, ps);
  const filtered = src.where !== undefined;
  const from = filtered ? flaggedFrom(src.t, where, [col.ident], ps) : keptFrom(src.t, where, [col.ident], ps);
  const b = bucket(col.ident, ps);
  const rows = await engine.query(
    `SELECT ${b} AS __b, count(*)${filtered ? " FILTER (WHERE __m)" : ""} FROM ${from} GROUP BY 1 ORDER BY 1`,
    ps.values(),
  );
  // The bucket of a missing value is NULL: left out.
  return rows.filter((r) => r[0] !== null).map((r) => [toBigInt(r[0]), toBigInt(r[1])]);
}
