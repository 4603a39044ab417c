/**
 * The notebook audit: what a reviewer or teaching assistant can check without the data and
 * without the curator, from the notebook and the curator's public key alone.
 *
 * In notebook order: every receipt's signature and key, one analyst and population per notebook (a
 * notebook may use several datasets over the same people: their receipts form one chain), the
 * shown numbers equal the signed ones, each release shown under the unchanged code of the cell that
 * asked for it (source-binding.ts), no release without a receipt. In seq order: each `prev` is
 * the hash of the receipt before, each total is the previous total plus the cost in exact
 * rationals, and the spend stays within the cap.
 *
 * Honest work leaves seqs out and shows receipts out of spend order: a cell run again after an
 * edit gets a new receipt and its old one is no longer shown; an unchanged cell run again shows its
 * earlier receipt (a replay) below newer ones; spend in a scratch notebook of the same analyst is
 * in the chain too. So seqs a notebook lacks are reported as "not shown" (superseded) with their
 * count and the exact spend the running totals vouch for (superseded.ts), and receipts out of
 * spend order as a note; both pass unless the reviewer asks for --strict. The spend stays counted:
 * totals are running totals, so the last shown total, held to the cap, includes it.
 */
import type { KeyObject } from "node:crypto";
import { type EpsilonRoute, Rational, bestEpsilon, epsilonFromRho, pureEpsilonOfParts } from "../../runtime/core/index.js";
import { formatDecimal } from "../../runtime/protocol/format.js";
import type { Receipt } from "../../runtime/protocol/messages.js";
import { keyIdOf, receiptHash } from "../../runtime/protocol/receipts.js";
import { type Linked, chainCheck, exact, shown, signatureFinding } from "./chain.js";
import type { Finding } from "./findings.js";
import { type FoundRelease, type Notebook, findReleases, shownText } from "./notebook.js";
import { type Superseded, notShownNotes, spendOrderNote, supersededOf } from "./superseded.js";
import { sourceBindingFindings } from "./source-binding.js";
import { checkShown } from "./views.js";

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
  /** zCDP notebooks: the best valid epsilon at the receipts' delta for the final total
   * (docs/methods.md §22), and how it was obtained. */
  totalEpsilon: string | null;
  epsilonBy: EpsilonRoute | null;
  delta: string | null;
  /** The stricter cap given with --cap (epsilon), if any. */
  reviewCap: string | null;
  /** Whether notes count as findings (--strict). */
  strict: boolean;
  /** Releases spent but not shown in this notebook (re-run cells, deleted cells, other notebooks). */
  superseded: Superseded;
  /** What the reviewer should know but an honest notebook may show: not-shown spend, receipts out
   * of spend order. Empty under --strict, where they are findings. They never make `ok` false. */
  notes: Finding[];
  findings: Finding[];
}

export interface AuditOptions {
  /** A cap in epsilon the reviewer holds the notebook to (may be stricter than the steward's). */
  cap?: Rational;
  /** Whose notebook the reviewer expects (e.g. the student who handed it in), and a dataset it must
   * use (other datasets of the same population may appear beside it: they share the chain). */
  analyst?: string;
  dataset?: string;
  /** Spend not shown and receipts out of spend order are findings, not notes. */
  strict?: boolean;
}

