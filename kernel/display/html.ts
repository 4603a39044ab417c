/**
 * Small HTML building blocks for the notebook views: escaping, a budget bar, tables, badges.
 * Inline styles only (no scripts, no external resources), so outputs render the same after a
 * notebook is reopened untrusted, and colours hold up on light and dark themes.
 */
import { Rational } from "../../runtime/core/index.js";
import { q } from "../../runtime/api/text.js";

export function esc(s: string): string {
  return s.replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;").replace(/"/g, "&quot;").replace(/'/g, "&#39;");
}

/** The outer box of every hush view. */
export function box(inner: string, kind: string): string {
  return `<div class="hush-${kind}" style="font-family:system-ui,-apple-system,'Segoe UI',sans-serif;font-size:13px;line-height:1.45;max-width:760px">${inner}</div>`;
}

export const MUTED = "opacity:0.75";

export function badge(text: string, colour: string): string {
  return `<span style="display:inline-block;margin-left:6px;padding:0 6px;border-radius:8px;font-size:11px;border:1px solid ${colour};color:${colour}">${esc(text)}</span>`;
}

/** A table; cells are already-escaped HTML. `numeric` marks columns to right-align. */
export function table(head: string[], rows: string[][], numeric: ReadonlySet<number> = new Set()): string {
  const th = head.map((h, i) => `<th style="text-align:${numeric.has(i) ? "right" : "left"};padding:2px 10px 2px 0;border-bottom:1px solid currentColor">${h}</th>`).join("");
  const tr = rows
    .map((r) => `<tr>${r.map((c, i) => `<td style="text-align:${numeric.has(i) ? "right" : "left"};padding:1px 10px 1px 0;white-space:nowrap">${c}</td>`).join("")}</tr>`)
    .join("");
  return `<table style="border-collapse:collapse;margin:4px 0">${`<thead><tr>${th}</tr></thead>`}<tbody>${tr}</tbody></table>`;
}

function ratio(part: string, whole: string): number {
  try {
    const w = Rational.parse(whole);
    if (w.sign() <= 0) return 0;
    const r = Rational.parse(part).div(w).toNumber();
    return Math.max(0, Math.min(1, r));
  } catch {
    return 0;
  }
}

/**
 * A bar of the cap: spent in earlier sessions (grey), spent in this session (amber), remaining
 * (empty). Amounts are exact strings in the accounting unit.
 */
export function budgetBar(a: { total: string; sessionSpent: string; cap: string; symbol: string }): string {
  const total = ratio(a.total, a.cap);
  const session = Math.min(total, ratio(a.sessionSpent, a.cap));
  const before = total - session;
  const pct = (x: number): string => `${(x * 100).toFixed(2)}%`;
  let remaining = "0";
  try {
    const r = Rational.parse(a.cap).sub(Rational.parse(a.total));
    remaining = r.sign() < 0 ? "0" : r.toString();
  } catch {
    remaining = "?";
  }
  const bar =
    `<div title="spent ${esc(q(a.total))} of ${esc(q(a.cap))}" style="display:inline-block;vertical-align:middle;width:200px;height:10px;border:1px solid #888;border-radius:3px;overflow:hidden;background:transparent">` +
    `<div style="float:left;height:100%;width:${pct(before)};background:#9aa0a6"></div>` +
    `<div style="float:left;height:100%;width:${pct(session)};background:#e8a33d"></div></div>`;
  const words = `<span style="${MUTED};margin-left:8px">${esc(a.symbol)} ${esc(q(a.total))} of ${esc(q(a.cap))} used (this session ${esc(q(a.sessionSpent))}) · ${esc(remaining === "?" ? "?" : q(remaining))} left</span>`;
  return `<div style="margin:4px 0">${bar}${words}</div>`;
}

/** A list of notes in muted small print. */
export function notesList(notes: readonly string[]): string {
  if (notes.length === 0) return "";
  return `<ul style="margin:4px 0 0 0;padding-left:18px;font-size:12px;${MUTED}">${notes.map((n) => `<li>${esc(n)}</li>`).join("")}</ul>`;
}
