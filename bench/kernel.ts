/**
 * Kernel overhead: a trivial cell's round trip through the kernel (execute_request → reply and
 * iopub idle, over loopback ZeroMQ with signing) against tslab's executor running the same cell
 * in this process, measured alternately in the same run; and kernel start time (spawn →
 * kernel_info_reply with its idle, i.e. ready for a first cell).
 *
 * Run alone: `node dist/bench/kernel.js [--quick]`.
 */
import { createRequire } from "node:module";
import { pathToFileURL } from "node:url";
import { KernelProcess } from "../kernel/client/index.js";
import type * as TsExecutor from "tslab/dist/executor.js";
import type * as TsConverter from "tslab/dist/converter.js";
import { fmtRatio, fmtTiming, markdownTable, summarize, timeOnce, timePair, type Summary } from "./harness.js";

export interface KernelBenchRow {
  name: string;
  summary: Summary;
  /** Ratio of medians to the baseline row, when there is one. */
  ratio: number | null;
}

const CELL = "1 + 1";

function tslabAlone(): { run: () => Promise<void>; close: () => void } {
  const require = createRequire(import.meta.url);
  const { createExecutor } = require("tslab/dist/executor") as typeof TsExecutor;
  const { createConverter } = require("tslab/dist/converter") as typeof TsConverter;
  const node = createConverter({ isJS: false, isBrowser: false });
  const executor = createExecutor(process.cwd(), { node, browser: node, close: () => node.close() }, {
    log: () => {},
    error: () => {},
  });
  return {
    run: async () => {
      if (!(await executor.execute(CELL))) throw new Error("bench cell failed in tslab");
    },
    close: () => executor.close(),
  };
}

export async function benchKernel(opts: { quick?: boolean } = {}): Promise<{ markdown: string; rows: KernelBenchRow[] }> {
  const quick = opts.quick ?? false;
  const starts: number[] = [];
  const firstCells: number[] = [];
  for (let i = 0; i < (quick ? 1 : 5); i++) {
    let k: KernelProcess | null = null;
    const t0 = performance.now();
    starts.push(await timeOnce(async () => (k = await KernelProcess.start())));
    // The TypeScript program is built after the first kernel_info reply, so the first cell pays for it.
    const r = await (k as unknown as KernelProcess).execute(CELL);
    if (r.reply.status !== "ok") throw new Error("bench cell failed in the kernel");
    firstCells.push(performance.now() - t0);
    (k as KernelProcess | null)?.kill();
  }

  const kernel = await KernelProcess.start();
  const alone = tslabAlone();
  let pair: { measured: number[]; baseline: number[] };
  try {
    pair = await timePair(
      async () => {
        const r = await kernel.execute(CELL);
        if (r.reply.status !== "ok") throw new Error("bench cell failed in the kernel");
      },
      alone.run,
      { warmup: quick ? 2 : 10, runs: quick ? 10 : 100 },
    );
  } finally {
    alone.close();
    await kernel.shutdown().catch(() => kernel.kill());
  }

  const through = summarize(pair.measured);
  const baseline = summarize(pair.baseline);
  const rows: KernelBenchRow[] = [
    { name: `cell \`${CELL}\` through the kernel (execute_request → idle)`, summary: through, ratio: through.median / baseline.median },
    { name: `same cell, tslab executor in-process (baseline)`, summary: baseline, ratio: null },
    { name: "kernel start (spawn → kernel_info_reply + idle)", summary: summarize(starts), ratio: null },
    { name: `spawn → first \`${CELL}\` result (includes building the TypeScript program)`, summary: summarize(firstCells), ratio: null },
  ];
  const markdown = [
    markdownTable(
      ["measurement", "n", "median (min–max)", "ratio to baseline"],
      rows.map((r) => [r.name, String(r.summary.n), fmtTiming(r.summary), r.ratio === null ? "" : fmtRatio(r.ratio)]),
    ),
    "",
    "The round trip adds signing, three loopback ZeroMQ hops (request, reply, iopub status) and the " +
      "busy/idle bracket to the executor's own work. The kernel answers kernel_info before it builds " +
      "the TypeScript program (lib and @types/node, about 2 s), so start is quick and the first cell " +
      "waits for the build.",
  ].join("\n");
  return { markdown, rows };
}

if (process.argv[1] && import.meta.url === pathToFileURL(process.argv[1]).href) {
  benchKernel({ quick: process.argv.includes("--quick") })
    .then(({ markdown }) => {
      process.stdout.write(`## Kernel\n\n${markdown}\n`);
      process.exit(0);
    })
    .catch((e: unknown) => {
      process.stderr.write(`bench/kernel: ${e instanceof Error ? (e.stack ?? e.message) : String(e)}\n`);
      process.exit(1);
    });
}
