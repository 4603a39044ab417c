/**
 * The language hook: runs TypeScript cells with tslab's in-process executor (pinned tslab 1.0.22)
 * and its converter, which runs on the language service's thread (completion-service.ts); answers
 * completion, inspection and is-complete. Knows nothing about the wire protocol.
 *
 * Interruption (aimed at one cell by its number, interrupt-target.ts): a cell's first synchronous
 * stretch runs under `vm.runInThisContext({ breakOnSigint: true })` inside tslab, so a SIGINT the
 * control thread sends while it runs stops it; a cell interrupted before that stretch starts
 * (while compiling) does not start it. A cell awaiting at top level is raced against tslab's
 * interrupt promise, so `interrupt(k)` stops waiting for it. Work the interrupted async cell had
 * already scheduled (timers, pending promises) keeps running in the background: a promise cannot
 * be cancelled from outside. Code after an `await` is stopped at interrupt points the converter
 * adds to every loop of the cell (interrupt-points.ts).
 */
import { createRequire } from "node:module";
import vm from "node:vm";
import type * as TsExecutor from "tslab/dist/executor.js";
import type * as TsConverter from "tslab/dist/converter.js";
import { runAsCell } from "../runtime/api/asking-cell.js";
import { type CellError, diagnosticText, readableError, registerCell } from "./cell-errors.js";
import { hasTopLevelAwait } from "./top-level-await.js";
import { languageService } from "./completion-service.js";
import { lookupPath, quickComplete, type Completion } from "./completion-quick.js";
import { CellInterrupted, installInterruptPoint, withInterruptPoints } from "./interrupt-points.js";
import { armVm, disarmVm, installVmMark, interruptedCell, markedScript, runningCell } from "./interrupt-target.js";

export type { CellError } from "./cell-errors.js";

// tslab runs each cell with vm.runInThisContext and no file name. The next call gets the name the
// cell was registered under (cell-errors.ts), so its stack frames say which cell holds the code,
// and, for a cell of an execute request, marks where the cell's script runs (interrupt-target.ts).
let nextFileName: string | null = null;
let nextCell = 0;
const runInThisContext = vm.runInThisContext;
if (!(runInThisContext as { hushNamed?: boolean }).hushNamed) {
  const named = function (code: string, options?: vm.RunningScriptOptions | string): unknown {
    const filename = nextFileName;
    const cell = nextCell;
    nextFileName = null;
    nextCell = 0;
    if (filename === null || typeof options === "string") return runInThisContext.call(vm, code, options);
    if (cell === 0) return runInThisContext.call(vm, code, { ...options, filename });
    // Interrupted while compiling: the cell's code does not start.
    if (interruptedCell(cell)) throw new CellInterrupted();
    armVm(cell);
    try {
      return runInThisContext.call(vm, markedScript(code, cell), { ...options, filename });
    } finally {
      disarmVm(cell);
    }
  };
  (named as { hushNamed?: boolean }).hushNamed = true;
  vm.runInThisContext = named as typeof vm.runInThisContext;
}

const require = createRequire(import.meta.url);

interface Ts {
  version: string;
  createSourceFile(name: string, text: string, target: number, setParents?: boolean, kind?: number): unknown;
  ScriptTarget: { Latest: number };
  ScriptKind: { TSX: number };
}
interface Tslab {
  createExecutor: typeof TsExecutor.createExecutor;
  isCompleteCode: typeof TsConverter.isCompleteCode;
  ts: Ts;
}

// tslab and its TypeScript load on first use (about 0.4 s), not when the kernel starts, so the
// kernel can answer kernel_info before them.
let loaded: Tslab | null = null;
function tslab(): Tslab {
  loaded ??= {
    createExecutor: (require("tslab/dist/executor") as typeof TsExecutor).createExecutor,
    isCompleteCode: (require("tslab/dist/converter") as typeof TsConverter).isCompleteCode,
    ts: require("@tslab/typescript-for-tslab") as Ts,
  };
  return loaded;
}

/** TypeScript version of the language service, read without loading the compiler. */
export const TYPESCRIPT_VERSION = (require("@tslab/typescript-for-tslab/package.json") as { version: string }).version;

export type RunOutcome = { status: "ok"; hasValue: boolean; value?: unknown } | ({ status: "error" } & CellError);

