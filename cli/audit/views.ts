/**
 * What a release output shows, against what its receipt signed. Each human-readable view
 * (text/plain, text/html, text/markdown) must show exactly the signed figures: every signed row's
 * figure, after its group keys, in the signed order, and no figure with an error bar that was not
 * signed (an extra made-up row, or an edited number beside a hidden original). Structured bundles
 * (JSON rows, the Vega-Lite chart's data) must carry exactly the signed numbers.
 */
import { digestOf } from "../../runtime/protocol/canonical.js";
import { FSI, PDI, planWords } from "../../runtime/protocol/words.js";
import { blankWords } from "./cover.js";
import { formatDecimal, formatWithError } from "../../runtime/protocol/format.js";
import type { Receipt } from "../../runtime/protocol/messages.js";
import { figureAt, figureText, figuresIn, isFigure, oddCharacters, oddCharactersText, quoted, rightToLeftBesideFigure } from "./figure-text.js";
import type { Finding } from "./findings.js";
import { htmlText } from "./html-text.js";
import type { FoundRelease } from "./notebook.js";

type Row = Receipt["result"][number];

export function rowLabel(row: Row): string {
  const [key, stat, column] = row;
  const what = column === null ? stat : `${stat} of ${column}`;
  return quoted(key.length === 0 ? what : `${what} for ${key.map((k) => (k === null ? "(missing)" : k)).join(" / ")}`, 120);
}

type Where = (rel: FoundRelease) => string;

/** Each signed row's figure, or null when its value is not a decimal (reported as malformed). */
function signedFigures(rel: FoundRelease, r: Receipt, findings: Finding[], at: Where): { row: Row; figure: string }[] {
  const out: { row: Row; figure: string }[] = [];
  for (const row of r.result) {
    const [, , , value, low, high] = row;
    if (value === null) continue;
    try {
      out.push({ row, figure: formatWithError(value, low, high) });
    } catch {
      findings.push({ cell: rel.cell, kind: "malformed", message: `${at(rel)}: receipt seq ${r.seq} holds a value that is not a decimal (${rowLabel(row)})` });
    }
  }
  return out;
}

/** The text around position `at` of `text`, on one line, for a finding. */
function around(text: string, at: number, length: number): string {
  return quoted(text.slice(Math.max(0, at - 8), at + length + 8).trim());
}

/** Checks one human-readable view (folded text, figure-text.ts); returns the first problem, or null. */
function viewProblem(text: string, signed: { row: Row; figure: string }[]): string | null {
  // Every figure with an error bar is a signed one, once, in order, standing on its own.
  const expected = signed.map((s) => s.figure).filter(isFigure);
  // Group keys are read as labels, not as parts of a figure: in text/plain a numeric key followed
  // by a bin key "[90, 100]" would otherwise read as the figure "2024 [90, 100]". Only bracketed
  // keys (bins) can complete such a figure, and only they are set aside, so a key like "5"
  // cannot eat the digits of a figure.
  const keys = [...new Set(signed.flatMap((x) => x.row[0]).filter((k): k is string => k !== null && k.includes("[")))];
  const unlabelled = keys.reduce((t, k) => t.split(figureText(k).trim()).join(" ¦ "), text);
  const seen = figuresIn(unlabelled);
  const joined = seen.find((f) => !f.alone);
  if (joined !== undefined) {
    return `shows "${around(unlabelled, joined.index, joined.text.length)}", where the figure "${joined.text}" runs into the characters beside it, so a reader may see another number`;
  }
  const unsigned = seen.find((f) => !expected.includes(f.text));
  if (unsigned !== undefined) return `shows "${unsigned.text}", a figure its receipt did not sign`;
  if (seen.length !== expected.length || seen.some((f, i) => f.text !== expected[i])) {
    return `shows the signed figures ${seen.length === expected.length ? "out of order" : `${seen.length} times instead of ${expected.length}`}`;
  }
  // In signed order: each row's keys, then its figure standing on its own. Swapped labels or
  // values break the order.
  let cursor = 0;
  for (const { row, figure } of signed) {
    for (const k of row[0]) {
      if (k === null) continue; // the kernel leaves a missing key out of the label
      const shownKey = figureText(k).trim();
      const at = text.indexOf(shownKey, cursor);
      if (at < 0) return `does not show the group "${quoted(k)}" of the signed ${rowLabel(row)} "${figure}" in the signed order`;
      cursor = at + shownKey.length;
    }
    const at = figureAt(text, figure, cursor);
    if (at < 0) return `does not show the signed ${rowLabel(row)} "${figure}"${cursor > 0 ? " where it belongs" : ""}`;
    cursor = at + figure.length;
  }
  return null;
}

/**
 * The cost a release line states ("cost ε=0.1", runtime/api/text.ts costStatement, 6 significant
 * digits) must be the signed cost in the signed unit. The running total beside it is the
 * analyst's total when the cell ran (a replay shows today's), so only the audit's own total counts.
 */
