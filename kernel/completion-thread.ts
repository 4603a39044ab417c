/**
 * Worker thread that owns the kernel's TypeScript language service (tslab's converter): it
 * converts cells for the main thread, and answers completion and inspection.
 *
 * Building the service takes seconds of synchronous work (the compiler program over the standard
 * library and `@types/node`). On the main thread that blocked every request at start, completion
 * included (12.6 s to a first completion in the browser). Here it is built on its own thread,
 * started right after the kernel's first kernel_info answer, while the main thread stays free to
 * answer requests (from the quick path in completion-quick.ts until this thread reports ready).
 *
 * Requests come in order on the worker port. `convert` and `addModule` are synchronous for the
 * main thread (tslab's executor calls its converter synchronously): their answers go to a separate
 * port and a shared flag is raised; the main thread waits on that flag (completion-service.ts).
 * `complete` and `inspect` are answered on the worker port.
 */
import { createRequire } from "node:module";
import { parentPort, type MessagePort } from "node:worker_threads";
import type * as TsConverter from "tslab/dist/converter.js";
import { calleePosition } from "./inspection-calls.js";

export type ToLanguage =
  | { type: "sync"; port: MessagePort; flag: SharedArrayBuffer }
  | { type: "convert"; prev: string; src: string }
  | { type: "addModule"; name: string; content: string; meta: unknown }
  | { type: "complete"; id: number; prev: string; src: string; pos: number }
  | { type: "inspect"; id: number; prev: string; src: string; pos: number }
  | { type: "close" };

export type FromLanguage =
  | { type: "ready"; ms: number }
  | { type: "failed"; message: string }
  | { type: "complete"; id: number; result: TsConverter.CompletionInfo | null; error?: string }
  | { type: "inspect"; id: number; text: string | null; error?: string };

/** What a synchronous request answers (on the sync port). */
export type SyncAnswer<T> = { ok: true; value: T } | { ok: false; message: string };

const require = createRequire(import.meta.url);

function main(): void {
  const port = parentPort;
  if (!port) throw new Error("completion-thread must run as a worker");
  let sync: { port: MessagePort; flag: Int32Array } | null = null;
  let converter: TsConverter.Converter | null = null;
  let printQuickInfo: ((info: unknown) => string) | null = null;

  const answerSync = (a: SyncAnswer<unknown>): void => {
    if (!sync) return;
    sync.port.postMessage(a);
    Atomics.store(sync.flag, 0, 1);
    Atomics.notify(sync.flag, 0);
  };
  const runSync = (f: () => unknown): void => {
    try {
      answerSync({ ok: true, value: f() });
    } catch (e: unknown) {
      answerSync({ ok: false, message: e instanceof Error ? e.message : String(e) });
    }
  };

  // Messages wait in the port's queue while the service builds (this thread is busy with it).
  port.on("message", (m: ToLanguage) => {
    if (m.type === "sync") {
      sync = { port: m.port, flag: new Int32Array(m.flag) };
      return;
    }
    if (m.type === "close") {
      converter?.close();
      port.close();
      sync?.port.close();
      return;
    }
    if (!converter || !printQuickInfo) {
      // Only reachable if building failed: every request is refused at once, never left waiting.
      if (m.type === "convert" || m.type === "addModule") answerSync({ ok: false, message: "the TypeScript service failed to start" });
      else if (m.type === "complete") port.postMessage({ type: "complete", id: m.id, result: null, error: "not started" } satisfies FromLanguage);
      else port.postMessage({ type: "inspect", id: m.id, text: null, error: "not started" } satisfies FromLanguage);
      return;
    }
    const conv = converter;
    const print = printQuickInfo;
    switch (m.type) {
      case "convert":
        runSync(() => conv.convert(m.prev, m.src));
        return;
      case "addModule":
        runSync(() => conv.addModule(m.name, m.content, m.meta as Parameters<TsConverter.Converter["addModule"]>[2]));
        return;
      case "complete":
        try {
          port.postMessage({ type: "complete", id: m.id, result: plainCompletion(conv.complete(m.prev, m.src, m.pos)) } satisfies FromLanguage);
        } catch (e: unknown) {
          port.postMessage({ type: "complete", id: m.id, result: null, error: errorText(e) } satisfies FromLanguage);
        }
        return;
      case "inspect":
        try {
          port.postMessage({ type: "inspect", id: m.id, text: inspectAt(conv, print, m.prev, m.src, m.pos) } satisfies FromLanguage);
        } catch (e: unknown) {
          port.postMessage({ type: "inspect", id: m.id, text: null, error: errorText(e) } satisfies FromLanguage);
        }
        return;
    }
  });

  const t0 = performance.now();
  try {
    const { createConverter } = require("tslab/dist/converter") as typeof TsConverter;
    printQuickInfo = (require("tslab/dist/inspect") as { printQuickInfo(info: unknown): string }).printQuickInfo;
    converter = createConverter({ isJS: false, isBrowser: false });
    // The first request on a new program pays for type-checking the library files; pay it now.
    converter.complete("", "Math.", 5);
    port.postMessage({ type: "ready", ms: performance.now() - t0 } satisfies FromLanguage);
  } catch (e: unknown) {
    converter = null;
    port.postMessage({ type: "failed", message: errorText(e) } satisfies FromLanguage);
  }
}

/**
 * Quick info at the cursor; inside a call's parentheses but not on a name (just after `(` or `,`,
 * in a string argument, in blank space), the called function's signature and doc instead — what
 * Shift-Tab after `(` shows in other kernels.
 */
function inspectAt(
  conv: TsConverter.Converter,
  print: (info: unknown) => string,
  prev: string,
  src: string,
  pos: number,
): string | null {
  const callee = calleePosition(src, pos);
  const at = callee ?? pos;
  const info = conv.inspect(prev, src, at);
  const text = info ? print(info) : "";
  if (text !== "") return text;
  if (callee !== null) {
    const here = conv.inspect(prev, src, pos);
    const t = here ? print(here) : "";
    return t === "" ? null : t;
  }
  return null;
}

/** The completion without the compiler's own object (it does not cross threads). */
function plainCompletion(c: TsConverter.CompletionInfo): TsConverter.CompletionInfo {
  return { start: c.start, end: c.end, candidates: c.candidates };
}

function errorText(e: unknown): string {
  return e instanceof Error ? e.message : String(e);
}

main();
