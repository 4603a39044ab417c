/**
 * Entry of one curator worker thread: runs the CPU part of a release (aggregates/finishers.ts), and
 * a preview's expected error of a ratio (aggregates/ratio-preview.ts), so the curator's message loop
 * never waits on noise, intervals or a quantile draw. Each worker keeps
 * its own Bits over the operating system's CSPRNG (Bits is not shared across threads); nothing here
 * reads the data store, the ledger or a key.
 */
import { parentPort } from "node:worker_threads";
import { Bits, cryptoBytes } from "../../core/index.js";
import { isHushError } from "../../errors.js";
import { FINISHERS, type FinisherName } from "../aggregates/finishers.js";
import { runRatioJob } from "../aggregates/ratio-preview.js";
import { fromWire, toWire } from "./wire.js";

export interface JobMessage {
  id: number;
  /** A release's finisher, or "ratio": a preview's expected error of a ratio (ratio-preview.ts). */
  name: FinisherName | "ratio";
  recipe: unknown;
  data: unknown;
}

export type ResultMessage =
  | { id: number; ok: true; rows: unknown }
  | { id: number; ok: false; kind: string | null; message: string };

const bits = new Bits(cryptoBytes);
const port = parentPort;
if (port === null) throw new Error("workers/worker.js runs only as a worker thread");

port.on("message", (job: JobMessage) => {
  let reply: ResultMessage;
  try {
    const run = job.name === "ratio" ? (r: unknown) => runRatioJob(r as Parameters<typeof runRatioJob>[0]) : (FINISHERS[job.name] as ((r: unknown, d: unknown, b: Bits) => unknown) | undefined);
    if (run === undefined) throw new Error(`internal: no finisher named ${String(job.name)}`);
    reply = { id: job.id, ok: true, rows: toWire(run(fromWire(job.recipe), fromWire(job.data), bits)) };
  } catch (e: unknown) {
    // Finishers carry no data values in their messages; the main thread still logs internal ones
    // only to the steward (service.ts describeError).
    reply = { id: job.id, ok: false, kind: isHushError(e) ? e.kind : null, message: isHushError(e) ? e.message : e instanceof Error ? (e.stack ?? e.message) : String(e) };
  }
  port.postMessage(reply);
});
