/**
 * Signature help for inspect_request: finds the call whose parentheses hold the cursor, so the
 * kernel can show the called function's signature and doc (Shift-Tab after `(`), for `hush`
 * methods and plain TypeScript alike. Parsing only (no type information): a cell of any size is
 * parsed once, in time linear in its length.
 */
import { createRequire } from "node:module";

interface Node {
  kind: number;
  pos: number;
  end: number;
  expression?: Node;
  name?: Node;
  arguments?: { pos: number; end: number } & ArrayLike<Node>;
  getStart(file?: unknown): number;
}
interface Ts {
  createSourceFile(name: string, text: string, target: number, setParents?: boolean, kind?: number): Node;
  forEachChild<T>(node: Node, visit: (child: Node) => T | undefined): T | undefined;
  isCallExpression(n: Node): boolean;
  isNewExpression(n: Node): boolean;
  isIdentifier(n: Node): boolean;
  isPrivateIdentifier(n: Node): boolean;
  isPropertyAccessExpression(n: Node): boolean;
  isElementAccessExpression(n: Node): boolean;
  ScriptTarget: { Latest: number };
  ScriptKind: { TS: number };
}

const require = createRequire(import.meta.url);
let ts: Ts | null = null;

/**
 * Position (in `src`, UTF-16) of the name of the function called around `pos`: the innermost call
 * or `new` whose argument list holds the cursor, when the cursor is not on a name of its own.
 * Null when the cursor is outside every argument list, or on an identifier there (whose own quick
 * info is the better answer).
 */
export function calleePosition(src: string, pos: number): number | null {
  if (pos < 0 || pos > src.length || !src.includes("(")) return null;
  ts ??= require("@tslab/typescript-for-tslab") as Ts;
  const t = ts;
  const file = t.createSourceFile("cell.ts", src, t.ScriptTarget.Latest, true, t.ScriptKind.TS);
  // Blank space before the cursor belongs to what precedes it (an unclosed call ends at its last
  // token, so `Math.max(1, |` would otherwise fall outside it).
  while (pos > 0 && /\s/.test(src[pos - 1])) pos -= 1;
  let call: Node | null = null;
  let onName = false;
  const visit = (node: Node): undefined => {
    // Nodes hold [getStart, end]; the cursor may sit right after a node's last character.
    if (pos < node.pos || pos > node.end) return undefined;
    if ((t.isCallExpression(node) || t.isNewExpression(node)) && node.arguments) {
      const args = node.arguments;
      // args.pos is just after "(", args.end just before ")" (or the end of an unclosed call).
      if (pos >= args.pos && pos <= args.end) {
        call = node;
        onName = false;
      }
    }
    if (call !== null && (t.isIdentifier(node) || t.isPrivateIdentifier(node)) && pos >= node.getStart(file) && pos <= node.end) {
      onName = true;
    }
    t.forEachChild(node, visit);
    return undefined;
  };
  t.forEachChild(file, visit);
  const found = call as Node | null;
  if (found === null || onName || !found.expression) return null;
  return namePosition(t, found.expression, file);
}

function namePosition(t: Ts, callee: Node, file: unknown): number {
  if (t.isPropertyAccessExpression(callee) && callee.name) return callee.name.getStart(file);
  if (t.isIdentifier(callee)) return callee.getStart(file);
  if (t.isElementAccessExpression(callee) && callee.expression) return Math.max(callee.getStart(file), callee.end - 1);
  return Math.max(callee.getStart(file), callee.end - 1);
}