function at(rel: { cell: number; executionCount: number | null }): string {
  return rel.executionCount === null ? `cell ${rel.cell}` : `cell ${rel.cell} (In [${rel.executionCount}])`;
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
  const notes: Finding[] = [];
  for (const rel of releases) {
    const r = rel.meta.receipt;
    const bad = signatureFinding(r, publicKey, at(rel), rel.cell);
    if (bad !== null) findings.push(bad);
    // A receipt of the wrong shape is reported once and kept out of every later check, so hostile
    // JSON cannot crash the audit or pass as part of the chain.
    if (bad?.kind === "malformed") continue;
    if (!Number.isSafeInteger(r.seq) || r.seq < 1) {
      findings.push({ cell: rel.cell, kind: "malformed", message: `${at(rel)}: the receipt's seq ${JSON.stringify(r.seq)} is not a whole number from 1` });
      continue;
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
      const note = spendOrderNote({ r, rel, at: at(rel) }, { r: highest.r, rel: highest.rel, at: at(highest.rel) });
      if (note !== null) notes.push(note);
    }
    if (highest === null || r.seq > highest.r.seq) highest = placed;
  }

  // ---- each release under the code that asked for it ---------------------------------------
  findings.push(...sourceBindingFindings(nb, releases, publicKey, at));

  // ---- seq order ---------------------------------------------------------------------------
  const chain = [...bySeq.values()].sort((a, b) => a.r.seq - b.r.seq);
  const checked = chainCheck(chain.map((p): Linked => ({ r: p.r, where: at(p.rel), cell: p.rel.cell })));
  findings.push(...checked.findings);
  const superseded = supersededOf(checked.missing);
  notes.push(...notShownNotes(checked.missing, chain[0]?.r.unit ?? "epsilon"));
  // --strict: the reviewer wants the notebook to show every release it spent, in spend order.
  if (opts.strict === true) findings.push(...notes.splice(0));

  // ---- the epsilon each zCDP release states -----------------------------------------------
  // Plain composition needs every release from seq 1 on, each pure (docs/methods.md §22): the
  // tally is known only over the run of consecutive seqs from 1 that the notebook shows.
  const pureAt = new Map<number, Rational | null>();
  {
    let acc: Rational | null = Rational.ZERO;
    for (const [i, p] of chain.entries()) {
      if (p.r.seq !== i + 1) break;
      const e: Rational | null = acc === null ? null : pureEpsilonOfParts(Array.isArray(p.r.mechanisms) ? p.r.mechanisms : []);
      acc = acc === null || e === null ? null : acc.add(e);
      pureAt.set(p.r.seq, acc);
    }
  }
  for (const rel of releases) {
    if (rel.meta.replay) continue; // a replay shows the current spend, not its receipt's
    const finding = statementFinding(rel, pureAt, at);
    if (finding !== null) (finding.kind === "epsilon-statement" ? findings : notes).push(finding);
  }

  // ---- final spend against the reviewer's cap ---------------------------------------------
  const last = chain.at(-1);
  let totalEpsilon: string | null = null;
  let epsilonBy: EpsilonRoute | null = null;
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
          const pure = pureAt.get(last.r.seq);
          const best = bestEpsilon(total, pure === undefined ? null : pure, delta);
          eps = best.epsilon;
          epsilonBy = best.by;
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
  notes.sort((a, b) => (a.cell ?? Infinity) - (b.cell ?? Infinity));
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
    epsilonBy,
    delta: last?.r.delta ?? null,
    reviewCap: opts.cap === undefined ? null : shown(opts.cap),
    strict: opts.strict === true,
    superseded,
    notes,
    findings,
  };
}

// The statement the kernel writes beside a zCDP spend (runtime/api/text.ts epsilonAtDelta):
// "ε 1 of 3 at δ=1e-6, by plain composition"; older notebooks end after the delta.
const STATEMENT = /ε (\S+) of (\S+) at δ=([^\s,)]+)(?:, by (plain composition|zCDP conversion))?/u;

/**
 * Checks the epsilon a fresh zCDP release states against its receipt: the stated figure must be
 * the one the kernel shows for the best valid bound the receipts support (docs/methods.md §22),
 * and plain composition may be claimed only when every release from seq 1 on is shown and pure.
 * A claim of plain composition the notebook cannot vouch for (seqs not shown) is a note.
 */
function statementFinding(rel: FoundRelease, pureAt: ReadonlyMap<number, Rational | null>, where: (r: FoundRelease) => string): Finding | null {
  const r = rel.meta.receipt;
  if (r.unit !== "rho") return null;
  const m = STATEMENT.exec(shownText(rel.out));
  if (m === null) return null;
  const [, statedEps, , , statedBy] = m;
  const total = exact(r.total);
  const delta = exact(r.delta);
  if (total === null || delta === null) return null; // reported elsewhere as malformed
  let conv: Rational;
  try {
    conv = total.isZero() ? Rational.ZERO : epsilonFromRho(total, delta);
  } catch {
    return null;
  }
  const pure = pureAt.get(r.seq);
  // As the kernel shows it (runtime/api/text.ts q): 6 significant digits of the exact value.
  const show = (x: Rational): string => formatDecimal(x.toString(), 6);
  const bad = (why: string): Finding => ({
    cell: rel.cell,
    kind: "epsilon-statement",
    message: `${where(rel)}: states "${m[0]}" for receipt seq ${r.seq}, but ${why}`,
  });
  if (statedBy === "plain composition") {
    if (pure === undefined) {
      return { cell: rel.cell, kind: "epsilon-statement-unverified", message: `${where(rel)}: states plain composition for receipt seq ${r.seq}, which needs every release from seq 1 on; the notebook does not show them all` };
    }
    if (pure === null) return bad(`a release up to it is not pure epsilon-DP, so plain composition does not apply (the zCDP conversion gives ε ${show(conv)})`);
    if (statedEps !== show(pure) || pure.gt(conv)) return bad(`plain composition of its receipts gives ε ${show(pure)}${pure.gt(conv) ? `, above the conversion's ${show(conv)}` : ""}`);
    return null;
  }
  // Conversion (stated, or an older statement without a route): the figure must be the conversion,
  // and must not be stated when plain composition is smaller and known.
  if (statedEps !== show(conv)) return bad(`the zCDP conversion of its total ρ ${r.total} at δ ${r.delta} gives ε ${show(conv)}`);
  if (statedBy !== undefined && pure !== undefined && pure !== null && pure.le(conv)) {
    return bad(`every release up to it is pure, so plain composition gives the smaller ε ${show(pure)}`);
  }
  return null;
}