function costProblem(text: string, r: Receipt, replay: boolean): string | null {
  let want: string;
  try {
    want = `cost ${r.unit === "rho" ? "ρ" : "ε"}=${formatDecimal(r.cost, 6)}`;
  } catch {
    return null; // a cost that is not a number is reported by the chain checks
  }
  // Each statement in the kernel's form, with any letter for the unit ("cost є=0.01" with a
  // Cyrillic letter reads as ε), must be the signed one.
  for (const m of text.matchAll(/cost (\p{L})\s*=\s*([^\s·,;)]*)/gu)) {
    if (m[0] !== want) return `states "${quoted(m[0])}", but receipt seq ${r.seq} signed "${want}"`;
  }
  // The kernel states the cost of every new release in each view (runtime/api/text.ts costStatement),
  // so a view without the signed statement has had it removed or spelled otherwise ("cost: 0.01").
  if (!replay && !text.includes(want)) return `does not state the cost "${want}" that receipt seq ${r.seq} signed`;
  return null;
}

/** The data: URI of the output's own chart image, the only image its text/html may show. */
function chartUri(data: Record<string, unknown>): string | null {
  const svg = data["image/svg+xml"];
  const svgText = typeof svg === "string" ? svg : Array.isArray(svg) ? svg.map(String).join("") : null;
  return svgText === null ? null : `data:image/svg+xml;base64,${Buffer.from(svgText, "utf8").toString("base64")}`;
}

/**
 * The steward's words a release's views show, from the plan in the output's metadata: filter values
 * (declared category values), column and dataset names. Only when that plan is the one the receipt
 * signed (its canonical digest is `receipt.digest`); a plan that is not is reported. Strings with
 * no letter (numbers written as text) are left out, so nothing a figure is made of is set aside.
 */
export function signedPlanWords(rel: FoundRelease, r: Receipt, findings: Finding[], at: Where): string[] {
  const plan = rel.meta.plan;
  if (plan === undefined) return [];
  let signedPlan = false;
  try {
    signedPlan = digestOf(plan) === r.digest;
  } catch {
    signedPlan = false;
  }
  if (!signedPlan) {
    findings.push({ cell: rel.cell, kind: "shown-value", message: `${at(rel)}: the plan in its hush metadata is not the one receipt seq ${r.seq} signed (its digest differs)` });
    return [];
  }
  return planWords(plan);
}

/**
 * The text with every signed group key, and the signed plan's words, taken out: they are the data's
 * and the steward's own words and may hold any character.
 */
function withoutKeys(text: string, r: Receipt, words: readonly string[]): string {
  const keys = [...new Set([...r.result.flatMap((row) => row[0]).filter((k): k is string => k !== null && k !== ""), ...words])];
  // A word the kernel set in an isolate (protocol/words.ts) goes with its two invisible marks.
  return blankWords(text, keys.flatMap((k) => [`${FSI}${k}${PDI}`, k, k.normalize("NFKC")]));
}

function sameNumber(shown: unknown, signed: string | null): boolean {
  return signed === null ? shown === null || shown === undefined : typeof shown === "number" && shown === Number(signed);
}

/** The Vega-Lite chart's inline data must be the signed rows, point for point. */
function chartProblem(spec: unknown, signed: { row: Row; figure: string }[]): string | null {
  const points = signed.filter((s) => s.row[3] !== null);
  let problem: string | null = null;
  const visit = (node: unknown, path: string): void => {
    if (problem !== null || node === null || typeof node !== "object") return;
    if (Array.isArray(node)) return node.forEach((x, i) => visit(x, `${path}[${i}]`));
    for (const [k, v] of Object.entries(node as Record<string, unknown>)) {
      if (k === "datasets") problem = `carries extra datasets (${path}.datasets)`;
      else if (k === "data" && path !== "") {
        problem = `carries data other than the signed rows (${path}.data)`;
      } else if (k === "data") {
        const values = (v as { values?: unknown } | null)?.values;
        if (!Array.isArray(values) || values.length !== points.length) {
          problem = `has ${Array.isArray(values) ? values.length : "no"} data points for ${points.length} signed values`;
        } else {
          values.forEach((p: unknown, i) => {
            const o = (p ?? {}) as Record<string, unknown>;
            const [key, , , value, low, high] = points[i].row;
            const [first, ...rest] = key.map((x) => x ?? "(missing)");
            const ok =
              sameNumber(o.value, value) &&
              sameNumber(o.low, low) &&
              sameNumber(o.high, high) &&
              o.label === (first ?? "") &&
              o.series === rest.join(" · ") &&
              (o.shown === undefined || o.shown === points[i].figure);
            if (!ok && problem === null) problem = `data point ${i + 1} is not the signed ${rowLabel(points[i].row)} "${points[i].figure}"`;
          });
        }
      } else visit(v, `${path}.${k}`);
    }
  };
  visit(spec, "");
  return problem;
}

// Views the audit reads, plus the chart image the kernel renders from the checked Vega-Lite data
// (the image itself is not checked: README, "Auditing a notebook").
const CHECKED_MIMES = /^(text\/plain|text\/html|text\/markdown|image\/svg\+xml|application\/json|application\/vnd\.vegalite\.v\d+\+json)$/;