export interface Execution {
  /** Runs a cell; `count` is its execution count, used to name it in errors (null when not counted). */
  run(code: string, count?: number | null): Promise<RunOutcome>;
  /**
   * Completion from the language service; from the quick path (completion-quick.ts) while the
   * service is still being built. `source` says which answered.
   */
  complete(code: string, cursor: number): Promise<Completion & { source: "types" | "quick" }>;
  /**
   * Plain-text quick info at the cursor (inside a call's parentheses: the called function's
   * signature and doc), or null when nothing is there or the service is not built yet.
   */
  inspect(code: string, cursor: number): Promise<string | null>;
  /** A value named by a dotted path in the cells' scope (own data properties only; no getter runs). */
  lookup(path: string[]): unknown;
  /** The values of the cells' own variables (data properties only; at most `max`). */
  cellValues(max: number): unknown[];
  isComplete(code: string): { status: "complete" | "incomplete" | "invalid"; indent?: string };
  /** Interrupts cell `k` (interrupt-target.ts) if it is the one running; otherwise does nothing. */
  interrupt(k: number): void;
  /** Forgets every variable and declaration of earlier cells. */
  reset(): void;
  close(): void;
}

export interface ExecutionOptions {
  /** Directory cell `require`/`import` resolves from (the notebook's directory). */
  rootDir: string;
  /** Values visible to every cell by name (e.g. `hush`, `display`). */
  globals: Record<string, unknown>;
  /** .d.ts text declaring those globals for the language service. */
  declarations: string;
}

export function createExecution(opts: ExecutionOptions): Execution {
  const { createExecutor } = tslab();
  // The converter lives on the language service's own thread in the kernel (completion-service.ts).
  const node = languageService();
  const globalBlock = asGlobalBlock(opts.declarations);
  let runningCount: number | null = null;
  // Declarations of earlier cells arrive as `prevDecl`; the globals ride in front of them inside a
  // `declare global` block, which tslab never copies into the next cell's declarations.
  const withGlobals: TsConverter.Converter = {
    convert: (prev, src) => {
      const converted = node.convert(globalBlock + prev, src);
      // tslab misses top-level awaits that TypeScript re-parsed (see top-level-await.ts); without
      // this the cell would run in a plain function and fail to parse.
      if (converted.output && !converted.hasToplevelAwait && hasTopLevelAwait(converted.output)) {
        converted.hasToplevelAwait = true;
      }
      if (converted.output) {
        // Lines are mapped on the converter's output; interrupt points keep every line where it is.
        nextFileName = registerCell(src, converted.output, runningCount);
        nextCell = runningCell();
        converted.output = withInterruptPoints(converted.output, nextCell);
      }
      return converted;
    },
    // tslab's executor calls these with the declarations of earlier cells; they only note them,
    // and `complete`/`inspect` below ask the service asynchronously with what was noted.
    inspect: (prev) => {
      notedPrev = prev;
      return undefined as unknown as ReturnType<TsConverter.Converter["inspect"]>;
    },
    complete: (prev) => {
      notedPrev = prev;
      return { start: 0, end: 0, candidates: [] };
    },
    addModule: (name, content, meta) => node.addModule(name, content, meta),
    close: () => node.close(),
  };
  let notedPrev = "";
  /** The declarations of earlier cells, as tslab's executor holds them now. */
  const earlierDeclarations = (code: string): string => {
    notedPrev = "";
    try {
      executor.complete(code, 0);
    } catch {
      // A `//%browser` cell: tslab asks for the browser converter, which hush does not have.
    }
    return globalBlock + notedPrev;
  };
  const convs: TsExecutor.ConverterSet = {
    node: withGlobals,
    get browser(): TsConverter.Converter {
      throw new Error("browser mode is not supported by hush");
    },
    close: () => node.close(),
  };

  // tslab reports a cell's last expression through `log` and failures through `error`.
  let result: { value: unknown } | null = null;
  let failures: unknown[][] = [];
  const executor = createExecutor(opts.rootDir, convs, {
    log: (value: unknown) => {
      result = { value };
    },
    error: (...args: unknown[]) => {
      failures.push(args);
    },
  });
  const installGlobals = (): void => {
    for (const [name, value] of Object.entries(opts.globals)) {
      (globalThis as Record<string, unknown>)[name] = value;
      // tslab rewrites names declared before the cell to `exports.<name>`, so they live there too.
      executor.locals[name] = value;
    }
  };
  installGlobals();
  installInterruptPoint();
  installVmMark();

  // tslab rewrites uses of earlier cells' names to `exports.<name>` but misses shorthand
  // properties (`{ total }` stays a bare `total`). Bare names resolve on the global object, so
  // each cell-level name also gets a global accessor onto its slot (never over a real global).
  const exposed = new Set<string>();
  const exposeLocals = (): void => {
    for (const name of Object.keys(executor.locals)) {
      if (exposed.has(name) || name in globalThis) continue;
      Object.defineProperty(globalThis, name, {
        configurable: true,
        enumerable: false,
        get: () => executor.locals[name],
        set: (v: unknown) => {
          executor.locals[name] = v;
        },
      });
      exposed.add(name);
    }
  };

  return {
    async run(code, count = null) {
      result = null;
      failures = [];
      runningCount = count;
      // Asks made by this code (now or later, from work it started) carry its source digest.
      let ok: boolean;
      try {
        ok = await runAsCell(code, () => executor.execute(code));
      } finally {
        nextFileName = null;
        nextCell = 0;
      }
      exposeLocals();
      if (!ok || failures.length > 0) return { status: "error", ...describeFailures(failures, count) };
      const r = result as { value: unknown } | null;
      return r ? { status: "ok", hasValue: true, value: r.value } : { status: "ok", hasValue: false };
    },
    async complete(code, cursor) {
      const info = await node.complete(earlierDeclarations(code), code, cursor);
      if (info) return { matches: info.candidates, cursor_start: info.start, cursor_end: info.end, source: "types" };
      const quick = quickComplete(code, cursor, [executor.locals, globalThis]);
      return { ...(quick ?? { matches: [], cursor_start: cursor, cursor_end: cursor }), source: "quick" };
    },
    inspect(code, cursor) {
      return node.inspect(earlierDeclarations(code), code, cursor);
    },
    lookup: (path) => lookupPath([executor.locals, globalThis], path),
    cellValues(max) {
      const out: unknown[] = [];
      for (const name of Object.keys(executor.locals)) {
        if (out.length >= max) break;
        const d = Object.getOwnPropertyDescriptor(executor.locals, name);
        if (d && "value" in d) out.push(d.value);
      }
      return out;
    },
    isComplete,
    // Only the cell it is for: tslab's interrupt rejects whichever top-level await is raced now.
    interrupt: (k) => {
      if (k !== 0 && runningCell() === k) executor.interrupt();
    },
    reset() {
      executor.reset();
      for (const name of exposed) delete (globalThis as Record<string, unknown>)[name];
      exposed.clear();
      installGlobals();
    },
    close: () => executor.close(),
  };
}

