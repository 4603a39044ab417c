/**
 * The bench queries: each DP plan with its plain-SQL twin. The twin runs over the curator engine's
 * own loaded table (values already on the grid and clamped at load, as the DP path sees them)
 * through the engine's query path, so the ratio measures what DP adds: bounding, noise, planning
 * and receipts' inputs, not a different storage layout. Each twin reads its result fully.
 */
import type { Relation } from "../runtime/curator/engines/shapes.js";
import type { QueryPlan } from "../runtime/protocol/messages.js";

export interface BenchQuery {
  name: string;
  plan: (dataset: string, epsilon: string) => QueryPlan;
  sql: (t: Relation) => string;
}

function ident(t: Relation, column: string): string {
  const c = t.schema.columns.get(column);
  if (c === undefined) throw new Error(`bench table has no column ${column}`);
  return c.ident;
}

export const BENCH_QUERIES: readonly BenchQuery[] = [
  {
    name: "count",
    plan: (dataset, epsilon) => ({ v: 1, dataset, measure: { kind: "count" }, privacy: { epsilon } }),
    sql: (t) => `SELECT count(*) FROM ${t.from}`,
  },
  {
    name: "clamped sum",
    plan: (dataset, epsilon) => ({ v: 1, dataset, measure: { kind: "sum", column: "amount" }, privacy: { epsilon } }),
    sql: (t) => `SELECT sum(${ident(t, "amount")}) FROM ${t.from}`,
  },
  {
    name: "mean",
    plan: (dataset, epsilon) => ({ v: 1, dataset, measure: { kind: "mean", column: "amount" }, privacy: { epsilon } }),
    sql: (t) => `SELECT sum(${ident(t, "amount")}), count(*) FROM ${t.from}`,
  },
  {
    name: "grouped mean (8 regions)",
    plan: (dataset, epsilon) => ({
      v: 1,
      dataset,
      groupBy: [{ column: "region" }],
      measure: { kind: "mean", column: "amount" },
      privacy: { epsilon },
    }),
    sql: (t) => `SELECT ${ident(t, "region")}, sum(${ident(t, "amount")}), count(*) FROM ${t.from} GROUP BY 1`,
  },
  {
    name: "median",
    plan: (dataset, epsilon) => ({ v: 1, dataset, measure: { kind: "quantile", column: "amount", p: [0.5] }, privacy: { epsilon } }),
    sql: (t) => `SELECT median(${ident(t, "amount")}) FROM ${t.from}`,
  },
];
