/**
 * Completion without the TypeScript language service:
 *
 * - Names inside strings: a string argument of a method call on a name (`hush.open("vi`,
 *   `visits.mean("ag`, `visits.groupBy(["dis`) — the cell API supplies dataset or column names
 *   from the public schema (never data).
 * - The quick path, used until the language service is built (the first seconds of a kernel):
 *   members of live values by reflection (`hush.`, `Math.`, a cell's variables) and top-level
 *   names. It reads only own data properties along the prototype chain: no getter runs, and
 *   proxies are skipped, so completing never runs cell code.
 *
 * Parsing is the compiler's parser on the cell text (linear in its length); positions are UTF-16
 * indexes like the rest of the execution hook.
 */
import { createRequire } from "node:module";
import { types } from "node:util";

export interface Completion {
  matches: string[];
  cursor_start: number;
  cursor_end: number;
}

/** A string argument the cursor is in: `receiver.method("prefix|`. */
export interface StringArgument {
  /** The receiver as a dotted path of names (`["visits"]`, `["hush"]`). */
  receiver: string[];
  method: string;
  /** Text of the string before the cursor. */
  prefix: string;
  /** Where the string's text starts (just after the quote). */
  start: number;
}

/** At most this many matches in one reply (a huge object or schema stays a short answer). */
export const MAX_MATCHES = 500;
/** Prototype levels looked at, and own names per level. */
const MAX_LEVELS = 8;
const MAX_NAMES_PER_LEVEL = 5000;
/** Longest cell the string detector parses (past it: no string completion, the service answers). */
const MAX_PARSE_CHARS = 200_000;

interface Node {
  kind: number;
  pos: number;
  end: number;
  parent: Node;
  expression: Node;
  name: Node;
  text: string;
  arguments?: ArrayLike<Node>;
  getStart(file?: unknown): number;
}
interface Ts {
  createSourceFile(name: string, text: string, target: number, setParents?: boolean, kind?: number): Node;
  forEachChild<T>(node: Node, visit: (child: Node) => T | undefined): T | undefined;
  isStringLiteral(n: Node): boolean;
  isNoSubstitutionTemplateLiteral(n: Node): boolean;
  isArrayLiteralExpression(n: Node): boolean;
  isCallExpression(n: Node): boolean;
  isPropertyAccessExpression(n: Node): boolean;
  isIdentifier(n: Node): boolean;
  isParenthesizedExpression(n: Node): boolean;
  ScriptTarget: { Latest: number };
  ScriptKind: { TS: number };
}

const require = createRequire(import.meta.url);
let ts: Ts | null = null;
function compiler(): Ts {
  ts ??= require("@tslab/typescript-for-tslab") as Ts;
  return ts;
}

