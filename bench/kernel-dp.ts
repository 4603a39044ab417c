/**
 * A DP count end to end through the kernel: a notebook cell
 *   await hush.open("bench").then((h) => h.count({ epsilon: "<fresh>" }))
 * (the `await (await hush.open(...)).count(...)` form does not parse in the kernel at the time of
 * writing: tslab's top-level-await rewrite breaks the nested await)
 * sent as execute_request to a real kernel process whose `hush` talks to a real curator process
 * (ipc) holding the generated bench rows with a privacy unit. Baseline: a trivial cell (`1 + 1`)
 * through the same kernel, timed alternately. Each DP cell asks a fresh epsilon, so every one is
 * a new release (no replay short-cut).
 */
import path from "node:path";
import { KernelProcess } from "../kernel/client/index.js";
import { rowsLabel } from "./aggregates.js";
import { BENCH_ANALYST, BENCH_DATASET, benchWorkspace, removeWorkspace } from "./bench-policy.js";
import { CuratorProcess } from "./curator-process.js";
import { ensureBenchData } from "./data.js";
import { fmtMs, fmtRatio, fmtTiming, markdownTable, progress, summarize, timePair } from "./harness.js";

export const KERNEL_DP_TARGET_MS = 100;

export async function benchKernelDp(opts: { quick: boolean; dataDir: string }): Promise<string> {
  const rows = opts.quick ? 100_000 : 1_000_000;
  const runs = opts.quick ? 5 : 60;
  progress(`kernel DP count: ${rowsLabel(rows)} rows, ${runs} runs`);
  const parquet = await ensureBenchData(rows, opts.dataDir);
  const ws = benchWorkspace(parquet, { unit: true, prefix: "kdp" });
  const listen = `ipc://${path.join(ws.dir, "c.sock")}`;
  const curator = await CuratorProcess.start({ policyFile: ws.policyFile, listen, startTimeoutMs: 600_000 });
  let kernel: KernelProcess | null = null;
  try {
    kernel = await KernelProcess.start({
      env: { HUSH_CURATOR: curator.address, HUSH_ANALYST: BENCH_ANALYST, HUSH_TOKEN: ws.tokens[BENCH_ANALYST] },
    });
    const k = kernel;
    const run = async (code: string) => {
      const r = await k.execute(code);
      if (r.reply.status !== "ok") throw new Error(`bench cell failed: ${JSON.stringify(r.reply).slice(0, 500)}\n${JSON.stringify(r.outputs).slice(0, 1000)}`);
      return r;
    };
    // The first cell pays for loading the cell API and connecting; not part of the figures.
    await run(`await hush.open(${JSON.stringify(BENCH_DATASET)})`);
    let n = 0;
    const fresh = () => `0.01${String(++n).padStart(6, "0")}`;
    const openCount = () => run(`await hush.open(${JSON.stringify(BENCH_DATASET)}).then((h) => h.count({ epsilon: "${fresh()}" }))`);
    const trivial = () => run("1 + 1");
    const a = await timePair(openCount, trivial, { warmup: 3, runs });
    await run(`const benchHandle = await hush.open(${JSON.stringify(BENCH_DATASET)})`);
    const countOnly = () => run(`await benchHandle.count({ epsilon: "${fresh()}" })`);
    const b = await timePair(countOnly, trivial, { warmup: 2, runs });
    const s1 = summarize(a.measured);
    const s2 = summarize(b.measured);
    const base = summarize([...a.baseline, ...b.baseline]);
    const met = (ms: number) => (ms <= KERNEL_DP_TARGET_MS ? "yes" : "**no**");
    return (
      markdownTable(
        ["cell", "runs", "median (min–max)", "p95", "ratio to `1 + 1` cell", `target p50 ≤ ${KERNEL_DP_TARGET_MS} ms`],
        [
          ["`await hush.open(\"bench\").then((h) => h.count({ epsilon }))`", String(s1.n), fmtTiming(s1), fmtMs(s1.p95), fmtRatio(s1.median / base.median), met(s1.median)],
          ["`await benchHandle.count({ epsilon })` (handle opened before)", String(s2.n), fmtTiming(s2), fmtMs(s2.p95), fmtRatio(s2.median / base.median), met(s2.median)],
          ["`1 + 1` (baseline, same kernel, alternated)", String(base.n), fmtTiming(base), fmtMs(base.p95), "1.00×", ""],
        ],
      ) +
      `\n\n${rowsLabel(rows)} rows, privacy unit pid (≤ 8 rows per unit); curator in its own process over ipc; ` +
      `each DP cell is a fresh release (new epsilon), so each one is computed, signed and committed to the ledger.`
    );
  } finally {
    kernel?.kill();
    await curator.stop();
    removeWorkspace(ws);
  }
}
