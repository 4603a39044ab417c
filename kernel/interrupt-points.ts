/**
 * Interrupt points: how an interrupt stops cell code that runs after an `await`.
 *
 * tslab runs a cell's first synchronous stretch under `vm.runInThisContext({ breakOnSigint })`,
 * so a SIGINT stops a busy loop there. Code after an `await` runs later, as a promise
 * continuation on the main thread, outside any `vm` call: a SIGINT only queues the process's
 * listener, which never runs while that code spins. Node offers no safe way to stop it from
 * outside (terminating the main thread's JavaScript also drops every queued promise job of the
 * kernel itself).
 *
 * So every loop in a cell's compiled JavaScript gets an interrupt point: its body `B` becomes
 * `{ __hushInterruptPoint(k); B }`, k being the cell's number (interrupt-target.ts). The point
 * reads shared memory the control thread also holds; on `interrupt_request` the control thread
 * records there which cell the interrupt is for, even while the main thread is blocked, and a
 * pass through a cell loop soon after throws `CellInterrupted`: any loop while that cell still
 * runs (its own, or one an earlier cell left behind), and between cells only the interrupted
 * cell's own, until the next cell starts. A later cell's loops never see an earlier interrupt.
 * The point sits in front of the body, so a `try` inside the loop does not catch it; a `try`
 * around a loop can, but every further loop pass throws again. Edits add no line breaks: line
 * numbers of errors stay the cell's.
 *
 * Not covered: a loop inside library code a cell calls after an `await` (no point is inserted
 * there), and work the interrupted cell left scheduled that runs no cell loop.
 */
import { createRequire } from "node:module";
import { CHECK_EVERY, passCounter, pointShouldStop } from "./interrupt-target.js";

/** The name of the global the points call; a reserved-looking name no notebook is expected to use. */
export const INTERRUPT_POINT = "__hushInterruptPoint";

/** Message of the error an interrupt point throws (execution.ts maps it to `Interrupted`). */
export const INTERRUPTED_MESSAGE = "the cell was interrupted (at a loop)";

export class CellInterrupted extends Error {
  constructor() {
    super(INTERRUPTED_MESSAGE);
    this.name = "Interrupted";
  }
}

/**
 * Defines the global the points call (non-enumerable, not writable: a cell cannot replace it).
 * A point reads the shared target (an atomic load, the only read another thread's store is sure
 * to reach) on every 256th pass only: a load on every pass made the tightest loops about six
 * times slower, this about two. So that a loop with slow passes (each calling into a library,
 * say) need not make that many passes first, raising an interrupt also sets the pass counter to
 * one short of a check, and the control thread does so again every 150 ms while the cell runs.
 */
export function installInterruptPoint(): void {
  if (Object.prototype.hasOwnProperty.call(globalThis, INTERRUPT_POINT)) return;
  const { words, index } = passCounter;
  Object.defineProperty(globalThis, INTERRUPT_POINT, {
    value: function interruptPoint(cell: number): void {
      // The counter wraps around harmlessly; its increment races only with the control thread's
      // store of the next check, which it repeats.
      if ((++words[index] & (CHECK_EVERY - 1)) === 0 && pointShouldStop(cell)) throw new CellInterrupted();
    },
    enumerable: false,
    writable: false,
    configurable: false,
  });
}

interface Node {
  kind: number;
  pos: number;
  end: number;
  statement?: Node;
  getStart(file?: unknown): number;
}
interface Ts {
  createSourceFile(name: string, text: string, target: number, setParents?: boolean, kind?: number): Node;
  forEachChild<T>(node: Node, visit: (child: Node) => T | undefined): T | undefined;
  isIterationStatement(node: Node, lookInLabeledStatements: boolean): boolean;
  ScriptTarget: { Latest: number };
  ScriptKind: { JS: number };
}

const require = createRequire(import.meta.url);
let ts: Ts | null = null;

/**
 * `js` with an interrupt point at the start of every loop body (while, do-while, for, for-in,
 * for-of, for-await), each naming cell `cell` (0: code run outside any cell request). Returns
 * `js` unchanged when it has no loop.
 */
export function withInterruptPoints(js: string, cell = 0): string {
  if (!/\b(?:while|for|do)\b/.test(js)) return js;
  ts ??= require("@tslab/typescript-for-tslab") as Ts;
  const t = ts;
  // The trailing export parses the text as a module, where a top-level `await` is the operator.
  const file = t.createSourceFile("cell.js", `${js}\nexport {};\n`, t.ScriptTarget.Latest, true, t.ScriptKind.JS);
  const bodies: Array<{ start: number; end: number }> = [];
  const visit = (node: Node): undefined => {
    if (t.isIterationStatement(node, false) && node.statement) {
      bodies.push({ start: node.statement.getStart(file), end: node.statement.end });
    }
    t.forEachChild(node, visit);
    return undefined;
  };
  t.forEachChild(file, visit);
  if (bodies.length === 0) return js;
  // Insertions at each position, applied from the end so earlier offsets stay valid.
  const inserts: Array<{ at: number; text: string }> = [];
  for (const b of bodies) {
    inserts.push({ at: b.start, text: `{${INTERRUPT_POINT}(${cell});` });
    inserts.push({ at: b.end, text: "}" });
  }
  // Same position: closing braces (of inner bodies) before opening ones; stable otherwise.
  inserts.sort((a, b) => b.at - a.at || (a.text === "}" ? 1 : 0) - (b.text === "}" ? 1 : 0));
  let out = js;
  for (const ins of inserts) out = out.slice(0, ins.at) + ins.text + out.slice(ins.at);
  return out;
}
