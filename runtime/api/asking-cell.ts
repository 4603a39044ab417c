/**
 * Which notebook cell is asking: the kernel runs each cell inside `runAsCell(code, ...)`, and an ask
 * reads `askingCell()` to send the digest of that cell's source with it (the curator signs it into
 * the receipt; the audit checks it against the saved notebook).
 *
 * Async local storage rather than a "current cell" variable: work a cell started keeps that cell's
 * digest even when it finishes while a later cell runs (a promise awaited in the next cell, a
 * timer), so a release is bound to the code that asked for it, not to whichever cell is running.
 * The kernel imports this file (kernel -> runtime/api, the allowed direction); the API never
 * imports the kernel. Outside any cell (scripts, tests using the API directly) there is no digest.
 */
import { AsyncLocalStorage } from "node:async_hooks";
import { cellSourceDigest } from "../protocol/cell-source.js";

const asking = new AsyncLocalStorage<string>();

/** Runs `fn` (a cell's execution) with the digest of `source` as the asking cell. */
export function runAsCell<T>(source: string, fn: () => T): T {
  return asking.run(cellSourceDigest(source), fn);
}

/** The source digest of the cell whose execution this call belongs to, if any. */
export function askingCell(): string | undefined {
  return asking.getStore();
}
