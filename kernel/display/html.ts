/**
 * Small HTML building blocks for the notebook views: escaping, a budget bar, tables, badges.
 * Inline styles only (no scripts, no external resources), so outputs render the same after a
 * notebook is reopened untrusted, and colours hold up on light and dark themes.
 */
import { Rational } from "../../runtime/core/index.js";
import { q } from "../../runtime/api/text.js";
import { formatAmount } from "../../runtime/protocol/format.js";
import { MUTED, esc } from "./markup.js";

export { type BoxKind, MUTED, box, esc } from "./markup.js";

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

/** part / whole in [0, 1] for drawing; 0 for anything unreadable. */
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

/** The three parts of a cap, exact strings in the accounting unit: spent before, spent recently, left. */
export interface CapParts {
  before: string;
  recent: string;
  left: string;
  /** Shares of the cap, for drawing (binary64 is fine for pixels, never for amounts). */
  shares: { before: number; recent: number };
}

/** Splits a cap into spent-before, spent-recently and left; `recent` is clamped into the total. */
export function capParts(total: string, recent: string, cap: string): CapParts {
  try {
    const t = Rational.parse(total);
    const c = Rational.parse(cap);
    let r = Rational.parse(recent);
    if (r.gt(t)) r = t;
    if (r.sign() < 0) r = Rational.ZERO;
    const left = c.sub(t);
    return {
      before: t.sub(r).toString(),
      recent: r.toString(),
      left: left.sign() < 0 ? "0" : left.toString(),
      shares: { before: ratio(t.sub(r).toString(), cap), recent: ratio(r.toString(), cap) },
    };
  } catch {
    return { before: "?", recent: "?", left: "?", shares: { before: 0, recent: 0 } };
  }
}

const BEFORE_COLOUR = "#9aa0a6";
const RECENT_COLOUR = "#e8a33d";

function swatch(colour: string | null): string {
  return `<span style="display:inline-block;vertical-align:middle;width:10px;height:10px;margin:0 4px 0 8px;border:1px solid #888;background:${colour ?? "transparent"}"></span>`;
}

const shown = (x: string): string => (x === "?" ? "?" : q(x));

/** What is left of a cap, rounded down so it never reads as more than there is (docs/methods.md §23). */
export function leftText(x: string): string {
  return x === "?" ? "?" : formatAmount(x, "down");
}

/**
 * A labelled bar of the cap: spent before (grey), spent recently (amber; `recentLabel` says when:
 * "this cell", "this session"), left (empty), each with its amount, then the total against the cap.
 */
export function budgetBar(a: { total: string; recent: string; cap: string; symbol: string; recentLabel: string; beforeLabel: string }): string {
  const p = capParts(a.total, a.recent, a.cap);
  const pct = (x: number): string => `${(x * 100).toFixed(2)}%`;
  const bar =
    `<div title="${esc(`${a.symbol} ${shown(a.total)} of ${shown(a.cap)} used`)}" style="display:inline-block;vertical-align:middle;width:200px;height:10px;border:1px solid #888;border-radius:3px;overflow:hidden;background:transparent">` +
    `<div style="float:left;height:100%;width:${pct(p.shares.before)};background:${BEFORE_COLOUR}"></div>` +
    `<div style="float:left;height:100%;width:${pct(p.shares.recent)};background:${RECENT_COLOUR}"></div></div>`;
  const legend =
    `${swatch(BEFORE_COLOUR)}<span>${esc(a.beforeLabel)} ${esc(shown(p.before))}</span>` +
    `${swatch(RECENT_COLOUR)}<span>${esc(a.recentLabel)} ${esc(shown(p.recent))}</span>` +
    `${swatch(null)}<span>left ${esc(leftText(p.left))}</span>` +
    `<span style="${MUTED};margin-left:8px">${esc(`${a.symbol} ${shown(a.total)} of ${shown(a.cap)} used`)}</span>`;
  return `<div style="margin:4px 0">${bar}${legend}</div>`;
}

/** The same bar in text: "#" spent before, "+" spent recently, "." left; `width` characters. */
export function textBar(total: string, recent: string, cap: string, width = 24): string {
  const p = capParts(total, recent, cap);
  const before = Math.round(p.shares.before * width);
  // Any spend in the cell shows as at least one mark.
  const recentMarks = Math.min(width - before, p.shares.recent > 0 ? Math.max(1, Math.round(p.shares.recent * width)) : 0);
  return `[${"#".repeat(before)}${"+".repeat(recentMarks)}${".".repeat(width - before - recentMarks)}]`;
}

/** A list of notes in muted small print. */
export function notesList(notes: readonly string[]): string {
  if (notes.length === 0) return "";
  return `<ul style="margin:4px 0 0 0;padding-left:18px;font-size:12px;${MUTED}">${notes.map((n) => `<li>${esc(n)}</li>`).join("")}</ul>`;
}
