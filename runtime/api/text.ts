/**
 * Plain-text wording shared by the release objects' toString() and the kernel's text/plain views.
 * Every released number goes through protocol/format.ts, the same functions the notebook audit uses
 * to check that what a notebook shows is what the curator signed.
 */
import { type FigureParts, figureParts, formatAmount, formatDecimal, formatWithError } from "../protocol/format.js";
import type { GroupKey, Measure, QueryPlan, Release, ReleaseRow, SpendSummary } from "../protocol/messages.js";
import { conditionText } from "./expr.js";

/**
 * Node's hook for console.log and util.inspect (a registered symbol, so no import of node:util):
 * every cell API object answers it with a readable summary instead of its internal fields.
 */
export const INSPECT = Symbol.for("nodejs.util.inspect.custom");

/** "ε" or "ρ" for a receipt or preview unit. */
export function unitSymbol(unit: "epsilon" | "rho"): string {
  return unit === "rho" ? "ρ" : "ε";
}

/** A privacy quantity (exact decimal or fraction string) for display, 6 significant digits. */
export function q(s: string): string {
  return formatDecimal(s, 6);
}

/**
 * A released value with its error bar, rounded to what the error bar supports and with thousands
 * separators (docs/methods.md §23), as the audit expects to find it: "177,760 ± 480".
 */
export function shownValue(row: Pick<ReleaseRow, "value" | "low" | "high">): string {
  return formatWithError(row.value, row.low, row.high);
}

/** The value and the error-bar part of shownValue, apart (for the HTML view's hooks). */
export function shownParts(row: Pick<ReleaseRow, "value" | "low" | "high">): FigureParts {
  return figureParts(row.value, row.low, row.high);
}

/** What the statistic of a measure is called in a sentence ("count", "mean", "median"). */
function statNoun(m: Measure): string {
  switch (m.kind) {
    case "count":
    case "histogram":
    case "crosstab":
      return "count";
    case "sum":
    case "mean":
    case "variance":
      return m.kind;
    case "std":
      return "standard deviation";
    case "quantile":
      return m.p.length === 1 ? quantileName(m.p[0]) : "quantile";
    case "describe":
      return "statistic";
    case "regression":
      return "coefficient";
    case "correlation":
      return "correlation";
    case "clamped":
      return "share";
  }
}

/**
 * One plain sentence on what the error bars mean, with the exact statement left to the release's
 * intervalMethod (shown one click away in HTML). A release without any interval (a quantile whose
 * guarantee is on rank) says so instead, and carries no noise-only notice.
 */
export function methodLine(r: Pick<Release, "plan" | "rows" | "confidence" | "groupColumns">): string {
  const noun = statNoun(r.plan.measure);
  const withBar = r.rows.filter((x) => x.value !== null && x.low !== null && x.high !== null);
  if (withBar.length === 0) {
    return r.plan.measure.kind === "quantile" ? `no interval on the value: the ${noun}'s guarantee is on its rank (see the notes)` : "no error bar";
  }
  const pct = percent(r.confidence);
  const scalar = r.rows.length === 1 && r.groupColumns.length === 0;
  const bars = withBar.map((x) => shownParts(x).bar ?? "");
  const each = scalar ? "" : "for each value, ";
  if (bars.every((b) => b.startsWith("±"))) {
    // Discrete noise: the stated half-width has a tail at most 1 - confidence (docs/methods.md §4, §13),
    // and the printed one is never narrower (§23).
    const h = scalar ? bars[0].replace("± ", "±") : "the ± shown";
    return `${each}at least ${pct} of such answers fall within ${h} of the true ${noun} (privacy noise only)`;
  }
  return `${each}at least ${pct} of such intervals contain the true ${noun} (privacy noise only)`;
}

/** The release's notes that the method line does not already say. */
export function foldedNotes(notes: readonly string[]): string[] {
  return notes.filter((n) => !n.startsWith("Error bars are noise-only"));
}

/** "2 notes: .notes" for text views; empty with no notes. */
export function notesHint(notes: readonly string[]): string {
  const n = foldedNotes(notes).length;
  return n === 0 ? "" : `${plural(n, "note")}: .notes`;
}

/** "95%" for 0.95; "99.5%" for 0.995. */
export function percent(confidence: number): string {
  return `${Number((confidence * 100).toPrecision(6))}%`;
}

export function measureText(m: Measure): string {
  switch (m.kind) {
    case "count":
      return m.kind;
    case "describe":
      return m.clamped ? "describe with clamped shares" : "describe";
    case "clamped":
      return `clamped shares of ${m.columns.join(", ")}`;
    case "sum":
    case "mean":
    case "variance":
    case "std":
      return `${m.kind} ${m.column}`;
    case "quantile":
      return m.p.length === 1 ? `${quantileName(m.p[0])} ${m.column}` : `quantiles ${m.p.map(quantileName).join(", ")} of ${m.column}`;
    case "histogram":
      return `histogram of ${m.column} (${m.bins} bins)`;
    case "crosstab":
      return `crosstab ${m.rows} × ${m.cols}`;
    case "regression":
      return `regression of ${m.response} on ${m.predictors.join(", ")}`;
    case "correlation":
      return `correlation of ${m.columns.join(", ")}`;
  }
}

