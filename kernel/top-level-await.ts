/**
 * Finds top-level `await` in a converted cell, which tslab 1.0.22 misses in some cells.
 *
 * tslab decides whether to run a cell inside `async function` from the compiler's "await is only
 * allowed in async functions" diagnostics (code 1308): it compiles with top-level await disabled
 * and counts each such diagnostic as a top-level await. TypeScript's parser first reads a module
 * without an await context, where `await (` is a call of a function named `await`; it then
 * re-parses every statement that may hold a top-level await with the await context on
 * (`reparseTopLevelAwait`, TypeScript 5.0 parser.ts). Awaits from that second pass carry the
 * AwaitContext flag and raise no diagnostic, and neither does `for await` there. So a cell whose
 * only awaits are of that kind (`await (await p).f()`, `const x = await (p)`, `for await (...)`)
 * was emitted unchanged but run in a plain function, where V8 reads `await (` as a call and fails
 * with "SyntaxError: missing ) after argument list".
 *
 * The check here parses tslab's JavaScript output as a module, so every `await` is read as the
 * operator, and looks for one outside any function or class.
 */
import { createRequire } from "node:module";

interface Node {
  kind: number;
  awaitModifier?: Node;
}
interface Ts {
  createSourceFile(name: string, text: string, target: number, setParents?: boolean, kind?: number): Node;
  forEachChild<T>(node: Node, visit: (child: Node) => T | undefined): T | undefined;
  isFunctionLike(node: Node): boolean;
  isClassLike(node: Node): boolean;
  isModuleDeclaration(node: Node): boolean;
  isAwaitExpression(node: Node): boolean;
  isForOfStatement(node: Node): boolean;
  ScriptTarget: { Latest: number };
  ScriptKind: { JS: number };
}

const require = createRequire(import.meta.url);
let ts: Ts | null = null;

/** True when the JavaScript `code` awaits (or loops with `for await`) outside any function. */
export function hasTopLevelAwait(code: string): boolean {
  // Cheap exit for the common cell without the keyword at all.
  if (!/\bawait\b/.test(code)) return false;
  ts ??= require("@tslab/typescript-for-tslab") as Ts;
  const t = ts;
  // The trailing export makes the parser treat the text as a module, where `await` is reserved.
  const file = t.createSourceFile("cell.js", `${code}\nexport {};\n`, t.ScriptTarget.Latest, false, t.ScriptKind.JS);
  const visit = (node: Node): true | undefined => {
    if (t.isFunctionLike(node) || t.isClassLike(node) || t.isModuleDeclaration(node)) return undefined;
    if (t.isAwaitExpression(node)) return true;
    if (t.isForOfStatement(node) && node.awaitModifier) return true;
    return t.forEachChild(node, visit);
  };
  return t.forEachChild(file, visit) === true;
}
