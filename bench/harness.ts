/**
 * Timing, summary and report helpers shared by every bench section. No timing assertion lives
 * here: figures are written to bench/RESULTS.md and read by people.
 */
import os from "node:os";
import { performance } from "node:perf_hooks";

export interface Summary {
  n: number;
  median: number;
  min: number;
  max: number;
  p95: number;
}

/** Median, extremes and 95th percentile (nearest rank) of a list of timings in milliseconds. */
export function summarize(values: readonly number[]): Summary {
  if (values.length === 0) throw new RangeError("summarize: no values");
  const s = [...values].sort((a, b) => a - b);
  const mid = s.length >> 1;
  const median = s.length % 2 === 1 ? s[mid] : (s[mid - 1] + s[mid]) / 2;
  // Nearest-rank percentile: the smallest value with at least 95% of the values at or below it.
  const p95 = s[Math.min(s.length - 1, Math.ceil(0.95 * s.length) - 1)];
  return { n: s.length, median, min: s[0], max: s[s.length - 1], p95 };
}

/** Wall time of one call in milliseconds. */
export async function timeOnce(fn: () => Promise<unknown> | unknown): Promise<number> {
  const t0 = performance.now();
  await fn();
  return performance.now() - t0;
}

/**
 * Times a measured path and its baseline alternately (A, B, A, B, ...) after warm-up calls, so a
 * slow drift of the machine (page cache, CPU clock, background work) lands on both equally.
 */
export async function timePair(
  measured: () => Promise<unknown>,
  baseline: () => Promise<unknown>,
  opts: { warmup: number; runs: number },
): Promise<{ measured: number[]; baseline: number[] }> {
  for (let i = 0; i < opts.warmup; i++) {
    await measured();
    await baseline();
  }
  const m: number[] = [];
  const b: number[] = [];
  for (let i = 0; i < opts.runs; i++) {
    // Swap the order every other run so neither side always runs on a warmer cache.
    if (i % 2 === 0) {
      m.push(await timeOnce(measured));
      b.push(await timeOnce(baseline));
    } else {
      b.push(await timeOnce(baseline));
      m.push(await timeOnce(measured));
    }
  }
  return { measured: m, baseline: b };
}

export interface MachineFacts {
  cpuModel: string;
  cores: number;
  memoryGiB: string;
  node: string;
  platform: string;
  date: string;
  /** 1-minute load average at the start: other work on the machine skews every figure. */
  load: string;
}

export function machineFacts(): MachineFacts {
  const cpus = os.cpus();
  return {
    cpuModel: cpus[0]?.model.trim() ?? "unknown",
    cores: cpus.length,
    memoryGiB: (os.totalmem() / 2 ** 30).toFixed(1),
    node: process.version,
    platform: `${os.type()} ${os.release()} ${os.arch()}`,
    date: new Date().toISOString(),
    load: os.loadavg().map((l) => l.toFixed(2)).join(" / "),
  };
}

/** "12.3 ms (11.9–13.0)" */
export function fmtTiming(s: Summary): string {
  return `${fmtMs(s.median)} (${fmtMs(s.min)}–${fmtMs(s.max)})`;
}

export function fmtMs(ms: number): string {
  if (ms >= 1000) return `${(ms / 1000).toFixed(2)} s`;
  if (ms >= 100) return `${ms.toFixed(0)} ms`;
  if (ms >= 10) return `${ms.toFixed(1)} ms`;
  return `${ms.toFixed(2)} ms`;
}

export function fmtRatio(r: number): string {
  return `${r.toFixed(2)}×`;
}

export function markdownTable(headers: readonly string[], rows: readonly (readonly string[])[]): string {
  const esc = (c: string) => c.replace(/\|/g, "\\|");
  const lines = [
    `| ${headers.map(esc).join(" | ")} |`,
    `| ${headers.map(() => "---").join(" | ")} |`,
    ...rows.map((r) => `| ${r.map(esc).join(" | ")} |`),
  ];
  return lines.join("\n");
}

export function machineMarkdown(m: MachineFacts): string {
  return markdownTable(
    ["fact", "value"],
    [
      ["CPU", m.cpuModel],
      ["cores", String(m.cores)],
      ["memory", `${m.memoryGiB} GiB`],
      ["node", m.node],
      ["OS", m.platform],
      ["date (UTC)", m.date],
      ["load average at start (1/5/15 min)", m.load],
    ],
  );
}

/** Writes a progress line to stderr so a long run shows where it is. */
export function progress(message: string): void {
  process.stderr.write(`[bench ${new Date().toISOString().slice(11, 19)}] ${message}\n`);
}