/** The string argument of a method call the cursor is in, or null. */
export function stringArgumentAt(code: string, cursor: number): StringArgument | null {
  if (cursor < 1 || cursor > code.length || code.length > MAX_PARSE_CHARS) return null;
  if (!/["'`]/.test(code)) return null;
  const t = compiler();
  const file = t.createSourceFile("cell.ts", code, t.ScriptTarget.Latest, true, t.ScriptKind.TS);
  let literal: Node | null = null;
  const visit = (node: Node): undefined => {
    if (cursor < node.pos || cursor > node.end) return undefined;
    if (t.isStringLiteral(node) || t.isNoSubstitutionTemplateLiteral(node)) {
      const start = node.getStart(file);
      const closed = node.end - start >= 2 && code[node.end - 1] === code[start];
      if (cursor > start && (cursor < node.end || !closed)) literal = node;
      return undefined;
    }
    t.forEachChild(node, visit);
    return undefined;
  };
  t.forEachChild(file, visit);
  const lit = literal as Node | null;
  if (lit === null) return null;
  let arg: Node = lit;
  if (t.isArrayLiteralExpression(arg.parent)) arg = arg.parent;
  const call = arg.parent;
  if (!call || !t.isCallExpression(call) || !Array.from(call.arguments ?? []).includes(arg)) return null;
  const callee = call.expression;
  if (!t.isPropertyAccessExpression(callee) || !t.isIdentifier(callee.name)) return null;
  const receiver = namePath(t, callee.expression);
  if (receiver === null) return null;
  const start = lit.getStart(file) + 1;
  return { receiver, method: callee.name.text, prefix: code.slice(start, cursor), start };
}

/** `a.b.c` (also parenthesized) as ["a", "b", "c"]; null for anything else. */
function namePath(t: Ts, e: Node): string[] | null {
  if (t.isParenthesizedExpression(e)) return namePath(t, e.expression);
  if (t.isIdentifier(e)) return [e.text];
  if (t.isPropertyAccessExpression(e) && t.isIdentifier(e.name)) {
    const head = namePath(t, e.expression);
    return head === null ? null : [...head, e.name.text];
  }
  return null;
}

/** Names starting with `prefix` (case-insensitively, exact-case first), sorted, at most MAX_MATCHES. */
export function filterNames(names: Iterable<string>, prefix: string): string[] {
  const lower = prefix.toLowerCase();
  const exact: string[] = [];
  const folded: string[] = [];
  for (const n of new Set(names)) {
    if (n.startsWith(prefix)) exact.push(n);
    else if (n.toLowerCase().startsWith(lower)) folded.push(n);
  }
  exact.sort();
  folded.sort();
  return [...exact, ...folded].slice(0, MAX_MATCHES);
}

/**
 * Reads `path` from the scopes (cell variables, then globals) through own data properties only.
 * Undefined when any step is missing, an accessor, or a proxy.
 */
export function lookupPath(scopes: object[], path: string[]): unknown {
  if (path.length === 0) return undefined;
  let value: unknown = undefined;
  let found = false;
  // The scopes themselves are the kernel's (tslab's exports proxy traps only defineProperty).
  for (const scope of scopes) {
    const d = Object.getOwnPropertyDescriptor(scope, path[0]);
    if (d) {
      if (!("value" in d)) continue;
      value = d.value;
      found = true;
      break;
    }
  }
  if (!found) return undefined;
  for (const name of path.slice(1)) {
    if (value === null || (typeof value !== "object" && typeof value !== "function")) return undefined;
    const d = dataProperty(value as object, name);
    if (!d.found) return undefined;
    value = d.value;
  }
  return value;
}

function dataProperty(obj: object, name: string): { found: boolean; value?: unknown } {
  let o: object | null = obj;
  for (let level = 0; o !== null && level < MAX_LEVELS; level++) {
    if (types.isProxy(o)) return { found: false };
    const d = Object.getOwnPropertyDescriptor(o, name);
    if (d) return "value" in d ? { found: true, value: d.value } : { found: false };
    o = Object.getPrototypeOf(o) as object | null;
  }
  return { found: false };
}

/** Property names of a live value along its prototype chain (Object.prototype's own left out). */
export function memberNames(value: unknown): string[] {
  if (value === null || value === undefined) return [];
  let o: object | null = typeof value === "object" || typeof value === "function" ? (value as object) : Object(value);
  const out = new Set<string>();
  for (let level = 0; o !== null && o !== Object.prototype && level < MAX_LEVELS; level++) {
    if (types.isProxy(o)) break;
    const own = Object.getOwnPropertyNames(o);
    for (const n of own.slice(0, MAX_NAMES_PER_LEVEL)) {
      if (n === "constructor" || !/^[A-Za-z_$][\w$]*$/.test(n)) continue;
      out.add(n);
    }
    o = Object.getPrototypeOf(o) as object | null;
  }
  return [...out];
}

const KEYWORDS = [
  "await", "break", "case", "catch", "class", "const", "continue", "default", "delete", "do", "else", "export",
  "false", "for", "function", "if", "import", "in", "instanceof", "let", "new", "null", "return", "switch",
  "this", "throw", "true", "try", "typeof", "undefined", "var", "void", "while", "interface", "type",
];

/**
 * The quick path: `a.b.pre|` lists members of the live value `a.b`; a bare `pre|` lists cell
 * variables, globals and keywords. Null inside strings and comments' territory it cannot judge
 * (after anything but a name chain).
 */
export function quickComplete(code: string, cursor: number, scopes: object[]): Completion | null {
  const before = code.slice(Math.max(0, cursor - 1000), cursor);
  const m = /((?:[A-Za-z_$][\w$]*\s*\.\s*)*)([A-Za-z_$][\w$]*)?$/.exec(before);
  if (!m) return null;
  const prefix = m[2] ?? "";
  const chain = m[1] ?? "";
  const start = cursor - prefix.length;
  // Not after a number, a closing bracket or a string (`x[0].`, `"a".`): the quick path cannot tell.
  const lead = before.slice(0, before.length - m[0].length);
  if (chain === "" && prefix === "") return null;
  if (chain !== "" && /[\w$)\]"'`]\s*$/.test(lead)) return null;
  if (chain === "" && /[\w$.]\s*$/.test(lead)) return null;
  if (chain !== "") {
    const path = chain.split(".").map((s) => s.trim()).filter((s) => s !== "");
    const value = lookupPath(scopes, path);
    if (value === undefined) return null;
    return { matches: filterNames(memberNames(value), prefix), cursor_start: start, cursor_end: cursor };
  }
  const names: string[] = [...KEYWORDS];
  for (const s of scopes) names.push(...Object.getOwnPropertyNames(s).filter((n) => /^[A-Za-z_$][\w$]*$/.test(n)));
  // Names written in the cell itself (declared before they have run), except the one being typed.
  names.push(...wordsOf(code.slice(0, start)), ...wordsOf(code.slice(cursor)));
  return { matches: filterNames(names, prefix), cursor_start: start, cursor_end: cursor };
}

/** Identifier-like words of a text, at most 10,000 (a huge cell stays a bounded answer). */
function wordsOf(text: string): string[] {
  const out: string[] = [];
  for (const m of text.matchAll(/[A-Za-z_$][\w$]*/g)) {
    out.push(m[0]);
    if (out.length >= 10_000) break;
  }
  return out;
}
