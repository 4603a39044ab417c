/**
 * The receipt-chain checks, in seq order, for one chain (one analyst and population): the chain
 * starts at seq 1, has no gaps, each `prev` is the hash of the receipt before, each cost is a
 * positive exact number, each total is the previous total plus the cost in exact rationals, the cap
 * never changes and no total exceeds it.
 *
 * The one implementation: the notebook audit (checks.ts) runs it on the receipts a notebook shows
 * (`chainCheck`: seqs the notebook lacks are returned as not shown, with the spend their running
 * totals vouch for), and `checkReceiptChains` runs it on any set of receipts (a ledger's, a
 * client's), one chain per (analyst, population), after checking every signature (there a missing
 * seq is a finding).
 */
import type { KeyObject } from "node:crypto";
import { Rational } from "../../runtime/core/index.js";
import type { Receipt } from "../../runtime/protocol/messages.js";
import { GENESIS_PREV, keyIdOf, receiptHash, verifyReceipt } from "../../runtime/protocol/receipts.js";
import type { Finding } from "./findings.js";

/** A receipt and where it was found: `where` names it in messages, `cell` locates findings. */
export interface Linked {
  r: Receipt;
  where: string;
  cell: number | null;
}

/** A rational as a reader writes it: a decimal when it has a finite one, else a fraction. */
export function shown(r: Rational): string {
  let d = r.den;
  while (d % 2n === 0n) d /= 2n;
  while (d % 5n === 0n) d /= 5n;
  return d === 1n ? r.toDecimal(1000) : r.toString();
}

export function exact(s: unknown): Rational | null {
  if (typeof s !== "string") return null;
  try {
    return Rational.parse(s);
  } catch {
    return null;
  }
}

export function wellFormedRows(result: unknown): boolean {
  return (
    Array.isArray(result) &&
    result.every(
      (row: unknown) =>
        Array.isArray(row) &&
        row.length === 6 &&
        Array.isArray(row[0]) &&
        (row[0] as unknown[]).every((k) => k === null || typeof k === "string") &&
        typeof row[1] === "string" &&
        row.slice(2).every((x: unknown) => x === null || typeof x === "string"),
    )
  );
}

/**
 * Seqs a set of receipts lacks, from `from` to `to`: before the first shown receipt (`before`
 * null) or between two shown ones. Their receipts are not there to verify; what is known of them
 * is their count and, by the running totals, their spend: the total of `after` less its cost, less
 * the total of `before` (0 at the start). `spend` is null when those amounts are not exact numbers,
 * or when they leave 0 or less (each a "total" or "cost" finding in its own right); else positive.
 */
export interface MissingRun {
  from: number;
  to: number;
  spend: Rational | null;
  before: Linked | null;
  after: Linked;
}

/**
 * The seq-order checks of one chain; `chain` holds distinct seqs of one analyst and population,
 * sorted by seq. Missing seqs are findings ("chain-start", "gap"): a ledger or client must hold
 * every receipt. The notebook audit uses `chainCheck`, where missing seqs are returned instead.
 */
export function chainFindings(chain: readonly Linked[]): Finding[] {
  return walkChain(chain, true).findings;
}

/** The seq-order checks of one chain, with the seqs it lacks returned rather than reported. */
export function chainCheck(chain: readonly Linked[]): { findings: Finding[]; missing: MissingRun[] } {
  return walkChain(chain, false);
}

function missingFinding(run: MissingRun): Finding {
  const { from, to, before, after } = run;
  const which = from === to ? `release ${from} is` : `releases ${from}..${to} are`;
  if (before === null) {
    return {
      cell: after.cell,
      kind: "chain-start",
      message: `${after.where}: the first receipt is seq ${after.r.seq}, not 1: the spend of releases 1..${after.r.seq - 1} is not shown in this notebook`,
    };
  }
  return {
    cell: after.cell,
    kind: "gap",
    message: `${after.where}: receipt seq ${after.r.seq} follows seq ${before.r.seq} (${before.where}): ${which} missing (a release cell or output was deleted)`,
  };
}

