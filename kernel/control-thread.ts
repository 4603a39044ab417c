/**
 * Worker thread that owns the control (ROUTER) and heartbeat (REP) sockets, so both stay
 * responsive while the main thread runs a cell that never yields (like ipykernel's control and
 * heartbeat threads).
 *
 * Every correctly signed control message is forwarded to the main thread, which dispatches it on
 * the one dispatch path. An `interrupt_request` is first aimed at the cell running when it
 * arrives, read from memory shared with the main thread (interrupt-target.ts), and dropped when
 * none runs: the cell's number is recorded as interrupted (interrupt points in its loops and its
 * `vm` call read it), its first synchronous stretch gets one SIGINT while it runs inside `vm` (at
 * once, or as soon as it gets there if it is still compiling), and the forwarded message carries
 * the number, so the main thread stops awaiting that cell and no other. Badly signed messages are
 * dropped here.
 */
import { parentPort, workerData } from "node:worker_threads";
import * as zmq from "zeromq";
import { endpoint, type ConnectionInfo } from "./connection.js";
import { DELIMITER, Signer } from "./wire.js";
import { isHushError } from "../runtime/errors.js";
import { InterruptSender } from "./interrupt-target.js";

export interface ControlData {
  info: ConnectionInfo;
  /** Memory shared with the main thread: which cell runs, which one is interrupted (interrupt-target.ts). */
  interruptState: SharedArrayBuffer;
}
export type ToMain =
  | { type: "ready" }
  /** `interrupted`: the cell an interrupt_request was aimed at, else 0. */
  | { type: "message"; frames: Uint8Array[]; interrupted: number }
  | { type: "failed"; message: string };
export type ToControl = { type: "send"; frames: Uint8Array[] } | { type: "close" };

/** While an interrupted cell has not reached `vm` yet: how often to look again. */
const SIGNAL_POLL_MS = 5;
/** While an interrupted cell still runs: how often the point counter is moved to its next check. */
const NUDGE_MS = 150;

async function main(): Promise<void> {
  const port = parentPort;
  if (!port) throw new Error("control-thread must run as a worker");
  const { info, interruptState } = workerData as ControlData;
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

  const sender = new InterruptSender(interruptState);
  /** The cell being followed after an interrupt (one at a time: cells run one after another). */
  let following = 0;
  const interrupt = (): number => {
    const k = sender.request();
    if (k === 0 || k === following) return k;
    following = k;
    let lastNudge = Date.now();
    let signalled = false;
    const step = (): void => {
      if (following !== k) return;
      if (!sender.pending(k)) {
        following = 0;
        return;
      }
      if (!signalled) {
        try {
          signalled = sender.signal(k) !== "wait";
        } catch (e: unknown) {
          signalled = true;
          process.stderr.write(`hush kernel: could not send SIGINT to cell ${k}: ${e instanceof Error ? e.message : String(e)}\n`);
        }
      }
      if (Date.now() - lastNudge >= NUDGE_MS) {
        sender.nudge();
        lastNudge = Date.now();
      }
      setTimeout(step, signalled ? NUDGE_MS : SIGNAL_POLL_MS).unref();
    };
    step();
    return k;
  };

  let sending: Promise<void> = Promise.resolve();
  port.on("message", (m: ToControl) => {
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
      const interrupted = type === "interrupt_request" ? interrupt() : 0;
      port.postMessage({ type: "message", frames, interrupted } satisfies ToMain);
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