/** is_complete: needs only the parser, not the TypeScript program. */
export function isComplete(code: string): { status: "complete" | "incomplete" | "invalid"; indent?: string } {
  const r = tslab().isCompleteCode(code);
  if (!r.completed) return { status: "incomplete", indent: r.indent ?? "" };
  return hasParseErrors(code) ? { status: "invalid" } : { status: "complete" };
}

/** Wraps top-level ambient declarations into one `declare global { ... }` block. */
export function asGlobalBlock(dts: string): string {
  if (dts.trim() === "") return "";
  if (/^\s*declare\s+global\s*\{/m.test(dts)) return dts + "\n";
  const body = dts.replace(/^(\s*)(?:export\s+)?declare\s+/gm, "$1");
  return `declare global {\n${body}\n}\n`;
}

function hasParseErrors(code: string): boolean {
  const { ts } = tslab();
  const sf = ts.createSourceFile("cell.tsx", code, ts.ScriptTarget.Latest, false, ts.ScriptKind.TSX) as {
    parseDiagnostics?: unknown[];
  };
  return (sf.parseDiagnostics?.length ?? 0) > 0;
}

function describeFailures(failures: unknown[][], count: number | null): CellError {
  // Compile diagnostics come as printf-style calls ("%s%d:%d - %s", file, line, col, text).
  const diagnostics = failures.filter((f) => typeof f[0] === "string" && f.length > 1);
  if (diagnostics.length > 0) {
    const lines = diagnostics.map((f) => diagnosticText(f, count));
    return {
      ename: "TypeScriptError",
      evalue: lines.length === 1 ? lines[0] : `${lines[0]} (and ${lines.length - 1} more)`,
      traceback: lines,
    };
  }
  const thrown = failures.length > 0 ? failures[0][0] : new Error("the cell failed");
  return describeThrown(thrown);
}

/** A thrown value as the analyst reads it: no internal frames, the cell and line (cell-errors.ts). */
export function describeThrown(thrown: unknown): CellError {
  return readableError(thrown);
}