function walkChain(chain: readonly Linked[], missingIsFinding: boolean): { findings: Finding[]; missing: MissingRun[] } {
  const findings: Finding[] = [];
  const missing: MissingRun[] = [];
  const first = chain[0];
  const cap0 = first === undefined ? null : exact(first.r.cap);
  // The running total before the receipt at hand: 0 before seq 1 and before the seqs a chain
  // lacks at its start (their spend is what the first shown total holds beyond its own cost).
  let prevTotal: Rational | null = Rational.ZERO;
  let prev: Linked | null = null;
  for (const p of chain) {
    const { r, where, cell } = p;
    const cost = exact(r.cost);
    const total = exact(r.total);
    const cap = exact(r.cap);
    const expected = prev === null ? 1 : prev.r.seq + 1;
    let gap: MissingRun | null = null;
    if (r.seq > expected) {
      // What the receipts vouch for about the seqs in between: the total before this receipt
      // (its total less its cost) less the total after the last shown one. Each release costs
      // more than 0, so that must be positive; their contents and hashes cannot be checked.
      const spend = prevTotal !== null && total !== null && cost !== null ? total.sub(cost).sub(prevTotal) : null;
      // A spend of 0 or less is no spend at all: reported as unknown beside the "total" finding.
      gap = { from: expected, to: r.seq - 1, spend: spend !== null && spend.sign() > 0 ? spend : null, before: prev, after: p };
      if (missingIsFinding) findings.push(missingFinding(gap));
      else missing.push(gap);
      if (spend !== null && spend.sign() <= 0) {
        const count = r.seq - expected;
        findings.push({
          cell,
          kind: "total",
          message: `${where}: receipt seq ${r.seq}: its total ${r.total} less its cost ${r.cost} leaves ${shown(spend)} for the ${count} release${count === 1 ? "" : "s"} before it not shown here (seq ${expected}${count === 1 ? "" : `..${r.seq - 1}`}), but every release costs more than 0: the totals do not add up`,
        });
      }
    }
    const linked = gap !== null ? null : prev === null ? GENESIS_PREV : receiptHash(prev.r);
    if (linked !== null && r.prev !== linked) {
      findings.push({
        cell,
        kind: "prev-link",
        message: `${where}: receipt seq ${r.seq} does not link to ${prev === null ? "the start of the chain" : `receipt seq ${prev.r.seq} (${prev.where})`}: its prev hash differs`,
      });
    }
    if (cost === null || cost.sign() <= 0) {
      findings.push({ cell, kind: "cost", message: `${where}: receipt seq ${r.seq} has cost "${r.cost}", not a positive exact number` });
    }
    if (total === null) {
      findings.push({ cell, kind: "total", message: `${where}: receipt seq ${r.seq} has total "${r.total}", not an exact number` });
    } else if (gap === null && cost !== null && prevTotal !== null && !prevTotal.add(cost).eq(total)) {
      findings.push({
        cell,
        kind: "total",
        message: `${where}: receipt seq ${r.seq}: total ${r.total} is not the previous total ${shown(prevTotal)} plus cost ${r.cost} (cost or total changed)`,
      });
    }
    if (cap === null || cap0 === null || !cap.eq(cap0)) {
      findings.push({ cell, kind: "cap", message: `${where}: receipt seq ${r.seq} states cap "${r.cap}", unlike the first receipt's "${first!.r.cap}"` });
    } else if (total !== null && total.gt(cap)) {
      findings.push({ cell, kind: "cap", message: `${where}: receipt seq ${r.seq}: total ${r.total} exceeds the cap ${r.cap}` });
    }
    prevTotal = total;
    prev = p;
  }
  return { findings, missing };
}

/** The signature checks of one receipt: malformed, signed by another key, or contents changed. */
export function signatureFinding(r: Receipt, publicKey: KeyObject, where: string, cell: number | null): Finding | null {
  const sig = verifyReceipt(r, publicKey);
  if (sig.ok) return null;
  // A receipt of the wrong shape is reported once; callers keep it out of every later check.
  if (sig.problem?.startsWith("not a hush receipt") === true || !wellFormedRows(r.result)) {
    return { cell, kind: "malformed", message: `${where}: the receipt is not a hush receipt (${sig.problem ?? "bad shape"})` };
  }
  const keyId = keyIdOf(publicKey);
  if (r.keyId !== keyId) {
    return {
      cell,
      kind: "key",
      message: `${where}: receipt seq ${r.seq} names curator key ${r.keyId}, not the given key ${keyId}: the key was replaced or the receipt comes from another curator`,
    };
  }
  return { cell, kind: "signature", message: `${where}: receipt seq ${r.seq}: the signature does not match its contents (forged or edited receipt)` };
}

/**
 * Checks any set of receipts (in any order) as hash chains, one per (analyst, population): every
 * signature, then the seq-order checks of each chain. The same receipt twice (a replay) counts
 * once; two different receipts with one seq are a finding. No findings: the receipts are whole.
 */
export function checkReceiptChains(rs: readonly Receipt[], publicKey: KeyObject): Finding[] {
  const findings: Finding[] = [];
  const chains = new Map<string, Map<number, Linked>>();
  for (const r of rs) {
    const where = typeof r?.analyst === "string" ? `${r.analyst}/${r.population} seq ${r.seq}` : "receipt";
    const bad = signatureFinding(r, publicKey, where, null);
    if (bad !== null) {
      findings.push(bad);
      if (bad.kind === "malformed") continue;
    }
    const key = JSON.stringify([r.analyst, r.population]);
    const bySeq = chains.get(key) ?? new Map<number, Linked>();
    chains.set(key, bySeq);
    const same = bySeq.get(r.seq);
    if (same === undefined) bySeq.set(r.seq, { r, where, cell: null });
    else if (receiptHash(same.r) !== receiptHash(r)) {
      findings.push({ cell: null, kind: "duplicate-seq", message: `${where}: two different receipts with seq ${r.seq}` });
    }
  }
  for (const bySeq of chains.values()) findings.push(...chainFindings([...bySeq.values()].sort((a, b) => a.r.seq - b.r.seq)));
  return findings;
}
