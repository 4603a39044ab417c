/**
 * The kernel's five sockets. Shell (ROUTER), iopub (PUB) and stdin (ROUTER) live on the main
 * thread; control (ROUTER) and heartbeat (REP) live on the control thread (control-thread.ts) so
 * that interrupts and heartbeats are answered while a cell blocks the main thread.
 *
 * zeromq.js allows one pending send per socket, so every socket gets one send queue.
 */
import { Worker } from "node:worker_threads";
import * as zmq from "zeromq";
import { endpoint, type ConnectionInfo } from "./connection.js";
import type { ControlData, ToControl, ToMain } from "./control-thread.js";
import { UnreachableError } from "../runtime/errors.js";
import { errorText, kernelLog } from "./log.js";
import { interruptState } from "./interrupt-target.js";

export type ReplyChannel = "shell" | "control" | "stdin";

/** Serializes sends on one socket; `drained()` resolves once everything queued so far is sent. */
export class SendQueue {
  private tail: Promise<void> = Promise.resolve();

  constructor(private readonly sendNow: (frames: Buffer[]) => Promise<void>) {}

  send(frames: Buffer[]): Promise<void> {
    const p = this.tail.then(() => this.sendNow(frames));
    this.tail = p.catch((e: unknown) => {
      kernelLog(`send failed: ${errorText(e)}`);
    });
    return p;
  }

  drained(): Promise<void> {
    return this.tail;
  }
}

export interface KernelSockets {
  /** Raw frames of each shell request, in arrival order. */
  shell: AsyncIterable<Buffer[]>;
  send(channel: ReplyChannel | "iopub", frames: Buffer[]): Promise<void>;
  /** Resolves once all iopub messages queued so far have been handed to ZeroMQ. */
  iopubDrained(): Promise<void>;
  /**
   * Every signed control message; `interrupted` is the cell an interrupt_request was aimed at
   * (interrupt-target.ts), 0 for other messages and for an interrupt received between cells.
   */
  onControl(listener: (frames: Buffer[], interrupted: number) => void): void;
  close(): Promise<void>;
}

export async function openSockets(info: ConnectionInfo): Promise<KernelSockets> {
  const shell = new zmq.Router();
  const iopub = new zmq.Publisher();
  const stdin = new zmq.Router();
  for (const s of [shell, iopub, stdin]) s.linger = 1000;
  await Promise.all([
    shell.bind(endpoint(info, "shell")),
    iopub.bind(endpoint(info, "iopub")),
    stdin.bind(endpoint(info, "stdin")),
  ]);

  const worker = new Worker(new URL("./control-thread.js", import.meta.url), {
    workerData: { info, interruptState } satisfies ControlData,
    stderr: true,
  });
  // The worker's stderr would otherwise flow through process.stderr, which cells' output captures.
  worker.stderr.on("data", (chunk: Buffer) => kernelLog(chunk.toString("utf8").replace(/^hush kernel: /, "").trimEnd()));
  let controlListener: ((frames: Buffer[], interrupted: number) => void) | null = null;
  await new Promise<void>((resolve, reject) => {
    worker.on("message", (m: ToMain) => {
      if (m.type === "ready") resolve();
      else if (m.type === "failed") reject(new UnreachableError(`control/heartbeat sockets: ${m.message}`));
      else controlListener?.(m.frames.map((f) => Buffer.from(f.buffer, f.byteOffset, f.byteLength)), m.interrupted);
    });
    worker.once("error", reject);
  });
  worker.unref();

  const queues = {
    shell: new SendQueue((f) => shell.send(f)),
    iopub: new SendQueue((f) => iopub.send(f)),
    stdin: new SendQueue((f) => stdin.send(f)),
    control: new SendQueue(async (f) => worker.postMessage({ type: "send", frames: f } satisfies ToControl)),
  };

  return {
    shell,
    send: (ch, frames) => queues[ch].send(frames),
    iopubDrained: () => queues.iopub.drained(),
    onControl(listener) {
      controlListener = listener;
    },
    async close() {
      await Promise.all(Object.values(queues).map((q) => q.drained()));
      worker.postMessage({ type: "close" } satisfies ToControl);
      await new Promise<void>((resolve) => {
        worker.once("exit", () => resolve());
        // The worker exits once its sockets and port close; terminate if it lingers.
        setTimeout(() => void worker.terminate(), 2000).unref();
      });
      shell.close();
      iopub.close();
      stdin.close();
    },
  };
}