/** "median" for 0.5, else "p90", "p2.5". */
export function quantileName(p: number): string {
  return p === 0.5 ? "median" : `p${Number((p * 100).toPrecision(6))}`;
}

export function groupText(keys: readonly GroupKey[] | undefined): string {
  if (!keys || keys.length === 0) return "";
  return ` by ${keys.map((k) => ("bins" in k ? `${k.column} (${k.bins} bins)` : k.column)).join(", ")}`;
}

/** "mean wait_minutes by district where age ≥ 65". */
export function planText(plan: Pick<QueryPlan, "measure" | "groupBy" | "where">): string {
  const where = plan.where ? ` where ${conditionText(plan.where)}` : "";
  return `${measureText(plan.measure)}${groupText(plan.groupBy)}${where}`;
}

/** Label of one released row; `withStat` adds the statistic (for releases mixing several). */
export function rowLabel(row: ReleaseRow, withStat: boolean): string {
  const keys = row.key.filter((k): k is string => k !== null);
  const stat = row.column === null ? row.stat : `${row.stat} ${row.column}`;
  if (!withStat) return keys.length ? keys.join(" · ") : stat;
  return keys.length ? `${stat} · ${keys.join(" · ")}` : stat;
}

/** True when all rows are the same statistic of the same column (so labels need only the keys). */
export function uniformStat(rows: readonly ReleaseRow[]): boolean {
  return rows.every((r) => r.stat === rows[0]?.stat && r.column === rows[0]?.column);
}

/** The analyst's total and cap in the dataset's accounting unit (ρ for zCDP datasets, else ε). */
export function spendAmounts(s: SpendSummary): { total: string; cap: string; symbol: string; unit: "epsilon" | "rho" } {
  if (s.mode === "zcdp" && s.spentRho !== undefined && s.capRho !== undefined) return { total: s.spentRho, cap: s.capRho, symbol: "ρ", unit: "rho" };
  return { total: s.spentEpsilon, cap: s.capEpsilon, symbol: "ε", unit: "epsilon" };
}

/**
 * The cost statement of a release, "cost ε=0.1" (6 significant digits, in the receipt's unit), or
 * "replayed, no new cost". Every view states it; the audit compares it with the signed cost.
 */
export function costStatement(r: Pick<Release, "cost" | "replay" | "receipt">): string {
  return r.replay ? "replayed, no new cost" : `cost ${unitSymbol(r.receipt.unit)}=${q(r.cost)}`;
}

/**
 * "ε 1 of 3 at δ=1e-6, by plain composition": a zCDP account's best valid epsilon and how it was
 * obtained (docs/methods.md §22). The audit reads this statement back (cli/audit/checks.ts).
 */
export function epsilonAtDelta(s: SpendSummary): string {
  const by = s.epsilonBy !== undefined ? `, by ${s.epsilonBy}` : "";
  return `ε ${q(s.spentEpsilon)} of ${q(s.capEpsilon)} at δ=${q(s.delta ?? "0")}${by}`;
}

/** "ε 0.5 of 3 used · 2.5 remaining · 7 releases" (zCDP: in ρ with the ε equivalent). */
export function spendText(s: SpendSummary): string {
  if (s.mode === "zcdp" && s.spentRho !== undefined && s.capRho !== undefined) {
    const rem = s.remainingRho !== undefined ? ` · ${formatAmount(s.remainingRho, "down")} remaining` : "";
    const eps = s.delta !== undefined ? ` (${epsilonAtDelta(s)})` : "";
    return `ρ ${q(s.spentRho)} of ${q(s.capRho)} used${rem}${eps} · ${plural(s.releases, "release")}`;
  }
  // What remains is rounded down: it never reads as more than there is (docs/methods.md §23).
  return `ε ${q(s.spentEpsilon)} of ${q(s.capEpsilon)} used · ${formatAmount(s.remainingEpsilon, "down")} remaining · ${plural(s.releases, "release")}`;
}

/**
 * Remaining budget in words, for refusal messages: "ε 0.2 of 3 remains on visits (population
 * clinic-patients) for rowan". The amount is the population's: every dataset over the same people
 * draws on it, so the population is named when its name differs from the dataset's.
 */
export function remainingText(s: SpendSummary): string {
  const on = s.population === s.dataset ? s.dataset : `${s.dataset} (population ${s.population})`;
  // What is left is rounded down, so it never reads as more than there is.
  if (s.mode === "zcdp" && s.remainingRho !== undefined && s.capRho !== undefined) {
    return `ρ ${formatAmount(s.remainingRho, "down")} of ${formatAmount(s.capRho, "down")} remains on ${on} for ${s.analyst}`;
  }
  return `ε ${formatAmount(s.remainingEpsilon, "down")} of ${formatAmount(s.capEpsilon, "down")} remains on ${on} for ${s.analyst}`;
}

export function plural(n: number, word: string): string {
  return `${n} ${word}${n === 1 ? "" : "s"}`;
}

/** Pads labels to one width so values line up in a monospace view. */
export function aligned(pairs: readonly [string, string][], indent = "  "): string[] {
  const width = Math.min(40, Math.max(0, ...pairs.map(([l]) => l.length)));
  return pairs.map(([l, v]) => `${indent}${l.padEnd(width)}  ${v}`);
}
