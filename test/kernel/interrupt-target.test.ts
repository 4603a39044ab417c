/**
 * interrupt-target.ts: an interrupt reaches only the cell running when it was received.
 *
 * The unit part drives the shared words in this process (a fake SIGINT). The process part runs
 * sigint-protocol-child.mjs: numbered cells run through real `vm` calls with `breakOnSigint`
 * while a worker thread interrupts whichever cell runs, up to thousands of times a second, with
 * real SIGINTs. With the kernel's rule every signal ends exactly the cell it was aimed at and
 * none reaches the process's listener; with the old rule (a SIGINT whenever a cell runs) the same
 * child hears stray signals or is killed by one (node gives SIGINT its default action for a
 * moment around every `vm` call), which shows the check can fail.
 */
import { spawnSync } from "node:child_process";
import { existsSync } from "node:fs";
import { fileURLToPath } from "node:url";
import { runInNewContext, runInThisContext } from "node:vm";
import { INTERRUPTED_MESSAGE, installInterruptPoint, withInterruptPoints } from "../../kernel/interrupt-points.js";
import { describe, expect, it } from "vitest";
import {
  InterruptSender,
  VM_MARK,
  armVm,
  beginCell,
  disarmVm,
  endCell,
  installVmMark,
  interruptState,
  interruptedCell,
  markedScript,
  pointShouldStop,
} from "../../kernel/interrupt-target.js";

/** Does a point of cell `c` stop (checked as on a point's CHECK_EVERY-th pass)? */
function stops(c: number): boolean {
  return pointShouldStop(c);
}

const mark = (k: number, entering: number): void =>
  (globalThis as unknown as Record<string, (k: number, e: number) => void>)[VM_MARK](k, entering);

describe("interrupt targets (shared words, fake SIGINT)", () => {
  installVmMark();

  it("drops an interrupt received between cells; it does not reach the next cell", () => {
    const sender = new InterruptSender(interruptState, () => {
      throw new Error("no SIGINT expected");
    });
    const a = beginCell();
    endCell(a);
    expect(sender.request()).toBe(0);
    const b = beginCell();
    expect(interruptedCell(b)).toBe(false);
    expect(stops(b)).toBe(false);
    endCell(b);
  });

  it("an interrupt for cell k stops k's loops (and earlier cells' while k runs), never the next cell's", () => {
    const sender = new InterruptSender(interruptState, () => {});
    const earlier = beginCell();
    endCell(earlier);
    const k = beginCell();
    expect(sender.request()).toBe(k);
    expect(interruptedCell(k)).toBe(true);
    expect(stops(k)).toBe(true);
    // A loop an earlier cell left behind, blocking while k runs.
    expect(stops(earlier)).toBe(true);
    endCell(k);
    // Between cells: k's own leftover work only.
    expect(stops(k)).toBe(true);
    expect(stops(earlier)).toBe(false);
    const next = beginCell();
    expect(interruptedCell(next)).toBe(false);
    expect(stops(next)).toBe(false);
    expect(stops(k)).toBe(false);
    expect(sender.pending(k)).toBe(false);
    endCell(next);
  });

  it("sends one SIGINT, only while the cell's script is inside vm", () => {
    const sent: number[] = [];
    let target = 0;
    const sender = new InterruptSender(interruptState, () => sent.push(target));
    const k = beginCell();
    target = sender.request();
    expect(target).toBe(k);
    // Compiling: not in vm yet.
    expect(sender.signal(k)).toBe("wait");
    armVm(k);
    mark(k, 1);
    expect(sender.signal(k)).toBe("sent");
    expect(sender.signal(k)).toBe("sent");
    expect(sent).toEqual([k]);
    // The script ended (by the signal): the vm wrapper clears the word.
    disarmVm(k);
    expect(sender.signal(k)).toBe("over");
    endCell(k);
    expect(sender.signal(k)).toBe("over");
  });

  it("sends nothing once the cell's script has left vm, and nothing to a later cell's script", () => {
    const sent: number[] = [];
    const sender = new InterruptSender(interruptState, () => sent.push(1));
    const k = beginCell();
    armVm(k);
    mark(k, 1);
    mark(k, 0);
    disarmVm(k);
    expect(sender.request()).toBe(k);
    expect(sender.signal(k)).toBe("over");
    endCell(k);
    const next = beginCell();
    armVm(next);
    mark(next, 1);
    expect(sender.signal(k)).toBe("over");
    mark(next, 0);
    disarmVm(next);
    endCell(next);
    expect(sent).toEqual([]);
  });

  it("only the armed script can mark the word", () => {
    const sender = new InterruptSender(interruptState, () => {
      throw new Error("no SIGINT expected");
    });
    const k = beginCell();
    mark(k, 1); // not armed: ignored (a cell calling the global itself, say)
    expect(sender.request()).toBe(k);
    expect(sender.signal(k)).toBe("wait");
    endCell(k);
  });

  it("a failed send puts the word back, so the script can leave", () => {
    const sender = new InterruptSender(interruptState, () => {
      throw new Error("kill failed");
    });
    const k = beginCell();
    expect(sender.request()).toBe(k);
    armVm(k);
    mark(k, 1);
    expect(() => sender.signal(k)).toThrow("kill failed");
    mark(k, 0); // returns at once: the word is k again
    disarmVm(k);
    expect(sender.signal(k)).toBe("over");
    endCell(k);
  });

  it("a cell's loop stops at its points on its interrupt; the next cell's loop runs to its end", () => {
    installInterruptPoint();
    const sender = new InterruptSender(interruptState, () => {});
    const k = beginCell();
    expect(sender.request()).toBe(k);
    expect(() => runInThisContext(withInterruptPoints("for (;;) {}", k))).toThrow(INTERRUPTED_MESSAGE);
    endCell(k);
    const next = beginCell();
    const counted = "(() => { let n = 0; for (let i = 0; i < 100000; i++) n++; return n; })()";
    expect(runInThisContext(withInterruptPoints(counted, next))).toBe(100000);
    endCell(next);
  });

  it("the marked script keeps its completion value", () => {
    const marks: number[][] = [];
    const script = markedScript("(function () { return 41 + 1; })()", 3);
    expect(runInNewContext(script, { [VM_MARK]: (k: number, e: number) => marks.push([k, e]) })).toBe(42);
    expect(marks).toEqual([[3, 1], [3, 0]]);
    expect(() => runInNewContext(markedScript("null.x", 4), { [VM_MARK]: (k: number, e: number) => marks.push([k, e]) })).toThrow("null");
    expect(marks.at(-1)).toEqual([4, 0]);
  });
});

