/**
 * What a release output shows, against what its receipt signed. Each human-readable view
 * (text/plain, text/html, text/markdown) must show exactly the signed figures: every signed row's
 * figure, after its group keys, in the signed order, and no figure with an error bar that was not
 * signed (an extra made-up row, or an edited number beside a hidden original). Structured bundles
 * (JSON rows, the Vega-Lite chart's data) must carry exactly the signed numbers.
 */
import { formatDecimal, formatWithError } from "../../runtime/protocol/format.js";
import type { Receipt } from "../../runtime/protocol/messages.js";
import type { Finding } from "./findings.js";
import type { FoundRelease } from "./notebook.js";

type Row = Receipt["result"][number];

// A number as runtime/protocol/format.ts writes it ("12", "-0.5", "1.25e-9"), and a figure with
// an error bar in either of its two forms: "v ± w" or "v [lo, hi]".
const NUM = String.raw`-?\d+(?:\.\d+)?(?:e[+-]?\d+)?`;
const BAR = String.raw`${NUM} (?:± ${NUM}|\[${NUM}, ${NUM}\])`;
const FIGURE = new RegExp(String.raw`(?<![\d.])${BAR}(?![\d])`, "g");
const WHOLE_FIGURE = new RegExp(`^${BAR}$`);

/** Every figure with an error bar in `text`, left to right, without overlaps. */
export function figuresIn(text: string): string[] {
  return [...text.matchAll(FIGURE)].map((m) => m[0]);
}

/**
 * Text with HTML tags and entities reduced to plain words and single spaces, so a table row
 * compares like a line. NFKC first, so full-width or other look-alike digits count as digits and
 * cannot show a number the checks do not see.
 */
