/**
 * Errors as the analyst should read them: the message, and where in their own cell it happened
 * ("In [3], line 2"), never the frames of the kernel, tslab, the cell API or node's internals.
 *
 * Where: each cell's JavaScript runs under its own file name (`hush-cell-<n>`, given to
 * vm.runInThisContext by execution.ts), so a stack frame names the cell that holds the code, even
 * when the error comes from work an earlier cell started. tslab compiles TypeScript to JavaScript
 * without a source map (its emitter drops blank lines and adds export lines), so a JavaScript line
 * is mapped back by statements: the emitted top-level statements, less the ones tslab adds, stand
 * one for one for the cell's own statements that emit code. When the two lists do not line up
 * (a namespace, an enum), the line is left out rather than guessed.
 */
import { createRequire } from "node:module";
import { inspect } from "node:util";
import type * as TS from "typescript";
import { REFUSAL_KINDS, type RefusalView, refusalBundle } from "./display/refusal.js";
import { INTERRUPTED_MESSAGE } from "./interrupt-points.js";

const require = createRequire(import.meta.url);

export interface CellError {
  ename: string;
  evalue: string;
  traceback: string[];
  /** Shown before the error: a refusal drawn as a cell output (kernel/display/refusal.ts). */
  display?: { data: Record<string, unknown>; metadata: Record<string, unknown> };
}

/** What a cell ran: its source, the JavaScript tslab made of it, and its execution count. */
interface RanCell {
  code: string;
  output: string;
  count: number | null;
}

const FILE_PREFIX = "hush-cell-";
/** Cells remembered for mapping frames; older ones show as "an earlier cell". */
const REMEMBERED = 256;

const cells = new Map<string, RanCell>();
let serial = 0;

/** Registers the code a cell is about to run; returns the file name to run it under. */
export function registerCell(code: string, output: string, count: number | null): string {
  serial += 1;
  const name = `${FILE_PREFIX}${serial}`;
  cells.set(name, { code, output, count });
  if (cells.size > REMEMBERED) cells.delete(cells.keys().next().value as string);
  return name;
}

let tsModule: typeof TS | null = null;
function ts(): typeof TS {
  // The TypeScript that tslab already loaded for the cells (a parser is all that is needed).
  tsModule ??= require("@tslab/typescript-for-tslab") as typeof TS;
  return tsModule;
}