describe("interrupt targets with real SIGINTs (child process)", () => {
  const child = fileURLToPath(new URL("./sigint-protocol-child.mjs", import.meta.url));
  const built = fileURLToPath(new URL("../../dist/kernel/interrupt-target.js", import.meta.url));
  const run = (mode: string, ms: number) => {
    if (!existsSync(built)) throw new Error("dist/kernel/interrupt-target.js not found: build with `npx tsc -p .` first");
    const r = spawnSync(process.execPath, [child, mode, String(ms)], { encoding: "utf8", timeout: ms + 30_000 });
    const line = r.stdout.trim().split("\n").at(-1) ?? "";
    return {
      signal: r.signal,
      status: r.status,
      stderr: r.stderr,
      report: line.startsWith("{")
        ? (JSON.parse(line) as { cells: number; interrupted: number[]; signalled: number[]; heard: number; otherErrors: string[] })
        : null,
    };
  };

  it("every SIGINT ends the cell it was aimed at; none is heard elsewhere; the process survives", { timeout: 60_000 }, () => {
    const r = run("marked", 3000);
    expect(r.stderr).toBe("");
    expect(r.signal).toBeNull();
    expect(r.status).toBe(0);
    const rep = r.report!;
    expect(rep.heard).toBe(0);
    expect(rep.otherErrors).toEqual([]);
    expect(rep.interrupted.length).toBeGreaterThan(10);
    expect(new Set(rep.interrupted)).toEqual(new Set(rep.signalled));
    // One signal per cell at most.
    expect(new Set(rep.signalled).size).toBe(rep.signalled.length);
  });

  it("the old rule (a SIGINT whenever a cell runs) fails the same check", { timeout: 60_000 }, () => {
    const r = run("running", 3000);
    const killed = r.signal === "SIGINT" || r.status === 130;
    const stray = r.report !== null && (r.report.heard > 0 || new Set(r.report.interrupted).size !== new Set(r.report.signalled).size);
    expect(killed || stray).toBe(true);
  });
});
