/**
 * The plain-SQL baselines: the same aggregate the DP path computes, without noise, bounding or
 * ledger, run through the same DuckDB connection the curator's engine uses. Each baseline reads
 * its result fully, as the DP path does, so both pay for materialising the answer.
 */
import type { QueryPlan } from "../runtime/protocol/messages.js";

/** One bench query: the DP plan and its plain-SQL twin over `source` (a table name or a read_parquet(...) call). */
export interface BenchQuery {
  name: string;
  plan: (dataset: string, epsilon: string) => QueryPlan;
  sql: (source: string) => string;
}

const AMOUNT_LO = 0;
const AMOUNT_HI = 1000;
const clamped = `least(greatest(amount, ${AMOUNT_LO}), ${AMOUNT_HI})`;

export const BENCH_QUERIES: readonly BenchQuery[] = [
  {
    name: "count",
    plan: (dataset, epsilon) => ({ v: 1, dataset, measure: { kind: "count" }, privacy: { epsilon } }),
    sql: (src) => `SELECT count(*) FROM ${src}`,
  },
  {
    name: "clamped sum",
    plan: (dataset, epsilon) => ({ v: 1, dataset, measure: { kind: "sum", column: "amount" }, privacy: { epsilon } }),
    sql: (src) => `SELECT sum(${clamped}) FROM ${src}`,
  },
  {
    name: "mean",
    plan: (dataset, epsilon) => ({ v: 1, dataset, measure: { kind: "mean", column: "amount" }, privacy: { epsilon } }),
    sql: (src) => `SELECT sum(${clamped}), count(*) FROM ${src}`,
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
    sql: (src) => `SELECT region, sum(${clamped}), count(*) FROM ${src} GROUP BY region`,
  },
  {
    name: "median",
    plan: (dataset, epsilon) => ({ v: 1, dataset, measure: { kind: "quantile", column: "amount", p: [0.5] }, privacy: { epsilon } }),
    sql: (src) => `SELECT median(amount) FROM ${src}`,
  },
];
