/**
 * Spend a notebook does not show, and receipts it shows out of spend order: what honest re-runs
 * leave behind, reported so that a reviewer sees the spend without the student being accused.
 *
 * A cell run again after an edit asks a new question: the curator issues a new receipt with the
 * next seq and the cell's old output (and receipt) is replaced. An unchanged cell run again is
 * answered from the ledger with its earlier receipt (a replay), so it shows a lower seq below
 * newer ones. Spend in another notebook of the same analyst and population is in the same chain.
 * The audit cannot tell these apart from a deleted release cell, so it calls none of them
 * deletion: it states which seqs are not shown, how many, and the spend their neighbours' running
 * totals vouch for (chain.ts `chainCheck`), which stays counted in the total held to the cap.
 */
import { Rational } from "../../runtime/core/index.js";
import type { Receipt } from "../../runtime/protocol/messages.js";
import { type MissingRun, shown } from "./chain.js";
import type { Finding } from "./findings.js";
import type { FoundRelease } from "./notebook.js";

/** Releases spent but not shown in the notebook; amounts are exact rationals as strings, in the chain's unit. */
export interface Superseded {
  releases: number;
  /** Their spend in all; null when some of it cannot be worked out (a total that is not a number, itself a finding). */
  spend: string | null;
  runs: { from: number; to: number; spend: string | null }[];
}

export function supersededOf(missing: readonly MissingRun[]): Superseded {
  let spend: Rational | null = Rational.ZERO;
  let releases = 0;
  for (const m of missing) {
    releases += m.to - m.from + 1;
    spend = spend === null || m.spend === null ? null : spend.add(m.spend);
  }
  return {
    releases,
    spend: spend === null ? null : shown(spend),
    runs: missing.map((m) => ({ from: m.from, to: m.to, spend: m.spend === null ? null : shown(m.spend) })),
  };
}

const symbol = (unit: string): string => (unit === "rho" ? "ρ" : "ε");

/** One "superseded" entry per run of seqs not shown, at the cell of the receipt after it. */
export function notShownNotes(missing: readonly MissingRun[], unit: string): Finding[] {
  return missing.map((m) => {
    const n = m.to - m.from + 1;
    const which = n === 1 ? `release ${m.from}` : `releases ${m.from}..${m.to}`;
    const spend = m.spend === null ? "spend unknown: see the total finding" : `${symbol(unit)} ${shown(m.spend)} in all, by the running totals`;
    const lead =
      m.before === null
        ? `${m.after.where}: the first receipt shown is seq ${m.after.r.seq}`
        : `${m.after.where}: receipt seq ${m.after.r.seq} follows seq ${m.before.r.seq} in ${m.before.where}`;
    return {
      cell: m.after.cell,
      kind: "superseded",
      message:
        `${lead}: ${which} (${n} release${n === 1 ? "" : "s"}, ${spend}) ${n === 1 ? "is" : "are"} not shown in this notebook: ` +
        "spent by earlier runs of cells that were run again, by cells since deleted, or in another notebook of the same analyst; " +
        "the spend is counted in the total",
    };
  });
}

interface Shown {
  r: Receipt;
  rel: FoundRelease;
  at: string;
}

/**
 * A receipt shown below one with a later seq. Not evidence of anything: spend order is not
 * notebook order after a re-run (a replayed answer keeps its seq), after cells run by hand out of
 * order (In [n] says so), after a kernel restart (the counts start again) or after cells were moved.
 * The spend is counted either way. Returns null for a replay: a cell run again unchanged shows its
 * earlier receipt wherever it stands, which is what the notebook's own run produced (even --strict,
 * which is about spend not shown, has nothing to say about it).
 */
export function spendOrderNote(lower: Shown, above: Shown): Finding | null {
  if (lower.rel.meta.replay) return null;
  const a = lower.rel.executionCount;
  const b = above.rel.executionCount;
  const why =
    a !== null && b !== null && a < b
      ? `its cell was run before that one (In [${a}] before In [${b}])`
      : "its cell was moved, or run in an earlier kernel session";
  return {
    cell: lower.rel.cell,
    kind: "spend-order",
    message: `${lower.at}: receipt seq ${lower.r.seq} is shown below ${above.at}, which shows the later seq ${above.r.seq}: ${why}; the spend is counted either way`,
  };
}
