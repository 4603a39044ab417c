/**
 * The main thread's side of the TypeScript language service: tslab's converter, either on its own
 * worker thread (completion-thread.ts; what the kernel uses) or in this thread (tests that run the
 * execution hook from sources, where no built worker file exists).
 *
 * Conversion stays synchronous for tslab's executor: the main thread posts the request and waits
 * on a shared flag (Atomics.wait, bounded) for the answer, which it then takes from a dedicated
 * port. Completion and inspection are asynchronous, so the main thread never waits for the
 * service to be built just to answer them: until the worker reports ready, `complete` and
 * `inspect` resolve to null and the kernel answers from its quick path (completion-quick.ts).
 */
import { existsSync } from "node:fs";
import { createRequire } from "node:module";
import { fileURLToPath } from "node:url";
import { MessageChannel, receiveMessageOnPort, Worker, type MessagePort } from "node:worker_threads";
import type * as TsConverter from "tslab/dist/converter.js";
import type { FromLanguage, SyncAnswer, ToLanguage } from "./completion-thread.js";
import { calleePosition } from "./inspection-calls.js";
import { errorText, kernelLog } from "./log.js";

export interface LanguageService {
  /** Synchronous, for tslab's executor; waits for the service to be built on first use. */
  convert(prev: string, src: string): TsConverter.ConvertResult;
  addModule(name: string, content: string, meta?: unknown): TsConverter.Diagnostic[];
  /** Null when the service is not ready yet (or failed). */
  complete(prev: string, src: string, pos: number): Promise<TsConverter.CompletionInfo | null>;
  /** Quick info text, the called function's signature inside a call's parentheses; null when none or not ready. */
  inspect(prev: string, src: string, pos: number): Promise<string | null>;
  /** True once completion and inspection come from the language service. */
  ready(): boolean;
  close(): void;
}

/** Longest wait for one conversion (a huge cell on a loaded machine); past it the cell fails. */
const CONVERT_WAIT_MS = 180_000;
/** Longest wait for one completion or inspection answer once the service is ready. */
const ASK_WAIT_MS = 10_000;
/** Times a dead or hung service is replaced before the kernel gives up on it. */
const MAX_RESTARTS = 3;
/** Longest wait of an inspection for the service to be built (no quick path for it). */
const INSPECT_READY_WAIT_MS = 8_000;

const require = createRequire(import.meta.url);

let shared: LanguageService | null = null;

/**
 * The kernel's one language service, started on the first call: on a worker thread when the
 * built worker file exists next to this module, in this thread otherwise.
 */
export function languageService(): LanguageService {
  if (shared) return shared;
  const workerFile = new URL("./completion-thread.js", import.meta.url);
  shared = existsSync(fileURLToPath(workerFile)) ? new ThreadedService(workerFile) : new InProcessService();
  return shared;
}

/** The converter in this thread, built on first use (blocks this thread for seconds). */
export class InProcessService implements LanguageService {
  private conv: TsConverter.Converter | null = null;
  private print: ((info: unknown) => string) | null = null;

  private converter(): TsConverter.Converter {
    if (!this.conv) {
      this.conv = (require("tslab/dist/converter") as typeof TsConverter).createConverter({ isJS: false, isBrowser: false });
      this.print = (require("tslab/dist/inspect") as { printQuickInfo(info: unknown): string }).printQuickInfo;
    }
    return this.conv;
  }

  convert(prev: string, src: string): TsConverter.ConvertResult {
    return this.converter().convert(prev, src);
  }
  addModule(name: string, content: string, meta?: unknown): TsConverter.Diagnostic[] {
    return this.converter().addModule(name, content, meta as Parameters<TsConverter.Converter["addModule"]>[2]);
  }
  async complete(prev: string, src: string, pos: number): Promise<TsConverter.CompletionInfo | null> {
    const c = this.converter().complete(prev, src, pos);
    return { start: c.start, end: c.end, candidates: c.candidates };
  }
  async inspect(prev: string, src: string, pos: number): Promise<string | null> {
    const conv = this.converter();
    const print = this.print as (info: unknown) => string;
    const callee = calleePosition(src, pos);
    for (const at of callee === null ? [pos] : [callee, pos]) {
      const info = conv.inspect(prev, src, at);
      const text = info ? print(info) : "";
      if (text !== "") return text;
    }
    return null;
  }
  ready(): boolean {
    return this.conv !== null;
  }
  close(): void {
    if (shared === this) shared = null;
    this.conv?.close();
    this.conv = null;
  }
}

/** The converter on a worker thread, built there as soon as this object exists. */
export class ThreadedService implements LanguageService {
  private worker!: Worker;
  private readonly flag = new Int32Array(new SharedArrayBuffer(4));
  private syncPort!: MessagePort;
  private isReady = false;
  private failed: string | null = null;
  private closed = false;
  private restarts = 0;
  private nextId = 1;
  private readyWaiters: Array<() => void> = [];
  private readonly waiting = new Map<number, { resolve(v: unknown): void; timer: NodeJS.Timeout }>();
  /** Milliseconds the worker took to build the service (for the log and the bench). */
  buildMs: number | null = null;

  constructor(private readonly file: URL) {
    this.start();
  }