/** Statements tslab's emit adds around the cell's own (esModule marker, export lines, helpers). */
function added(text: string): boolean {
  return (
    /^Object\.defineProperty\(exports, "__esModule"/.test(text) ||
    /^exports\.[\w$]+ = (exports\.[\w$]+ = )*void 0;$/.test(text) ||
    /^exports\.[\w$]+ = [\w$]+(, exports\.[\w$]+ = [\w$]+)*;$/.test(text) ||
    /^var __\w+ = /.test(text)
  );
}

/** Does a statement of the cell emit JavaScript? (Types and ambient declarations do not.) */
function emits(s: TS.Statement): boolean {
  const t = ts();
  if (t.isInterfaceDeclaration(s) || t.isTypeAliasDeclaration(s)) return false;
  if (t.isImportDeclaration(s) && s.importClause?.isTypeOnly) return false;
  const mods = t.canHaveModifiers(s) ? t.getModifiers(s) : undefined;
  return !(mods ?? []).some((m) => m.kind === t.SyntaxKind.DeclareKeyword);
}

/** The 1-based line of the cell's source for a 1-based line of its JavaScript, or null. */
export function sourceLine(code: string, output: string, jsLine: number): number | null {
  const t = ts();
  const out = t.createSourceFile("cell.js", output, t.ScriptTarget.Latest, true, t.ScriptKind.JS);
  const src = t.createSourceFile("cell.ts", code, t.ScriptTarget.Latest, true, t.ScriptKind.TS);
  // An enum or namespace emits `var E;` before the function that fills it: one statement of the cell.
  const texts = out.statements.map((s) => s.getText(out));
  const emitted = out.statements.filter((s, i) => {
    const m = /^var ([\w$]+);$/.exec(texts[i]);
    const next = texts.slice(i + 1).find((t) => !added(t)) ?? "";
    return !added(texts[i]) && !(m !== null && next.startsWith(`(function (${m[1]})`));
  });
  const own = src.statements.filter(emits);
  if (emitted.length !== own.length) return null;
  const line = (sf: TS.SourceFile, pos: number): number => sf.getLineAndCharacterOfPosition(pos).line;
  const at = jsLine - 1;
  let bestLine: number | null = null;
  for (let i = 0; i < emitted.length; i++) {
    const first = line(out, emitted[i].getStart(out));
    const last = line(out, emitted[i].end);
    if (at < first || at > last) continue;
    const from = line(src, own[i].getStart(src));
    const to = line(src, own[i].end);
    // The emitter may join or split lines inside a statement (`visits\n  .by()` becomes
    // `exports.visits.by()`), so a source line with the same code wins over the offset.
    const flat = (x: string): string => x.replace(/\bexports\./g, "").replace(/\s+/g, "");
    const js = flat(output.split("\n")[at] ?? "");
    const lines = code.split(/\r\n?|\n/);
    const guess = from + Math.min(at - first, to - from);
    let best: number | null = null;
    for (let k = from; k <= to; k++) {
      const s = flat(lines[k] ?? "");
      if (s === "" || js === "") continue;
      const score = s === js ? 2 : js.includes(s) || s.includes(js) ? 1 : 0;
      if (score === 0) continue;
      if (best === null || score > best || (score === best && Math.abs(k - guess) < Math.abs((bestLine ?? k) - guess))) {
        best = score;
        bestLine = k;
      }
    }
    return (bestLine ?? guess) + 1;
  }
  return null;
}

/** One frame of the user's code: the function name (if any), the cell and line, the line's text. */
interface CellFrame {
  fn: string | null;
  where: string;
  text: string | null;
}

const FRAME = new RegExp(String.raw`^\s+at (?:async )?(?:(.+?) \()?(${FILE_PREFIX}\d+):(\d+):\d+\)?$`);

function cellName(count: number | null): string {
  return count === null ? "this cell" : `In [${count}]`;
}

/** The frames of `stack` that are the user's cells, mapped to their lines; everything else dropped. */
export function cellFrames(stack: string): CellFrame[] {
  const frames: CellFrame[] = [];
  for (const l of stack.split("\n")) {
    const m = FRAME.exec(l);
    if (m === null) continue;
    const cell = cells.get(m[2]);
    if (cell === undefined) {
      frames.push({ fn: m[1] ?? null, where: "an earlier cell", text: null });
      continue;
    }
    const line = sourceLine(cell.code, cell.output, Number(m[3]));
    // The wrapper tslab puts around a cell has frames of its own, past the last statement.
    if (line === null) continue;
    const text = cell.code.split(/\r\n?|\n/)[line - 1]?.trim() ?? null;
    // A function of an earlier cell is called through tslab's exports object, which V8 names "Proxy.f".
    const fn = m[1] === undefined || m[1].startsWith(FILE_PREFIX) ? null : m[1].replace(/^Proxy\./, "");
    frames.push({ fn, where: `${cellName(cell.count)}, line ${line}`, text });
  }
  return frames;
}

const INTERRUPT_MESSAGES = ["Interrupted asynchronously", "Script execution was interrupted by `SIGINT`", INTERRUPTED_MESSAGE];
const HUSH_KINDS = new Set(["bad-input", "policy", "over-cap", "unauthorized", "unknown-dataset", "protocol", "unreachable", "busy", "internal"]);

function hushKind(e: Error): string | null {
  const kind = (e as { kind?: unknown }).kind;
  return typeof kind === "string" && HUSH_KINDS.has(kind) ? kind : null;
}

function shortText(s: string, most = 120): string {
  return s.length > most ? `${s.slice(0, most - 1)}…` : s;
}

/**
 * A thrown value as the analyst reads it. A refusal of the cell API (a HushError) becomes a drawn
 * refusal (title, where, the message) and a one-line traceback; any other error keeps its name and
 * message and lists only the user's own frames, each with its cell, line and code.
 */
export function readableError(thrown: unknown): CellError {
  if (!(thrown instanceof Error)) {
    const text = inspect(thrown, { depth: 3 });
    return { ename: "Thrown", evalue: text, traceback: [`Thrown: ${text}`] };
  }
  if (INTERRUPT_MESSAGES.includes(thrown.message)) {
    return { ename: "Interrupted", evalue: "the cell was interrupted", traceback: ["Interrupted: the cell was interrupted"] };
  }
  const frames = cellFrames(thrown.stack ?? "");
  const kind = hushKind(thrown);
  if (kind !== null) {
    const where = frames[0]?.where ?? null;
    const view: RefusalView = { name: thrown.name, kind, message: thrown.message, where };
    const said = REFUSAL_KINDS.has(kind) ? "refused, nothing was spent" : "failed";
    return {
      ename: thrown.name,
      evalue: thrown.message,
      traceback: [`${thrown.name}${where ? ` at ${where}` : ""}: ${said} (${thrown.message.split("\n")[0].length > 0 ? "shown above" : "no message"})`],
      display: refusalBundle(view),
    };
  }
  const head = `${thrown.name}: ${thrown.message}`;
  const lines = frames.map((f) => `    at ${f.fn ? `${f.fn} (${f.where})` : f.where}${f.text ? `:  ${shortText(f.text)}` : ""}`);
  return { ename: thrown.name, evalue: thrown.message, traceback: [head, ...lines] };
}

/**
 * A TypeScript diagnostic as tslab reports it (printf-style: "%s%d:%d - %s", file, line, column,
 * text), with the cell's name: "In [3], line 2, column 7: Cannot find name 'x'."
 */
export function diagnosticText(args: readonly unknown[], count: number | null): string {
  if (args[0] === "%s%d:%d - %s" && args.length >= 5) {
    const file = String(args[1]).trim();
    return `${file ? `${file} ` : ""}${cellName(count)}, line ${String(args[2])}, column ${String(args[3])}: ${String(args[4])}`;
  }
  return args.map(String).join(" ");
}
