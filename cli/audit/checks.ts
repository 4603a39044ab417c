/**
 * The notebook audit: what a reviewer or teaching assistant can check without the data and
 * without the curator, from the notebook and the curator's public key alone.
 *
 * In notebook order: every receipt's signature and key, one analyst and population per notebook (a
 * notebook may use several datasets over the same people: their receipts form one chain), the
 * shown numbers equal the signed ones, no release without a receipt, receipts never going
 * backwards (replays of the same receipt are fine). In seq order: the chain starts at 1, has no
 * gaps, each `prev` is the hash of the receipt before, each total is the previous total plus the
 * cost in exact rationals, and the spend stays within the cap.
 */
import type { KeyObject } from "node:crypto";
import { Rational, epsilonFromRho } from "../../runtime/core/index.js";
import type { Receipt } from "../../runtime/protocol/messages.js";
import { GENESIS_PREV, keyIdOf, receiptHash, verifyReceipt } from "../../runtime/protocol/receipts.js";
import { type FoundRelease, type Notebook, findReleases } from "./notebook.js";
import { checkShown } from "./views.js";

export type FindingKind =
  | "malformed" // not a receipt at all
  | "signature" // signature does not match the contents
  | "key" // signed by another key
  | "mixed" // another analyst or population
  | "owner" // not the analyst or dataset the reviewer expected (--analyst, --dataset)
  | "label" // output metadata names another dataset than its receipt
  | "no-receipt" // looks like a release, has no receipt
  | "shown-value" // the text shown is not the signed value
  | "bundle-value" // a structured bundle disagrees with the signed result
  | "reordered" // a new receipt with a smaller seq than one shown above it
  | "duplicate-seq" // two different receipts with one seq
  | "chain-start" // first receipt is not seq 1
  | "gap" // missing seqs
  | "prev-link" // prev is not the hash of the receipt before
  | "total" // running total does not add up
  | "cost" // cost not a positive exact rational
  | "cap"; // over the cap, or the cap changed

export interface Finding {
  /** Index of the cell in the notebook's `cells` list (0-based), or null for whole-notebook findings. */
  cell: number | null;
  kind: FindingKind;
  message: string;
}

export interface AuditReport {
  ok: boolean;
  keyId: string;
  analyst: string | null;
  /** The population the receipts spend on (one chain per analyst and population). */
  population: string | null;
  /** The datasets the receipts name, in notebook order (all of one population). */
  datasets: string[];
  unit: "epsilon" | "rho" | null;
  /** Release outputs with a receipt, counting replays. */
  releases: number;
  /** Distinct receipts. */
  receipts: number;
  replays: number;
  /** Final total and cap in `unit`, exact rationals as strings; null when there is no receipt. */
  total: string | null;
  cap: string | null;
  /** zCDP notebooks: the final total as epsilon at the receipts' delta (rounded up). */
  totalEpsilon: string | null;
  delta: string | null;
  /** The stricter cap given with --cap (epsilon), if any. */
  reviewCap: string | null;
  findings: Finding[];
}

export interface AuditOptions {
  /** A cap in epsilon the reviewer holds the notebook to (may be stricter than the steward's). */
  cap?: Rational;
  /** Whose notebook the reviewer expects (e.g. the student who handed it in), and a dataset it must
   * use (other datasets of the same population may appear beside it: they share the chain). */
  analyst?: string;
  dataset?: string;
}

function at(rel: { cell: number; executionCount: number | null }): string {
  return rel.executionCount === null ? `cell ${rel.cell}` : `cell ${rel.cell} (In [${rel.executionCount}])`;
}

/** A rational as a reader writes it: a decimal when it has a finite one, else a fraction. */
function shown(r: Rational): string {
  let d = r.den;
  while (d % 2n === 0n) d /= 2n;
  while (d % 5n === 0n) d /= 5n;
  return d === 1n ? r.toDecimal(1000) : r.toString();
}

function exact(s: unknown): Rational | null {
  if (typeof s !== "string") return null;
  try {
    return Rational.parse(s);
  } catch {
    return null;
  }
}

