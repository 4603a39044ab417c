/**
 * When a release's reply may leave: on a public ladder of slots, so its timing says (almost)
 * nothing about the data.
 *
 * The work behind a release depends on the data: the SQL's hash aggregation and per-unit windows
 * grow with the rows that match, and the quantile's rejection draw runs longer the more rows
 * concentrate near the target. So the reply is held until the first slot at or after the moment
 * the work finished. Slots are first, 2 first, 4 first, ... (doubling) measured from the start of
 * the release's work, up to the time limit; `first` comes from the policy (curator.answering.pace),
 * never from the data.
 *
 * What can still leak: when the work overruns the first slot, the slot it lands in tells the
 * analyst the work's size class, one of at most log2(limit/first) + 1 values (11 at the defaults,
 * under 3.5 bits per release); work past the limit is refused at the limit. On datasets where every
 * release fits the first slot (the usual case; bench/RESULTS.md has figures) nothing leaks.
 */

/** The reply time (ms after the work started) for work that took `elapsedMs`; 0 `firstMs` turns pacing off. */
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
