/**
 * The asking cell (runtime/api/asking-cell.ts): an ask reads the digest of the cell whose execution
 * it belongs to, also when work a cell started finishes while a later cell runs.
 */
import { describe, expect, it } from "vitest";
import { askingCell, runAsCell } from "../../runtime/api/asking-cell.js";
import { cellSourceDigest } from "../../runtime/protocol/cell-source.js";

describe("askingCell", () => {
  it("is undefined outside a cell and the cell's digest inside, across awaits and timers", async () => {
    expect(askingCell()).toBeUndefined();
    const seen = await runAsCell("await a()", async () => {
      await new Promise((r) => setTimeout(r, 0));
      return askingCell();
    });
    expect(seen).toBe(cellSourceDigest("await a()"));
    expect(askingCell()).toBeUndefined();
  });

  it("keeps the digest of the cell that started the work when it finishes during a later cell", async () => {
    let release!: () => void;
    const gate = new Promise<void>((r) => (release = r));
    let late: string | undefined;
    let done!: Promise<void>;
    runAsCell("cell one", () => {
      done = gate.then(() => {
        late = askingCell();
      });
    });
    const during = await runAsCell("cell two", async () => {
      release();
      await done;
      return askingCell();
    });
    expect(late).toBe(cellSourceDigest("cell one"));
    expect(during).toBe(cellSourceDigest("cell two"));
  });
});