function wellFormedRows(result: unknown): boolean {
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

interface Placed {
  r: Receipt;
  rel: FoundRelease;
}

export function auditNotebook(nb: Notebook, publicKey: KeyObject, opts: AuditOptions = {}): AuditReport {
  const keyId = keyIdOf(publicKey);
  const findings: Finding[] = [];
  const { releases, suspects } = findReleases(nb);
  for (const s of suspects) {
    findings.push({ cell: s.cell, kind: "no-receipt", message: `${at(s)}: output ${s.output} looks like a release but ${s.why}` });
  }

  // ---- notebook order ----------------------------------------------------------------------
  let owner: { analyst: string; population: string } | null = null;
  const datasets: string[] = [];
  const distinct = new Map<string, Placed>(); // receipt hash -> first place shown
  const bySeq = new Map<number, Placed>();
  let highest: Placed | null = null;
  let replays = 0;
  for (const rel of releases) {
    const r = rel.meta.receipt;
    const sig = verifyReceipt(r, publicKey);
    // A receipt of the wrong shape is reported once and kept out of every later check, so hostile
    // JSON cannot crash the audit or pass as part of the chain.
    if (!sig.ok && (sig.problem?.startsWith("not a hush receipt") === true || !wellFormedRows(r.result))) {
      findings.push({ cell: rel.cell, kind: "malformed", message: `${at(rel)}: the output's receipt is not a hush receipt (${sig.problem ?? "bad shape"})` });
      continue;
    }
    if (!sig.ok && r.keyId !== keyId) {
      findings.push({
        cell: rel.cell,
        kind: "key",
        message: `${at(rel)}: receipt seq ${r.seq} names curator key ${r.keyId}, not the given key ${keyId}: the key was replaced or the receipt comes from another curator`,
      });
    } else if (!sig.ok) {
      findings.push({
        cell: rel.cell,
        kind: "signature",
        message: `${at(rel)}: receipt seq ${r.seq}: the signature does not match its contents (forged or edited receipt)`,
      });
    }
    if (rel.meta.dataset !== r.dataset) {
      findings.push({ cell: rel.cell, kind: "label", message: `${at(rel)}: output says dataset "${rel.meta.dataset}" but its receipt is for "${r.dataset}"` });
    }
    checkShown(rel, r, findings, at);

    owner ??= { analyst: r.analyst, population: r.population };
    if (r.analyst !== owner.analyst || r.population !== owner.population) {
      findings.push({
        cell: rel.cell,
        kind: "mixed",
        message: `${at(rel)}: receipt from analyst "${r.analyst}" on population "${r.population}" (dataset "${r.dataset}"), but this notebook's spend is for "${owner.analyst}" on "${owner.population}"`,
      });
      continue;
    }
    if (!datasets.includes(r.dataset)) datasets.push(r.dataset);
    const h = receiptHash(r);
    if (distinct.has(h)) {
      replays++;
      continue;
    }
    const placed = { r, rel };
    distinct.set(h, placed);
    const same = bySeq.get(r.seq);
    if (same !== undefined) {
      findings.push({
        cell: rel.cell,
        kind: "duplicate-seq",
        message: `${at(rel)}: a second, different receipt with seq ${r.seq} (the first is in ${at(same.rel)})`,
      });
      continue;
    }
    bySeq.set(r.seq, placed);
    if (highest !== null && r.seq < highest.r.seq) {
      findings.push({
        cell: rel.cell,
        kind: "reordered",
        message: `${at(rel)}: receipt seq ${r.seq} is shown after seq ${highest.r.seq} in ${at(highest.rel)}: cells were reordered`,
      });
    }
    if (highest === null || r.seq > highest.r.seq) highest = placed;
  }

  // ---- seq order ---------------------------------------------------------------------------
  const chain = [...bySeq.values()].sort((a, b) => a.r.seq - b.r.seq);
  const first = chain[0];
  if (first !== undefined && first.r.seq !== 1) {
    findings.push({
      cell: first.rel.cell,
      kind: "chain-start",
      message: `${at(first.rel)}: the first receipt is seq ${first.r.seq}, not 1: the spend of releases 1..${first.r.seq - 1} is not shown in this notebook`,
    });
  }
  const cap0 = first === undefined ? null : exact(first.r.cap);
  let prevTotal: Rational | null = first !== undefined && first.r.seq === 1 ? Rational.ZERO : null;
  let prev: Placed | null = null;
  for (const p of chain) {
    const { r, rel } = p;
    const cost = exact(r.cost);
    const total = exact(r.total);
    const cap = exact(r.cap);
    if (prev !== null && r.seq !== prev.r.seq + 1) {
      const missing = r.seq - prev.r.seq - 1;
      findings.push({
        cell: rel.cell,
        kind: "gap",
        message: `${at(rel)}: receipt seq ${r.seq} follows seq ${prev.r.seq} (${at(prev.rel)}): ${missing === 1 ? `release ${prev.r.seq + 1} is` : `releases ${prev.r.seq + 1}..${r.seq - 1} are`} missing (a release cell or output was deleted)`,
      });
      prevTotal = null; // the running total cannot be checked across a gap
    }
    const linked = prev === null ? (r.seq === 1 ? GENESIS_PREV : null) : r.seq === prev.r.seq + 1 ? receiptHash(prev.r) : null;
    if (linked !== null && r.prev !== linked) {
      findings.push({
        cell: rel.cell,
        kind: "prev-link",
        message: `${at(rel)}: receipt seq ${r.seq} does not link to ${prev === null ? "the start of the chain" : `receipt seq ${prev.r.seq} (${at(prev.rel)})`}: its prev hash differs`,
      });
    }
    if (cost === null || cost.sign() <= 0) {
      findings.push({ cell: rel.cell, kind: "cost", message: `${at(rel)}: receipt seq ${r.seq} has cost "${r.cost}", not a positive exact number` });
    }
    if (total === null) {
      findings.push({ cell: rel.cell, kind: "total", message: `${at(rel)}: receipt seq ${r.seq} has total "${r.total}", not an exact number` });
    } else if (cost !== null && prevTotal !== null && !prevTotal.add(cost).eq(total)) {
      findings.push({
        cell: rel.cell,
        kind: "total",
        message: `${at(rel)}: receipt seq ${r.seq}: total ${r.total} is not the previous total ${shown(prevTotal)} plus cost ${r.cost} (cost or total changed)`,
      });
    }
    if (cap === null || cap0 === null || !cap.eq(cap0)) {
      findings.push({ cell: rel.cell, kind: "cap", message: `${at(rel)}: receipt seq ${r.seq} states cap "${r.cap}", unlike the first receipt's "${first!.r.cap}"` });
    } else if (total !== null && total.gt(cap)) {
      findings.push({ cell: rel.cell, kind: "cap", message: `${at(rel)}: receipt seq ${r.seq}: total ${r.total} exceeds the cap ${r.cap}` });
    }
    prevTotal = total;
    prev = p;
  }

  // ---- final spend against the reviewer's cap ---------------------------------------------
  const last = chain.at(-1);
  let totalEpsilon: string | null = null;
  if (last !== undefined) {
    const total = exact(last.r.total);
    let eps: Rational | null = last.r.unit === "epsilon" ? total : null;
    if (last.r.unit === "rho" && total !== null) {
      const delta = exact(last.r.delta);
      if (delta === null) {
        findings.push({ cell: last.rel.cell, kind: "malformed", message: `${at(last.rel)}: zCDP receipt seq ${last.r.seq} has no delta, so its epsilon cannot be stated` });
      } else {
        // A forged delta outside (0, 1) or a negative total would make the conversion refuse:
        // that is a finding at the receipt, not unreadable input.
        try {
          eps = epsilonFromRho(total, delta);
          totalEpsilon = shown(eps);
        } catch {
          findings.push({
            cell: last.rel.cell,
            kind: "malformed",
            message: `${at(last.rel)}: zCDP receipt seq ${last.r.seq} has total "${last.r.total}" at delta "${last.r.delta ?? ""}", which has no epsilon (delta must lie in (0, 1), the total must not be negative)`,
          });
        }
      }
    }
    if (opts.cap !== undefined && eps !== null && eps.gt(opts.cap)) {
      findings.push({
        cell: null,
        kind: "cap",
        message: `the notebook spends epsilon ${shown(eps)}, over the review cap ${shown(opts.cap)}`,
      });
    }
  }

  // A copied notebook verifies under its real author's name: only the reviewer knows whose it should be.
  for (const [what, expected, actual] of [
    ["analyst", opts.analyst, owner?.analyst],
    ["dataset", opts.dataset, opts.dataset !== undefined && datasets.includes(opts.dataset) ? opts.dataset : datasets.join(", ") || undefined],
  ] as const) {
    if (expected !== undefined && actual !== expected) {
      findings.push({
        cell: null,
        kind: "owner",
        message:
          actual === undefined
            ? `expected releases of ${what} ${JSON.stringify(expected)}, but the notebook has no receipt`
            : `the receipts are for ${what} ${JSON.stringify(actual)}, not ${JSON.stringify(expected)} as expected`,
      });
    }
  }

  findings.sort((a, b) => (a.cell ?? Infinity) - (b.cell ?? Infinity));
  return {
    ok: findings.length === 0,
    keyId,
    analyst: owner?.analyst ?? null,
    population: owner?.population ?? null,
    datasets,
    unit: last?.r.unit ?? null,
    releases: releases.length,
    receipts: distinct.size,
    replays,
    total: last?.r.total ?? null,
    cap: last?.r.cap ?? null,
    totalEpsilon,
    delta: last?.r.delta ?? null,
    reviewCap: opts.cap === undefined ? null : shown(opts.cap),
    findings,
  };
}