export function normalised(text: string): string {
  return plainText(
    text
      .replace(/<[^>]*>/g, " ")
      // Numeric references first, so digits written as &#52; are digits; &amp; last, so "&amp;lt;" stays "&lt;".
      .replace(/&#(\d{1,7});/g, (m, d: string) => codePoint(Number(d)) ?? m)
      .replace(/&#x([0-9a-f]{1,6});/gi, (m, h: string) => codePoint(parseInt(h, 16)) ?? m)
      .replace(/&plusmn;|&pm;|&PlusMinus;/g, "±")
      .replace(/&nbsp;/gi, " ")
      .replace(/&apos;/gi, "'")
      .replace(/&quot;/gi, '"')
      .replace(/&lt;/g, "<")
      .replace(/&gt;/g, ">")
      .replace(/&amp;/g, "&"),
  );
}

function codePoint(n: number): string | null {
  return n <= 0x10ffff && (n < 0xd800 || n > 0xdfff) ? String.fromCodePoint(n) : null;
}

/** Plain text with look-alike characters folded (NFKC) and runs of white space made one space; no markup removed. */
export function plainText(text: string): string {
  return text.normalize("NFKC").replace(/\s+/g, " ");
}

// Terminal escapes and other control characters (Jupyter renders ANSI colours in text/plain, so
// they could hide the signed figure or colour a fake one in), and invisible format characters
// (zero-width spaces, bidi overrides that draw "5.2424" as "4242.5"). The kernel writes none.
const CONTROL = /[\p{Cc}\p{Cf}]/u;

export function rowLabel(row: Row): string {
  const [key, stat, column] = row;
  const what = column === null ? stat : `${stat} of ${column}`;
  return key.length === 0 ? what : `${what} for ${key.map((k) => (k === null ? "(missing)" : k)).join(" / ")}`;
}

function escaped(s: string): string {
  return s.replace(/[.*+?^${}()|[\]\\]/g, "\\$&");
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

/** Checks one human-readable view; returns the first problem, or null. */
function viewProblem(text: string, signed: { row: Row; figure: string }[]): string | null {
  // In signed order: each row's keys, then its figure standing on its own ("24.5 ± 1.25" inside
  // "924.5 ± 1.25" is not a match). Swapped labels or values break the order.
  let cursor = 0;
  for (const { row, figure } of signed) {
    for (const k of row[0]) {
      if (k === null) continue; // the kernel leaves a missing key out of the label
      const shownKey = plainText(k).trim();
      const at = text.indexOf(shownKey, cursor);
      if (at < 0) return `does not show the group "${k}" of the signed ${rowLabel(row)} "${figure}" in the signed order`;
      cursor = at + shownKey.length;
    }
    const pattern = new RegExp(`(?<![\\d.])${escaped(figure)}(?![\\d])`, "g");
    pattern.lastIndex = cursor;
    const m = pattern.exec(text);
    if (m === null) return `does not show the signed ${rowLabel(row)} "${figure}"${cursor > 0 ? " where it belongs" : ""}`;
    cursor = m.index + m[0].length;
  }
  // Nothing beyond: every figure with an error bar is a signed one, once, in order.
  const expected = signed.map((s) => s.figure).filter((f) => WHOLE_FIGURE.test(f));
  // Group keys are read as labels, not as parts of a figure: in an HTML table a numeric key cell
  // followed by a bin key "[90, 100]" would otherwise read as the figure "2024 [90, 100]".
  // Only bracketed keys (bins) can complete such a figure, and only they are set aside, so a key
  // like "5" cannot eat the digits of a figure.
  const keys = [...new Set(signed.flatMap((x) => x.row[0]).filter((k): k is string => k !== null && k.includes("[")))];
  const unlabelled = keys.reduce((t, k) => t.split(plainText(k).trim()).join(" ¦ "), text);
  const seen = figuresIn(unlabelled);
  const extra = seen.find((f, i) => f !== expected[i]);
  if (seen.length !== expected.length || extra !== undefined) {
    const unsigned = seen.find((f) => !expected.includes(f));
    return unsigned !== undefined
      ? `shows "${unsigned}", a figure its receipt did not sign`
      : `shows the signed figures ${seen.length === expected.length ? "out of order" : `${seen.length} times instead of ${expected.length}`}`;
  }
  return null;
}

/**
 * The cost a release line states ("cost ε=0.1", runtime/api/text.ts costText, 6 significant
 * digits) must be the signed cost in the signed unit. The running total beside it is the
 * analyst's total when the cell ran (a replay shows today's), so only the audit's own total counts.
 */
function costProblem(text: string, r: Receipt): string | null {
  let want: string;
  try {
    want = `cost ${r.unit === "rho" ? "ρ" : "ε"}=${formatDecimal(r.cost, 6)}`;
  } catch {
    return null; // a cost that is not a number is reported by the chain checks
  }
  for (const m of text.matchAll(/cost (ε|ρ)\s*=\s*([^\s·,;)]*)/g)) {
    if (m[0] !== want) return `states "${m[0]}", but receipt seq ${r.seq} signed "${want}"`;
  }
  return null;
}

/**
 * HTML the audit can read as text. The kernel writes plain markup, inline styles and one chart
 * image (the output's own image/svg+xml); scripts, style sheets, inline SVG, frames, other images or
 * CSS pictures could draw numbers the text check does not see.
 */
function htmlProblem(raw: string, data: Record<string, unknown>): string | null {
  const active = /<\s*(script|style|iframe|frame|object|embed|svg|canvas|math|link|meta|base|template|video|audio|picture|source)\b|\son\w+\s*=|javascript:|url\s*\(/i.exec(raw);
  if (active !== null) return `holds "${active[0].trim()}", which can show text the audit does not read`;
  const svg = data["image/svg+xml"];
  const svgText = typeof svg === "string" ? svg : Array.isArray(svg) ? svg.map(String).join("") : null;
  const chart = svgText === null ? null : `data:image/svg+xml;base64,${Buffer.from(svgText, "utf8").toString("base64")}`;
  for (const img of raw.matchAll(/<\s*img\b[^>]*>/gi)) {
    const src = /\ssrc\s*=\s*"([^"]*)"/i.exec(img[0])?.[1];
    if (src === undefined || src !== chart) return "shows an image that is not the output's own chart";
  }
  return null;
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
  const views: [string, string][] = [];
  for (const mime of ["text/plain", "text/html", "text/markdown"]) {
    const v = data[mime];
    if (typeof v !== "string" && !Array.isArray(v)) continue;
    const raw = Array.isArray(v) ? v.map(String).join("") : (v as string);
    const decoded = mime === "text/plain" ? raw : normalised(raw);
    if (CONTROL.test(raw.replace(/[\n\t\r]/g, "")) || CONTROL.test(decoded.replace(/[\n\t\r]/g, ""))) {
      findings.push({ cell: rel.cell, kind: "shown-value", message: `${at(rel)}: ${mime} holds control or invisible format characters (terminal escapes, zero-width or bidi characters can hide or reorder text); receipt seq ${r.seq}` });
    }
    if (mime === "text/html") {
      const problem = htmlProblem(raw, data);
      if (problem !== null) findings.push({ cell: rel.cell, kind: "shown-value", message: `${at(rel)}: text/html ${problem} (receipt seq ${r.seq})` });
    }
    views.push([mime, mime === "text/plain" ? plainText(raw) : decoded]);
  }
  if (!views.some(([m]) => m === "text/plain")) {
    findings.push({ cell: rel.cell, kind: "shown-value", message: `${at(rel)}: release output (receipt seq ${r.seq}) has no text/plain view to check` });
  }
  for (const [mime, text] of views) {
    const problem = viewProblem(text, signed);
    if (problem !== null) {
      findings.push({ cell: rel.cell, kind: "shown-value", message: `${at(rel)}: ${mime} ${problem} (receipt seq ${r.seq}); the shown values were edited` });
    }
    const cost = costProblem(text, r);
    if (cost !== null) findings.push({ cell: rel.cell, kind: "shown-value", message: `${at(rel)}: ${mime} ${cost}; the stated cost was edited` });
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
