/**
 * Plain-text wording shared by the release objects' toString() and the kernel's text/plain views.
 * Every released number goes through protocol/format.ts, the same functions the notebook audit uses
 * to check that what a notebook shows is what the curator signed.
 */
import { formatDecimal, formatWithError } from "../protocol/format.js";
import type { GroupKey, Measure, QueryPlan, ReleaseRow, SpendSummary } from "../protocol/messages.js";
import { conditionText } from "./expr.js";

/** "ε" or "ρ" for a receipt or preview unit. */
export function unitSymbol(unit: "epsilon" | "rho"): string {
  return unit === "rho" ? "ρ" : "ε";
}

/** A privacy quantity (exact decimal or fraction string) for display, 6 significant digits. */
export function q(s: string): string {
  return formatDecimal(s, 6);
}

/** A released value with its error bar, as the audit expects to find it. */
export function shownValue(row: Pick<ReleaseRow, "value" | "low" | "high">): string {
  return formatWithError(row.value, row.low, row.high);
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
 * The cost part of a release line: "cost ε=0.1 · session 0.3 · total 0.5 / 3". The total is the
 * analyst's current one (a replayed release carries its original receipt, but the spend is now).
 */
export function costText(a: { cost: string; replay: boolean; sessionSpent: string; spend: SpendSummary }): string {
  const amt = spendAmounts(a.spend);
  const cost = a.replay ? `replayed, no new cost` : `cost ${amt.symbol}=${q(a.cost)}`;
  let s = `${cost} · session ${q(a.sessionSpent)} · total ${q(amt.total)} / ${q(amt.cap)}`;
  if (amt.unit === "rho" && a.spend.delta !== undefined) s += ` (ε ${q(a.spend.spentEpsilon)} of ${q(a.spend.capEpsilon)} at δ=${q(a.spend.delta)})`;
  return s;
}

/** "ε 0.5 of 3 used · 2.5 remaining · 7 releases" (zCDP: in ρ with the ε equivalent). */
export function spendText(s: SpendSummary): string {
  if (s.mode === "zcdp" && s.spentRho !== undefined && s.capRho !== undefined) {
    const rem = s.remainingRho !== undefined ? ` · ${q(s.remainingRho)} remaining` : "";
    const eps = s.delta !== undefined ? ` (ε ${q(s.spentEpsilon)} of ${q(s.capEpsilon)} at δ=${q(s.delta)})` : "";
    return `ρ ${q(s.spentRho)} of ${q(s.capRho)} used${rem}${eps} · ${plural(s.releases, "release")}`;
  }
  return `ε ${q(s.spentEpsilon)} of ${q(s.capEpsilon)} used · ${q(s.remainingEpsilon)} remaining · ${plural(s.releases, "release")}`;
}

/**
 * Remaining budget in words, for refusal messages: "ε 0.2 of 3 remains on visits (population
 * clinic-patients) for rowan". The amount is the population's: every dataset over the same people
 * draws on it, so the population is named when its name differs from the dataset's.
 */
export function remainingText(s: SpendSummary): string {
  const on = s.population === s.dataset ? s.dataset : `${s.dataset} (population ${s.population})`;
  if (s.mode === "zcdp" && s.remainingRho !== undefined && s.capRho !== undefined) {
    return `ρ ${q(s.remainingRho)} of ${q(s.capRho)} remains on ${on} for ${s.analyst}`;
  }
  return `ε ${q(s.remainingEpsilon)} of ${q(s.capEpsilon)} remains on ${on} for ${s.analyst}`;
}

export function plural(n: number, word: string): string {
  return `${n} ${word}${n === 1 ? "" : "s"}`;
}

/** Pads labels to one width so values line up in a monospace view. */
export function aligned(pairs: readonly [string, string][], indent = "  "): string[] {
  const width = Math.min(40, Math.max(0, ...pairs.map(([l]) => l.length)));
  return pairs.map(([l, v]) => `${indent}${l.padEnd(width)}  ${v}`);
}
