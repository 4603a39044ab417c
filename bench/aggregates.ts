/**
 * DP aggregates against plain DuckDB SQL on the same generated data, at several sizes, with and
 * without a privacy unit. The DP path is the curator's real path minus the socket and the ledger:
 * Answerer.prepare (validation, planning, cost) then compute (SQL with bounding, exact noise,
 * intervals). The baseline is the same aggregate as plain SQL on the engine's own table, through
 * the same engine. Both are timed alternately in one process (harness.timePair).
 */
import { Bits, cryptoBytes } from "../runtime/core/index.js";
import { Answerer } from "../runtime/curator/answer.js";
import { DuckDBEngine } from "../runtime/curator/engines/duckdb/engine.js";
import { loadPolicy } from "../runtime/curator/policy.js";
import { BENCH_QUERIES } from "./baseline.js";
import { BENCH_ANALYST, BENCH_DATASET, benchWorkspace, removeWorkspace } from "./bench-policy.js";
import { ensureBenchData } from "./data.js";
import { fmtMs, fmtRatio, fmtTiming, markdownTable, progress, summarize, timeOnce, timePair, type Summary } from "./harness.js";

export interface AggregateRow {
  rows: number;
  unit: boolean;
  query: string;
  dp: Summary;
  baseline: Summary;
  ratio: number;
  target: number;
}

export const TARGET_NO_UNIT = 1.3;
export const TARGET_WITH_UNIT = 3;

export function rowsLabel(n: number): string {
  return n >= 1_000_000 ? `${n / 1_000_000}M` : n >= 1000 ? `${n / 1000}k` : String(n);
}

export async function benchAggregates(opts: {
  sizes: number[];
  runs: (rows: number) => number;
  warmup: number;
  dataDir?: string;
  /** names of BENCH_QUERIES to run; null for all */
  queries?: Set<string> | null;
}): Promise<{ rows: AggregateRow[]; loads: { rows: number; unit: boolean; ms: number }[]; markdown: string }> {
  const out: AggregateRow[] = [];
  const loads: { rows: number; unit: boolean; ms: number }[] = [];
  for (const size of opts.sizes) {
    progress(`aggregates: generating/locating ${rowsLabel(size)} rows`);
    const parquet = await ensureBenchData(size, opts.dataDir);
    for (const unit of [false, true]) {
      const ws = benchWorkspace(parquet, { unit, prefix: "agg" });
      const policy = loadPolicy(ws.policyFile);
      let engine: DuckDBEngine | undefined;
      const loadMs = await timeOnce(async () => {
        engine = await DuckDBEngine.open(policy, { quiet: true });
      });
      loads.push({ rows: size, unit, ms: loadMs });
      const eng = engine!;
      try {
        const answerer = new Answerer(eng, policy);
        const table = eng.relation(BENCH_DATASET);
        const queries = opts.queries ? BENCH_QUERIES.filter((q) => opts.queries!.has(q.name)) : BENCH_QUERIES;
        if (queries.length === 0) throw new Error(`no bench query named ${[...(opts.queries ?? [])].join(", ")}`);
        for (const q of queries) {
          progress(`aggregates: ${rowsLabel(size)} ${unit ? "with unit" : "no unit"}: ${q.name}`);
          let k = 0;
          // A fresh epsilon each call, so nothing downstream can reuse an earlier answer.
          const dp = async () => {
            const eps = `0.5${String(++k).padStart(6, "0")}`;
            const prepared = await answerer.prepare(BENCH_ANALYST, q.plan(BENCH_DATASET, eps));
            await prepared.compute(new Bits(cryptoBytes));
          };
          const sql = q.sql(table);
          const base = () => eng.query(sql, []);
          const t = await timePair(dp, base, { warmup: opts.warmup, runs: opts.runs(size) });
          const dpS = summarize(t.measured);
          const baseS = summarize(t.baseline);
          out.push({
            rows: size,
            unit,
            query: q.name,
            dp: dpS,
            baseline: baseS,
            ratio: dpS.median / baseS.median,
            target: unit ? TARGET_WITH_UNIT : TARGET_NO_UNIT,
          });
        }
      } finally {
        await eng.close();
        removeWorkspace(ws);
      }
    }
  }
  return { rows: out, loads, markdown: aggregatesMarkdown(out, loads) };
}

export function aggregatesMarkdown(rows: AggregateRow[], loads: { rows: number; unit: boolean; ms: number }[]): string {
  const table = markdownTable(
    ["rows", "privacy unit", "query", "runs", "DP median (min–max)", "plain SQL median (min–max)", "ratio of medians", "target", "met"],
    rows.map((r) => [
      rowsLabel(r.rows),
      r.unit ? "pid, ≤8 rows, ≤2 groups" : "each row",
      r.query,
      String(r.dp.n),
      fmtTiming(r.dp),
      fmtTiming(r.baseline),
      fmtRatio(r.ratio),
      `≤ ${fmtRatio(r.target)}`,
      r.ratio <= r.target ? "yes" : "**no**",
    ]),
  );
  const loadTable = markdownTable(
    ["rows", "privacy unit", "load into DuckDB (once)"],
    loads.map((l) => [rowsLabel(l.rows), l.unit ? "pid" : "each row", fmtMs(l.ms)]),
  );
  return `${table}\n\nLoad times (once per engine, not part of the ratios):\n\n${loadTable}`;
}
