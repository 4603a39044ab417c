/**
 * Everything a running cell sends to iopub, in the order the cell produced it: stream text
 * (process.stdout/stderr, so console.log too), display_data, update_display_data, results.
 * Each item is tagged with the shell request that was current when it was produced
 * (ipykernel iostream.py), and `flush()` is awaitable so the reply never overtakes output.
 *
 * Text written while a cell blocks the main thread is buffered and published once it yields.
 */
import type { Message } from "./wire.js";
import { errorText, kernelLog } from "./log.js";

export type StreamName = "stdout" | "stderr";
export type Publish = (msgType: string, content: Record<string, unknown>, parent: Message | null) => Promise<void>;

/** Bytes of buffered stream text that trigger an early publish. */
const STREAM_CHUNK = 64 * 1024;

export class Output {
  private parent: Message | null = null;
  private chain: Promise<void> = Promise.resolve();
  private pending: { name: StreamName; text: string; parent: Message | null } | null = null;
  private scheduled = false;
  private muted = false;
  private restore: (() => void) | null = null;

  constructor(private readonly publishNow: Publish) {}

  /** The shell request later output belongs to. */
  setParent(msg: Message): void {
    this.commit();
    this.parent = msg;
    this.muted = false;
  }

  /** Drops everything the current request produces (execute_request with silent=true). */
  mute(): void {
    this.muted = true;
  }

  write(name: StreamName, text: string): void {
    if (text === "" || this.muted) return;
    if (this.pending && (this.pending.name !== name || this.pending.parent !== this.parent)) this.commit();
    if (!this.pending) this.pending = { name, text: "", parent: this.parent };
    this.pending.text += text;
    if (this.pending.text.length >= STREAM_CHUNK) this.commit();
    else this.schedule();
  }

  /** Publishes a message after everything produced before it. */
  publish(msgType: string, content: Record<string, unknown>): Promise<void> {
    if (this.muted) return Promise.resolve();
    const parent = this.parent;
    return this.enqueue(() => this.publishNow(msgType, content, parent));
  }

  /**
   * Publishes a message whose content is computed in output order (e.g. rendering a value):
   * output produced after this call waits for it. A null content publishes nothing.
   */
  publishLater(msgType: string, content: () => Promise<Record<string, unknown> | null>): Promise<void> {
    if (this.muted) return Promise.resolve();
    const parent = this.parent;
    return this.enqueue(async () => {
      const c = await content();
      if (c) await this.publishNow(msgType, c, parent);
    });
  }

  private enqueue(task: () => Promise<void>): Promise<void> {
    this.commit();
    const p = this.chain.then(task);
    this.chain = p.catch((e: unknown) => {
      kernelLog(`output failed: ${errorText(e)}`);
    });
    return p;
  }

  /** Resolves once everything produced so far has been published. */
  async flush(): Promise<void> {
    this.commit();
    await this.chain;
  }

  /** Routes process.stdout/stderr writes (cells, console.log, libraries) to iopub. */
  captureStdio(): void {
    const out = process.stdout.write.bind(process.stdout);
    const err = process.stderr.write.bind(process.stderr);
    const hook =
      (name: StreamName) =>
      (chunk: unknown, encodingOrCb?: unknown, cb?: unknown): boolean => {
        const text = typeof chunk === "string" ? chunk : Buffer.from(chunk as Uint8Array).toString("utf8");
        this.write(name, text);
        const done = typeof encodingOrCb === "function" ? encodingOrCb : cb;
        if (typeof done === "function") queueMicrotask(() => (done as () => void)());
        return true;
      };
    process.stdout.write = hook("stdout") as typeof process.stdout.write;
    process.stderr.write = hook("stderr") as typeof process.stderr.write;
    this.restore = () => {
      process.stdout.write = out;
      process.stderr.write = err;
    };
  }

  releaseStdio(): void {
    this.restore?.();
    this.restore = null;
  }

  private schedule(): void {
    if (this.scheduled) return;
    this.scheduled = true;
    setImmediate(() => {
      this.scheduled = false;
      this.commit();
    });
  }

  private commit(): void {
    const p = this.pending;
    if (!p) return;
    this.pending = null;
    const next = this.chain.then(() => this.publishNow("stream", { name: p.name, text: p.text }, p.parent));
    this.chain = next.catch((e: unknown) => {
      kernelLog(`stream publish failed: ${errorText(e)}`);
    });
  }
}
