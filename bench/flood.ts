/**
 * A legitimate analyst's latency while someone floods the curator with wrong tokens.
 *
 * A real curator process over tcp+CURVE on 127.0.0.1 holds a small generated dataset. The analyst
 * (a typed CuratorClient) asks `spend` on a fixed schedule, every INTERVAL_MS whether or not the
 * previous answer is in, and each latency is counted from the scheduled moment: a client that waited
 * for each answer before asking again would ask less during a stall and hide it from the p95
 * ("coordinated omission"). First with the curator idle, then while a flood (bench/flood-driver.ts, in a child process) sends wrong-token requests
 * from several connections at a fixed rate for a fixed time. Reported: both p95 latencies and
 * their ratio (target: flood p95 within 5× the idle p95), what became of the flood's requests, and
 * the curator's peak resident memory during the flood. No assertion: figures are for people.
 */
import { spawn } from "node:child_process";
import fs from "node:fs";
import os from "node:os";
import path from "node:path";
import { setTimeout as delay } from "node:timers/promises";
import { fileURLToPath } from "node:url";
import { CuratorClient } from "../runtime/client/client.js";
import { isHushError } from "../runtime/errors.js";
import { CuratorProcess } from "./curator-process.js";
import type { FloodOptions, FloodResult } from "./flood-driver.js";
import { fmtMs, fmtRatio, markdownTable, progress, summarize } from "./harness.js";
import { writeWorkspace } from "./workspace.js";

export const FLOOD_TARGET_RATIO = 5;
/** The flood's connections: zeromq fair-queues between peers, so more connections push the analyst further back. */
const FLOOD_SOCKETS = 32;
const ANALYST = "ward";
/** The analyst who floods with previews (bench/flood-driver.ts `preview`). */
const FLOODER = "mallory";
const DATASET = "visits";
/** A legitimate request with no answer within this time counts as unanswered (its latency as this). */
const LEGIT_TIMEOUT_MS = 30_000;

/** A small workspace: 300 generated rows, one analyst. The figures do not depend on the data. */
function floodWorkspace(): { dir: string; policyFile: string; token: string; flooderToken: string } {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), "hush-flood-"));
  const lines = ["pid,age,amount"];
  for (let i = 0; i < 300; i++) lines.push(`${i % 100},${20 + ((i * 37) % 60)},${(i * 7919) % 1000}.25`);
  fs.mkdirSync(path.join(dir, "data"));
  fs.writeFileSync(path.join(dir, "data", "visits.csv"), lines.join("\n") + "\n");
  const ws = writeWorkspace(dir, {
    analysts: [ANALYST, FLOODER],
    datasets: {
      [DATASET]: {
        description: "Generated rows for the flood bench",
        source: "data/visits.csv",
        unit: { column: "pid", maxRows: 4, maxGroups: 2 },
        accounting: { mode: "pure", cap: { epsilon: "10" } },
        analysts: [ANALYST, FLOODER],
        columns: { age: { type: "integer", range: [0, 100], step: "1" }, amount: { type: "number", range: [0, 1000000], step: "0.001" } },
      },
    },
  });
  return { dir, policyFile: ws.policyFile, token: ws.tokens[ANALYST], flooderToken: ws.tokens[FLOODER] };
}

/** Runs the flood driver in a child process and resolves with its result line. */
function floodChild(opts: FloodOptions): Promise<FloodResult> {
  const driver = path.join(path.dirname(fileURLToPath(import.meta.url)), "flood-driver.js");
  const child = spawn(process.execPath, [driver, JSON.stringify(opts)], { stdio: ["ignore", "pipe", "pipe"] });
  let out = "";
  let err = "";
  child.stdout.on("data", (d: Buffer) => (out += d.toString("utf8")));
  child.stderr.on("data", (d: Buffer) => (err = (err + d.toString("utf8")).slice(-10_000)));
  return new Promise((resolve, reject) => {
    child.once("exit", (code) => {
      if (code === 0) resolve(JSON.parse(out.trim()) as FloodResult);
      else reject(new Error(`flood driver exited with ${code}: ${err}`));
    });
  });
}

