/**
 * First completion after kernel start: spawn → first complete_reply (`Math.fl`), and spawn → the
 * first complete_reply that comes from the TypeScript language service rather than the quick path
 * (completion-quick.ts). Baseline, alternated in the same run: a fresh Node process that builds
 * tslab's language service and answers the same completion — the work a kernel that builds the
 * service on the first request makes that request wait for.
 *
 * Run alone: `node dist/bench/completion.js [--quick]`.
 */
import { spawn } from "node:child_process";
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { pathToFileURL } from "node:url";
import { KernelProcess } from "../kernel/client/index.js";
import { fmtRatio, fmtTiming, markdownTable, summarize, type Summary } from "./harness.js";

const CODE = "Math.fl";
/** Pause between polls for the language service's answer. */
const POLL_MS = 100;

interface KernelRun {
  first: number;
  firstSource: string;
  typed: number;
}

async function kernelRun(cwd: string): Promise<KernelRun> {
  const t0 = performance.now();
  // The real cell API (not loaded until needed): what a user's kernel does at start.
  const k = await KernelProcess.start({ cwd, env: { HUSH_DEMO_DIR: join(cwd, "demo") } });
  try {
    const ask = () => k.request("shell", "complete_request", { code: CODE, cursor_pos: CODE.length });
    const source = (r: Awaited<ReturnType<typeof ask>>) => String((r.metadata as { hush?: { source?: string } }).hush?.source);
    const r = await ask();
    if (!(r.matches as string[]).includes("floor")) throw new Error("bench completion missed floor");
    const first = performance.now() - t0;
    const firstSource = source(r);
    let typed = first;
    for (let s = firstSource; s !== "types"; s = source(await ask())) {
      await new Promise((res) => setTimeout(res, POLL_MS));
      typed = performance.now() - t0;
      if (typed > 120_000) throw new Error("the language service never answered");
    }
    return { first, firstSource, typed };
  } finally {
    await k.shutdown().catch(() => k.kill());
  }
}

/** A fresh process: build tslab's converter, answer the completion; ms from spawn to the answer. */
function serviceAlone(): Promise<number> {
  const script = `
    const { createConverter } = require("tslab/dist/converter");
    const c = createConverter({ isJS: false, isBrowser: false });
    const r = c.complete("", ${JSON.stringify(CODE)}, ${CODE.length});
    if (!r.candidates.includes("floor")) process.exit(3);
    process.stdout.write("ok");
    c.close();
    process.exit(0);`;
  const t0 = performance.now();
  return new Promise((resolve, reject) => {
    const child = spawn(process.execPath, ["-e", script], { cwd: process.cwd(), stdio: ["ignore", "pipe", "inherit"] });
    let out = "";
    child.stdout.on("data", (b: Buffer) => {
      out += b.toString();
      if (out === "ok") resolve(performance.now() - t0);
    });
    child.on("exit", (code) => (code === 0 ? undefined : reject(new Error(`baseline process exited with ${code}`))));
  });
}

export async function benchCompletion(opts: { quick?: boolean } = {}): Promise<{ markdown: string; first: Summary; typed: Summary; baseline: Summary }> {
  const runs = opts.quick ? 2 : 5;
  const dir = mkdtempSync(join(tmpdir(), "hush-bench-complete-"));
  const firsts: number[] = [];
  const typeds: number[] = [];
  const baselines: number[] = [];
  const sources: string[] = [];
  try {
    for (let i = 0; i < runs; i++) {
      // Alternated, so load on the machine affects both alike.
      const r = await kernelRun(dir);
      firsts.push(r.first);
      typeds.push(r.typed);
      sources.push(r.firstSource);
      baselines.push(await serviceAlone());
    }
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
  const first = summarize(firsts);
  const typed = summarize(typeds);
  const baseline = summarize(baselines);
  const quickCount = sources.filter((s) => s === "quick").length;
  const markdown = [
    markdownTable(
      ["measurement", "n", "median (min–max)", "ratio to baseline"],
      [
        [`kernel spawn → first complete_reply (\`${CODE}\`)`, String(first.n), fmtTiming(first), fmtRatio(first.median / baseline.median)],
        ["kernel spawn → first complete_reply from the language service", String(typed.n), fmtTiming(typed), fmtRatio(typed.median / baseline.median)],
        ["fresh process: build tslab's language service + same completion (baseline)", String(baseline.n), fmtTiming(baseline), ""],
      ],
    ),
    "",
    `The first reply came from the quick path (live values) in ${quickCount} of ${runs} runs, from the ` +
      "language service otherwise. The service is built on its own thread from the first kernel_info answer; until it " +
      "is ready the main thread answers completion from live values, so the first answer waits only " +
      "for the cell API to load, not for the service.",
  ].join("\n");
  return { markdown, first, typed, baseline };
}

if (process.argv[1] && import.meta.url === pathToFileURL(process.argv[1]).href) {
  benchCompletion({ quick: process.argv.includes("--quick") })
    .then(({ markdown }) => {
      process.stdout.write(`## First completion\n\n${markdown}\n`);
      process.exit(0);
    })
    .catch((e: unknown) => {
      process.stderr.write(`bench/completion: ${e instanceof Error ? (e.stack ?? e.message) : String(e)}\n`);
      process.exit(1);
    });
}