  private start(): void {
    const channel = new MessageChannel();
    this.syncPort = channel.port1;
    const worker = new Worker(this.file, { stderr: true });
    this.worker = worker;
    // The worker's stderr would otherwise flow through process.stderr, which cells' output captures.
    worker.stderr.on("data", (chunk: Buffer) => kernelLog(`TypeScript service: ${chunk.toString("utf8").trimEnd()}`));
    worker.postMessage({ type: "sync", port: channel.port2, flag: this.flag.buffer as SharedArrayBuffer } satisfies ToLanguage, [channel.port2]);
    // Events of a worker that was replaced are ignored.
    worker.on("message", (m: FromLanguage) => worker === this.worker && this.onMessage(m));
    worker.on("error", (e) => worker === this.worker && this.fail(`the TypeScript service stopped: ${errorText(e)}`));
    worker.on("exit", () => worker === this.worker && this.fail("the TypeScript service ended"));
    worker.unref();
  }

  /**
   * After the worker died or hung: a new one (the service is rebuilt; earlier cells' declarations
   * travel with every request, so nothing else is lost), at most MAX_RESTARTS times per kernel.
   */
  private restart(): boolean {
    if (this.closed || this.restarts >= MAX_RESTARTS) return false;
    this.restarts += 1;
    kernelLog(`restarting the TypeScript service (${this.restarts} of at most ${MAX_RESTARTS})`);
    const old = this.worker;
    this.failed = null;
    this.isReady = false;
    this.start();
    void old.terminate();
    return true;
  }

  private onMessage(m: FromLanguage): void {
    if (m.type === "ready") {
      this.isReady = true;
      this.buildMs = m.ms;
      this.wakeReadyWaiters();
      return;
    }
    if (m.type === "failed") {
      this.fail(`the TypeScript service failed to start: ${m.message}`);
      return;
    }
    const w = this.waiting.get(m.id);
    if (!w) return;
    this.waiting.delete(m.id);
    clearTimeout(w.timer);
    if (m.error) kernelLog(`${m.type}: ${m.error}`);
    w.resolve(m.type === "complete" ? m.result : m.text);
  }

  private wakeReadyWaiters(): void {
    const waiters = this.readyWaiters;
    this.readyWaiters = [];
    for (const w of waiters) w();
  }

  private fail(message: string): void {
    if (this.failed !== null) return;
    this.failed = message;
    this.isReady = false;
    kernelLog(message);
    for (const [id, w] of this.waiting) {
      clearTimeout(w.timer);
      w.resolve(null);
      this.waiting.delete(id);
    }
    if (!this.restart()) this.wakeReadyWaiters();
  }

  private callSync<T>(msg: ToLanguage): T {
    if (this.failed !== null) throw new Error(this.failed);
    Atomics.store(this.flag, 0, 0);
    this.worker.postMessage(msg);
    const deadline = Date.now() + CONVERT_WAIT_MS;
    for (;;) {
      const got = receiveMessageOnPort(this.syncPort);
      if (got) {
        const a = got.message as SyncAnswer<T>;
        if (!a.ok) throw new Error(a.message);
        return a.value;
      }
      // A worker that is gone never answers (its exit event cannot arrive while this thread waits).
      if (this.worker.threadId === -1) {
        this.fail("the TypeScript service ended");
        throw new Error("the TypeScript service ended while converting the cell; run it again");
      }
      const left = deadline - Date.now();
      if (left <= 0) {
        this.fail("the TypeScript service did not answer in time");
        throw new Error("the TypeScript service did not answer in time; run the cell again");
      }
      // Woken by the worker's notify; the slice bounds the wait if a notify is missed.
      Atomics.wait(this.flag, 0, 0, Math.min(left, 1000));
      Atomics.store(this.flag, 0, 0);
    }
  }

  convert(prev: string, src: string): TsConverter.ConvertResult {
    return this.callSync<TsConverter.ConvertResult>({ type: "convert", prev, src });
  }

  addModule(name: string, content: string, meta?: unknown): TsConverter.Diagnostic[] {
    return this.callSync<TsConverter.Diagnostic[]>({ type: "addModule", name, content, meta });
  }

  /** Resolves once the service is ready (true) or after `ms` / on failure (false). */
  private whenReady(ms: number): Promise<boolean> {
    if (this.isReady) return Promise.resolve(true);
    if (this.failed !== null) return Promise.resolve(false);
    return new Promise<boolean>((resolve) => {
      const timer = setTimeout(() => resolve(this.isReady), ms);
      this.readyWaiters.push(() => {
        clearTimeout(timer);
        resolve(this.isReady);
      });
    });
  }

  private async ask<T>(type: "complete" | "inspect", prev: string, src: string, pos: number): Promise<T | null> {
    // Completion has a quick path and answers at once; inspection has none, so it waits a little.
    if (!this.isReady && (type === "complete" || !(await this.whenReady(INSPECT_READY_WAIT_MS)))) return null;
    const id = this.nextId++;
    return await new Promise<T | null>((resolve) => {
      const timer = setTimeout(() => {
        this.waiting.delete(id);
        resolve(null);
      }, ASK_WAIT_MS);
      this.waiting.set(id, { resolve: resolve as (v: unknown) => void, timer });
      this.worker.postMessage({ type, id, prev, src, pos } satisfies ToLanguage);
    });
  }

  complete(prev: string, src: string, pos: number): Promise<TsConverter.CompletionInfo | null> {
    return this.ask<TsConverter.CompletionInfo>("complete", prev, src, pos);
  }

  inspect(prev: string, src: string, pos: number): Promise<string | null> {
    return this.ask<string>("inspect", prev, src, pos);
  }

  ready(): boolean {
    return this.isReady;
  }

  close(): void {
    if (shared === this) shared = null;
    this.closed = true;
    this.failed ??= "the TypeScript service is closed";
    this.worker.postMessage({ type: "close" } satisfies ToLanguage);
    setTimeout(() => void this.worker.terminate(), 1000).unref();
  }
}
