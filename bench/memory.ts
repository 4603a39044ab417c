/**
 * Resident memory of a curator process holding the 10M-row × 6-column bench dataset: spawn the
 * real curator (dist/runtime/curator/main.js), wait for its ready line (data loaded), then read
 * VmRSS and VmHWM (peak) from /proc/<pid>/status; once more after a few queries.
 */
import os from "node:os";
import path from "node:path";
import { CuratorClient } from "../runtime/client/client.js";
import { BENCH_ANALYST, BENCH_DATASET, benchWorkspace, removeWorkspace } from "./bench-policy.js";
import { CuratorProcess } from "./curator-process.js";
import { ensureBenchData } from "./data.js";
import { fmtMs, markdownTable, progress } from "./harness.js";
import { rowsLabel } from "./aggregates.js";

export const MEMORY_TARGET_BYTES = 1.5 * 2 ** 30;

export interface MemoryResult {
  rows: number;
  startMs: number;
  afterLoad: { rss: number; hwm: number };
  afterQueries: { rss: number; hwm: number };
}

const gib = (b: number) => `${(b / 2 ** 30).toFixed(2)} GiB`;

export async function benchMemory(opts: { rows: number; unit: boolean; dataDir?: string }): Promise<{ result: MemoryResult; markdown: string }> {
  progress(`memory: ${rowsLabel(opts.rows)} rows`);
  const parquet = await ensureBenchData(opts.rows, opts.dataDir);
  const ws = benchWorkspace(parquet, { unit: opts.unit, prefix: "mem" });
  const listen = `ipc://${path.join(ws.dir, "c.sock")}`;
  const t0 = performance.now();
  const proc = await CuratorProcess.start({ policyFile: ws.policyFile, listen, startTimeoutMs: 600_000 });
  const startMs = performance.now() - t0;
  try {
    const afterLoad = proc.memory();
    if (afterLoad === null) throw new Error("cannot read /proc/<pid>/status (not Linux?)");
    const client = await CuratorClient.connect({ address: listen, analyst: BENCH_ANALYST, token: ws.tokens[BENCH_ANALYST], timeoutMs: 600_000 });
    try {
      await client.ask({ v: 1, dataset: BENCH_DATASET, measure: { kind: "count" }, privacy: { epsilon: "0.1" } });
      await client.ask({ v: 1, dataset: BENCH_DATASET, groupBy: [{ column: "region" }], measure: { kind: "mean", column: "amount" }, privacy: { epsilon: "0.1" } });
      await client.ask({ v: 1, dataset: BENCH_DATASET, measure: { kind: "quantile", column: "amount", p: [0.5] }, privacy: { epsilon: "0.1" } });
    } finally {
      await client.close();
    }
    const afterQueries = proc.memory()!;
    const result: MemoryResult = { rows: opts.rows, startMs, afterLoad, afterQueries };
    const met = (b: number) => (b <= MEMORY_TARGET_BYTES ? "yes" : "**no**");
    const markdown =
      markdownTable(
        ["moment", "VmRSS", "VmHWM (peak)", "target ≤ 1.5 GiB (peak)"],
        [
          [`after loading ${rowsLabel(opts.rows)} rows × 6 columns (start ${fmtMs(startMs)})`, gib(afterLoad.rss), gib(afterLoad.hwm), met(afterLoad.hwm)],
          ["after count, grouped mean, median", gib(afterQueries.rss), gib(afterQueries.hwm), met(afterQueries.hwm)],
        ],
      ) + `\n\nPrivacy unit: ${opts.unit ? "pid (bounded)" : "each row"}. Machine memory ${gib(os.totalmem())}.`;
    return { result, markdown };
  } finally {
    await proc.stop();
    removeWorkspace(ws);
  }
}
