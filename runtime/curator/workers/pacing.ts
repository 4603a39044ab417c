/**
 * When a release's reply may leave: on a public ladder of slots, so its timing says (almost)
 * nothing about the data.
 *
 * The work behind a release depends on the data: the SQL's hash aggregation and per-unit windows
 * grow with the rows that match, and the quantile's rejection draw runs longer the more rows
 * match. So the reply is held until the first slot at or after the moment the work finished.
 * Slots are s, 2s, 4s, ... (doubling), measured from the start of the release's work and capped at
 * the time limit. The first slot s comes only from public things: the policy's pace
 * (curator.answering.pace, default 50 ms) times the release's size class, the larger of its rounds
 * of SQL work (one per part of a describe) and its released rows per CELLS_PER_STEP. Never from the
 * data, the rows that matched or the time other releases took.
 *
 * What can still leak: when the work overruns the first slot, the slot it lands in tells the
 * analyst the work's size class, one of at most log2(limit/s) + 1 values (under 10 at the defaults,
 * so under 3.4 bits per release, and only on datasets large enough to overrun); work past the limit
 * is refused at the limit. Where the work fits the first slot, every answer leaves at the same time.
 */

/** Released rows (declared cells) per pace step in the first slot. */
export const CELLS_PER_STEP = 1000;

/** The first reply slot of a release (ms): pace x its public size class; 0 when pacing is off. */
export function firstSlot(paceMs: number, steps: number, size: number): number {
  return paceMs * Math.max(1, steps, Math.ceil(size / CELLS_PER_STEP));
}

/** The reply time (ms after the work started) for work that took `elapsedMs`; `firstMs` 0 turns pacing off. */
export function replySlot(elapsedMs: number, firstMs: number, limitMs: number): number {
  if (!(firstMs > 0)) return elapsedMs;
  let slot = firstMs;
  while (slot < elapsedMs && slot < limitMs) slot *= 2;
  return Math.min(slot, limitMs);
}

/** Waits until the reply slot of work that started at `startedAt` (performance.now() ms). */
export async function holdUntilSlot(startedAt: number, firstMs: number, limitMs: number): Promise<void> {
  const elapsed = performance.now() - startedAt;
  const wait = replySlot(elapsed, firstMs, limitMs) - elapsed;
  if (wait > 0) await new Promise<void>((resolve) => setTimeout(resolve, wait));
}