/** Does every view of the output show the signed figures and only those? */
export function checkShown(rel: FoundRelease, r: Receipt, findings: Finding[], at: Where): void {
  const data = rel.out.data !== null && typeof rel.out.data === "object" ? rel.out.data : {};
  const signed = signedFigures(rel, r, findings, at);
  const words = signedPlanWords(rel, r, findings, at);
  const views: [string, string][] = [];
  for (const mime of ["text/plain", "text/html", "text/markdown"]) {
    const v = data[mime];
    if (typeof v !== "string" && !Array.isArray(v)) continue;
    const raw = Array.isArray(v) ? v.map(String).join("") : (v as string);
    let decoded = raw;
    if (mime === "text/html") {
      const html = htmlText(raw, chartUri(data));
      decoded = html.text;
      if (html.problems.length > 0) {
        const more = html.problems.length > 3 ? ` and ${html.problems.length - 3} more` : "";
        findings.push({
          cell: rel.cell,
          kind: "shown-value",
          message: `${at(rel)}: text/html uses ${html.problems.slice(0, 3).join(", ")}${more}, which the kernel does not write and which can hide text or draw it otherwise than the audit reads it (receipt seq ${r.seq})`,
        });
      }
    }
    if (mime === "text/markdown" && /[<&]/.test(raw)) {
      // A frontend renders markdown to HTML; markup or character references in it could show
      // another text than the audit reads, and the kernel writes no markdown view at all.
      findings.push({ cell: rel.cell, kind: "shown-value", message: `${at(rel)}: text/markdown holds HTML markup or character references, which the kernel does not write and the audit does not read as drawn (receipt seq ${r.seq})` });
    }
    // A table cell is a paragraph of its own in HTML; in text a line is.
    const readable = withoutKeys(decoded, r, words);
    const odd = [...oddCharacters(readable), ...rightToLeftBesideFigure(readable, mime === "text/html" ? /[\n\t]/ : /\n/)];
    if (odd.length > 0) {
      findings.push({
        cell: rel.cell,
        kind: "shown-value",
        message: `${at(rel)}: ${mime} holds ${oddCharactersText(odd)}; the kernel writes figures in ASCII digits and plain spaces, so the audit cannot be sure a reader sees the signed figure (receipt seq ${r.seq})`,
      });
    }
    views.push([mime, figureText(decoded)]);
  }
  if (!views.some(([m]) => m === "text/plain")) {
    findings.push({ cell: rel.cell, kind: "shown-value", message: `${at(rel)}: release output (receipt seq ${r.seq}) has no text/plain view to check` });
  }
  for (const [mime, text] of views) {
    const problem = viewProblem(text, signed);
    if (problem !== null) {
      findings.push({ cell: rel.cell, kind: "shown-value", message: `${at(rel)}: ${mime} ${problem} (receipt seq ${r.seq}); what it shows differs from what the curator signed` });
    }
    const cost = costProblem(text, r, rel.meta.replay);
    if (cost !== null) findings.push({ cell: rel.cell, kind: "shown-value", message: `${at(rel)}: ${mime} ${cost}; the stated cost differs from the signed one` });
  }
  for (const [mime, v] of Object.entries(data)) {
    // A frontend shows the richest view it can render, so a view the audit cannot read (a
    // picture, LaTeX, script) could show any number. The kernel writes none but the chart's SVG.
    if (!CHECKED_MIMES.test(mime)) {
      findings.push({ cell: rel.cell, kind: "bundle-value", message: `${at(rel)}: the output carries a ${mime} view, which the kernel does not write and the audit cannot check (receipt seq ${r.seq})` });
      continue;
    }
    if (!mime.endsWith("json")) continue;
    if (v === null || typeof v !== "object") {
      findings.push({ cell: rel.cell, kind: "bundle-value", message: `${at(rel)}: the ${mime} view is not a JSON object (receipt seq ${r.seq})` });
      continue;
    }
    if (/^application\/vnd\.vegalite\.v\d+\+json$/.test(mime)) {
      const problem = chartProblem(v, signed);
      if (problem !== null) {
        findings.push({ cell: rel.cell, kind: "bundle-value", message: `${at(rel)}: the ${mime} chart ${problem} (receipt seq ${r.seq})` });
      }
      continue;
    }
    // application/json must carry the signed rows (a JSON tree viewer would show any other numbers).
    const rows = (v as { rows?: unknown }).rows;
    if (!Array.isArray(rows)) {
      findings.push({ cell: rel.cell, kind: "bundle-value", message: `${at(rel)}: the ${mime} view carries no "rows" to compare with receipt seq ${r.seq}` });
      continue;
    }
    const shown = rows.map((x) => {
      const o = (x ?? {}) as Record<string, unknown>;
      return JSON.stringify([o.key ?? [], o.stat, o.column ?? null, o.value ?? null, o.low ?? null, o.high ?? null]);
    });
    const want = r.result.map((x) => JSON.stringify(x));
    if (shown.length !== want.length || shown.some((s, i) => s !== want[i])) {
      findings.push({ cell: rel.cell, kind: "bundle-value", message: `${at(rel)}: the ${mime} bundle's rows differ from the values signed in receipt seq ${r.seq}` });
    }
  }
}