/** The analyst's schedule: one `spend` every INTERVAL_MS (50 a second). */
const INTERVAL_MS = 20;

interface Timed {
  ms: number;
  answered: boolean;
  refused: string | null;
}

/** Times one `spend` from `t0` (its scheduled moment); a timeout counts as unanswered at LEGIT_TIMEOUT_MS. */
async function timedSpend(client: CuratorClient, t0: number): Promise<Timed> {
  try {
    await client.spend(DATASET);
    return { ms: performance.now() - t0, answered: true, refused: null };
  } catch (e: unknown) {
    if (isHushError(e) && e.kind !== "unreachable") return { ms: performance.now() - t0, answered: true, refused: e.kind };
    return { ms: Math.max(performance.now() - t0, LEGIT_TIMEOUT_MS), answered: false, refused: null };
  }
}

/** Asks on the schedule for `durationMs` and resolves with every request's outcome once all are in. */
async function onSchedule(client: CuratorClient, durationMs: number, onTick: () => void = () => undefined): Promise<Timed[]> {
  const start = performance.now();
  const all: Promise<Timed>[] = [];
  for (let i = 0; i * INTERVAL_MS < durationMs; i++) {
    const at = start + i * INTERVAL_MS;
    const wait = at - performance.now();
    if (wait > 0) await delay(wait);
    all.push(timedSpend(client, at));
    onTick();
  }
  return Promise.all(all);
}

/** The preview the analyst's own flood asks: a std with its expected error for an assumed count. */
const STD_PREVIEW = { measure: { kind: "std", column: "amount" }, assumeCount: 1_000_000 };
/** Or (HUSH_BENCH_PREVIEW=accuracy): a 1000-bin histogram asked accuracy first, whose cost search runs at planning. */
const ACCURACY_PREVIEW = { measure: { kind: "histogram", column: "amount", bins: 1000 }, accuracyFirst: { confidence: 0.999999999999 } };
const HEAVY_PREVIEW: { measure: { kind: string; column: string; bins?: number }; assumeCount?: number; accuracyFirst?: { confidence: number } } =
  process.env.HUSH_BENCH_PREVIEW === "accuracy" ? ACCURACY_PREVIEW : STD_PREVIEW;

export async function benchFlood(opts: { quick: boolean }): Promise<string> {
  return floodSection(opts, "wrong");
}

/** A legitimate analyst's latency while another analyst, signed in, floods with previews. */
export async function benchPreviewFlood(opts: { quick: boolean }): Promise<string> {
  return floodSection(opts, "previews");
}

