/**
 * The body of a regression or correlation release in the notebook (docs/methods.md §18, §19): a
 * table of the terms (or column pairs) with their estimates and error bars, then R² and the rows
 * used, and a plain message when the noisy statistics left no estimate. Every figure is written by
 * the shared formatter (shownParts, docs/methods.md §23), each after its signed key, in the signed order, so the
 * notebook audit reads exactly what the curator signed. Uses only the kernel's HTML vocabulary
 * (div, b, table; the inline styles of html.ts).
 *
 * Hooked into views.ts answerHtml by one call: `modelBody(a)` returns null for other releases.
 */
import type { Answer } from "../../runtime/api/answer.js";
import { percent, shownParts } from "../../runtime/api/text.js";
import type { ReleaseRow } from "../../runtime/protocol/messages.js";
import { MUTED, esc, table } from "./html.js";

/**
 * One figure as the compact view writes it (docs/methods.md §23), with the browser test's hooks:
 * `hush-value` on the value, `hush-errorbar` on its bar; "unavailable" when there is no estimate.
 */
function figure(row: ReleaseRow): string {
  if (row.value === null) return "unavailable";
  const f = shownParts(row);
  return `<span class="hush-value">${esc(f.value)}</span>${f.bar === null ? " (no error bar, see notes)" : ` <span class="hush-errorbar">${esc(f.bar)}</span>`}`;
}

/** The message shown when the released statistics leave no estimate (the spend is already done). */
export function unavailableMessage(kind: "regression" | "correlation"): string {
  return kind === "regression"
    ? "No coefficients: the noisy cross-product matrix is not positive definite, so the noisy normal equations have no least-squares solution. The privacy spend for this release is already done. Ask again with a larger ε (or ρ), or with fewer predictors or category levels."
    : "Some correlations are unavailable: a noisy variance or the noisy row count is not positive. The privacy spend for this release is already done. Ask again with a larger ε (or ρ), or with fewer columns.";
}

/** A text line to add under the text/plain view when estimates are unavailable, or null. */
export function modelTextNote(a: Answer): string | null {
  const kind = a.release.plan.measure.kind;
  if (kind !== "regression" && kind !== "correlation") return null;
  const main = a.release.rows.filter((r) => r.stat === (kind === "regression" ? "coefficient" : "correlation"));
  return main.some((r) => r.value === null) ? unavailableMessage(kind) : null;
}

/** The HTML body of a regression or correlation release; null for every other release. */
export function modelBody(a: Answer): string | null {
  const r = a.release;
  const kind = r.plan.measure.kind;
  if (kind !== "regression" && kind !== "correlation") return null;
  const conf = esc(percent(r.confidence));
  const note = modelTextNote(a);
  const warn = note === null ? "" : `<div style="border-left:3px solid #c62828;padding:2px 8px;margin:4px 0">${esc(note)}</div>`;
  const main = kind === "regression" ? "coefficient" : "correlation";
  const head = kind === "regression" ? ["term", `coefficient (${conf})`] : ["column", "with", `correlation (${conf})`];
  const rows = r.rows.filter((x) => x.stat === main).map((x) => [...x.key.map((k) => esc(k ?? "")), figure(x)]);
  const extras = r.rows
    .filter((x) => x.stat !== main)
    .map((x) => {
      const what = x.stat === "r2" ? "R squared" : x.stat === "count" ? "rows used (noisy count)" : x.stat;
      return `<div>${x.key.map((k) => esc(k ?? "")).join(" ")} ${esc(what)}: <b>${figure(x)}</b></div>`;
    })
    .join("");
  const n = head.length;
  return warn + table(head, rows, new Set([n - 1])) + extras + `<div style="${MUTED}">${esc(r.intervalMethod)}</div>`;
}
