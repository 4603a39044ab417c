/**
 * Worker thread that owns the control (ROUTER) and heartbeat (REP) sockets, so both stay
 * responsive while the main thread runs a cell that never yields (like ipykernel's control and
 * heartbeat threads).
 *
 * Every correctly signed control message is forwarded to the main thread, which dispatches it on
 * the one dispatch path. An `interrupt_request` additionally raises SIGINT on this process first:
 * a synchronous cell runs under `vm` with `breakOnSigint`, so the signal stops it; an awaiting cell
 * is stopped by the main thread's SIGINT listener, and its loops by the shared interrupt flag this
 * thread raises (interrupt-points.ts). Badly signed messages are dropped here.
 *
 * The main thread reports each cell's start and end (it can post while a cell blocks it later),
 * so SIGINT is raised only while a cell runs, and raised again until that cell ends: a signal
 * that lands while the cell is still being compiled is taken by the listener, not by `vm`, and
 * would otherwise leave a busy loop running.
 */
import { parentPort, workerData } from "node:worker_threads";
import * as zmq from "zeromq";
import { endpoint, type ConnectionInfo } from "./connection.js";
import { DELIMITER, Signer } from "./wire.js";
import { isHushError } from "../runtime/errors.js";
import { raiseInterrupt } from "./interrupt-points.js";

export type ToMain =
  | { type: "ready" }
  | { type: "message"; frames: Uint8Array[] }
  | { type: "failed"; message: string };
export type ToControl =
  | { type: "send"; frames: Uint8Array[] }
  | { type: "cell"; running: boolean }
  /** The interrupt flag shared with the main thread (interrupt-points.ts), sent once at start. */
  | { type: "flag"; buffer: SharedArrayBuffer }
  | { type: "close" };

/** Interval between repeated SIGINTs while the interrupted cell still runs, and their number. */
const REPEAT_MS = 150;
const REPEAT_MAX = 40;

async function main(): Promise<void> {
  const port = parentPort;
  if (!port) throw new Error("control-thread must run as a worker");
  const info = workerData as ConnectionInfo;
  const signer = new Signer(info.signature_scheme, info.key);
  const control = new zmq.Router();
  const hb = new zmq.Reply();
  control.linger = 0;
  hb.linger = 0;
  try {
    await control.bind(endpoint(info, "control"));
    await hb.bind(endpoint(info, "hb"));
  } catch (e: unknown) {
    port.postMessage({ type: "failed", message: e instanceof Error ? e.message : String(e) } satisfies ToMain);
    return;
  }

  let sending: Promise<void> = Promise.resolve();
  let cell = 0; // increases when a cell starts
  let running = false;
  let flag: SharedArrayBuffer | null = null;
  const interrupt = (): void => {
    if (!running) return;
    const target = cell;
    // Stops cell loops running after an `await`, even while they block the main thread.
    if (flag) raiseInterrupt(flag);
    process.kill(process.pid, "SIGINT");
    let repeats = 0;
    const timer = setInterval(() => {
      if (!running || cell !== target || ++repeats > REPEAT_MAX) clearInterval(timer);
      else {
        if (flag) raiseInterrupt(flag);
        process.kill(process.pid, "SIGINT");
      }
    }, REPEAT_MS);
  };
  port.on("message", (m: ToControl) => {
    if (m.type === "flag") {
      flag = m.buffer;
      return;
    }
    if (m.type === "cell") {
      if (m.running) cell += 1;
      running = m.running;
      return;
    }
    if (m.type === "close") {
      void sending.finally(() => {
        control.close();
        hb.close();
        port.close();
      });
      return;
    }
    const frames = m.frames.map((f) => Buffer.from(f.buffer, f.byteOffset, f.byteLength));
    sending = sending.then(() => control.send(frames)).catch(logSendError);
  });

  void (async () => {
    for await (const frames of hb) await hb.send(frames); // heartbeat: echo (spec "Heartbeat")
  })().catch(ignoreClosed);

  port.postMessage({ type: "ready" } satisfies ToMain);
  try {
    for await (const frames of control) {
      const type = verifiedType(frames, signer);
      if (type === null) continue;
      if (type === "interrupt_request") interrupt();
      port.postMessage({ type: "message", frames } satisfies ToMain);
    }
  } catch (e: unknown) {
    ignoreClosed(e);
  }
}

/** msg_type of a correctly signed message, or null (logged) for anything else. */
function verifiedType(frames: Buffer[], signer: Signer): string | null {
  const at = frames.findIndex((f) => f.equals(DELIMITER));
  if (at < 0 || frames.length < at + 6 || !signer.verify(frames[at + 1], frames.slice(at + 2, at + 6))) {
    process.stderr.write("hush kernel: dropped a control message with a bad signature or framing\n");
    return null;
  }
  try {
    const header = JSON.parse(frames[at + 2].toString("utf8")) as { msg_type?: unknown };
    return typeof header.msg_type === "string" ? header.msg_type : "";
  } catch {
    return "";
  }
}

function logSendError(e: unknown): void {
  process.stderr.write(`hush kernel: control send failed: ${e instanceof Error ? e.message : String(e)}\n`);
}

function ignoreClosed(e: unknown): void {
  if (e instanceof Error && "code" in e && (e.code === "EBADF" || e.code === "ETERM")) return;
  process.stderr.write(`hush kernel: control thread: ${isHushError(e) || e instanceof Error ? e.message : String(e)}\n`);
}

void main();