async function floodSection(opts: { quick: boolean }, kind: "wrong" | "previews"): Promise<string> {
  const rate = kind === "wrong" ? (opts.quick ? 500 : 1000) : opts.quick ? 100 : 200;
  const durationMs = opts.quick ? 3_000 : 10_000;
  const idleMs = opts.quick ? 2_000 : 6_000;
  const what =
    kind === "wrong"
      ? "wrong tokens"
      : HEAVY_PREVIEW.accuracyFirst === undefined
        ? `previews (${HEAVY_PREVIEW.measure.kind} of ${HEAVY_PREVIEW.measure.column}, assumed count ${HEAVY_PREVIEW.assumeCount}, fresh epsilon each) by the signed-in analyst ${FLOODER}`
        : `previews (${HEAVY_PREVIEW.measure.bins}-bin histogram of ${HEAVY_PREVIEW.measure.column} accuracy first at confidence ${HEAVY_PREVIEW.accuracyFirst.confidence}, a fresh half-width each) by the signed-in analyst ${FLOODER}`;
  progress(`flood: ${rate} ${what}/s for ${durationMs / 1000} s over tcp+CURVE`);
  const ws = floodWorkspace();
  const proc = await CuratorProcess.start({ policyFile: ws.policyFile, listen: "tcp://127.0.0.1:0" });
  try {
    const curveServerKey = proc.ready.curvePublicKey;
    if (curveServerKey === undefined) throw new Error("the curator printed no CURVE public key for tcp");
    const client = await CuratorClient.connect({ address: proc.address, analyst: ANALYST, token: ws.token, curveServerKey, timeoutMs: LEGIT_TIMEOUT_MS });
    try {
      // Warm-up: the first request pays for the analyst's one scrypt check and JIT compilation.
      for (let i = 0; i < 20; i++) await client.spend(DATASET);
      const idle = (await onSchedule(client, idleMs)).map((r) => r.ms);

      const rssBefore = proc.memory()?.rss ?? NaN;
      let rssPeak = rssBefore;
      const flood = floodChild({
        address: proc.address,
        curveServerKey,
        sockets: FLOOD_SOCKETS,
        rate,
        durationMs,
        drainMs: 20_000,
        targetAnalyst: kind === "wrong" ? ANALYST : FLOODER,
        dataset: DATASET,
        ...(kind === "previews" ? { preview: { token: ws.flooderToken, ...HEAVY_PREVIEW } } : {}),
      });
      const timed = await onSchedule(client, durationMs, () => {
        rssPeak = Math.max(rssPeak, proc.memory()?.rss ?? NaN);
      });
      const during = timed.map((r) => r.ms);
      const unanswered = timed.filter((r) => !r.answered).length;
      const refused: Record<string, number> = {};
      for (const r of timed) if (r.refused !== null) refused[r.refused] = (refused[r.refused] ?? 0) + 1;
      const floodResult = await flood;
      rssPeak = Math.max(rssPeak, proc.memory()?.rss ?? NaN);

      const a = summarize(idle);
      const b = summarize(during);
      const ratio = b.p95 / a.p95;
      const mib = (x: number) => `${(x / 2 ** 20).toFixed(0)} MiB`;
      const replies = Object.entries(floodResult.replies)
        .map(([k, v]) => `${k} ${v}`)
        .join(", ");
      return (
        markdownTable(
          ["analyst's `spend`", "requests", "median", "p95", "max", "unanswered / refused"],
          [
            ["idle curator", String(a.n), fmtMs(a.median), fmtMs(a.p95), fmtMs(a.max), "0"],
            [
              `during the flood (${rate}/s ${kind === "wrong" ? "wrong tokens" : `previews by ${FLOODER}`}, ${FLOOD_SOCKETS} connections, ${durationMs / 1000} s)`,
              String(b.n),
              fmtMs(b.median),
              fmtMs(b.p95),
              fmtMs(b.max),
              `${unanswered} / ${Object.entries(refused).map(([k, v]) => `${k} ${v}`).join(", ") || "0"}`,
            ],
          ],
        ) +
        `\n\nFlood p95 / idle p95: **${fmtRatio(ratio)}** (target ≤ ${FLOOD_TARGET_RATIO}×: ${ratio <= FLOOD_TARGET_RATIO ? "met" : "**not met**"}). ` +
        `The analyst asks every ${INTERVAL_MS} ms, each latency counted from its scheduled moment; ` +
        `a request with no answer within ${LEGIT_TIMEOUT_MS / 1000} s counts at ${LEGIT_TIMEOUT_MS / 1000} s.\n\n` +
        `The flood: ${floodResult.sent} requests sent in ${(floodResult.sendMs / 1000).toFixed(1)} s ` +
        `(${floodResult.notQueued} not queued by zeromq); replies: ${replies || "none"}; ` +
        `${floodResult.unanswered} without a reply 20 s after the last send. ` +
        `Curator RSS ${mib(rssBefore)} before the flood, peak ${mib(rssPeak)} sampled during it.`
      );
    } finally {
      await client.close();
    }
  } finally {
    // SIGKILL: a curator still working through a backlog of checks would otherwise take minutes to stop.
    await proc.kill9();
    fs.rmSync(ws.dir, { recursive: true, force: true });
  }
}
