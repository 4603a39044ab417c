/**
 * Tamperings of an executed notebook, each the kind of edit a reviewer must catch. They work on any
 * notebook whose release outputs carry receipts, so the same corpus runs on a notebook signed in
 * the test and on one executed through the real kernel.
 */
import type { KeyObject } from "node:crypto";
import { sign } from "node:crypto";
import type { Notebook, NbOutput } from "../../cli/audit/notebook.js";
import { Rational } from "../../runtime/core/index.js";
import { formatWithError } from "../../runtime/protocol/format.js";
import { OUTPUT_METADATA_KEY, type OutputMetadata, type Receipt } from "../../runtime/protocol/messages.js";
import { GENESIS_PREV, keyIdOf, receiptHash, receiptSigningBytes } from "../../runtime/protocol/receipts.js";

export const clone = (nb: Notebook): Notebook => JSON.parse(JSON.stringify(nb)) as Notebook;

export interface Located {
  cell: number;
  output: NbOutput;
  meta: OutputMetadata;
}

/** Release outputs in notebook order. */
export function releasesOf(nb: Notebook): Located[] {
  const found: Located[] = [];
  nb.cells.forEach((c, cell) => {
    for (const output of c.outputs ?? []) {
      const meta = output.metadata?.[OUTPUT_METADATA_KEY] as OutputMetadata | undefined;
      if (meta !== undefined) found.push({ cell, output, meta });
    }
  });
  return found;
}

/** The release with this seq (first showing); throws if absent so a test cannot pass vacuously. */
export function releaseWithSeq(nb: Notebook, seq: number): Located {
  return allWithSeq(nb, seq)[0];
}

/** Every showing of release `seq` (a repeated question shows the same receipt again). */
export function allWithSeq(nb: Notebook, seq: number): Located[] {
  const found = releasesOf(nb).filter((x) => x.meta.receipt.seq === seq);
  if (found.length === 0) throw new Error(`test notebook has no release with seq ${seq}`);
  return found;
}

function textOf(o: NbOutput): string {
  const t = o.data?.["text/plain"];
  return Array.isArray(t) ? t.join("") : String(t ?? "");
}

/** Changes the first shown number of release `seq` in every text view, leaving the receipt alone. */
export function editShownValue(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  const row = rel.meta.receipt.result.find((r) => r[3] !== null)!;
  // The edit keeps the error bar and changes the figure: the kind of change a reader would not notice.
  const shown = formatWithError(row[3], row[4], row[5]);
  const [value, ...rest] = shown.split(" ");
  const edited = [value.startsWith("9") ? `1${value}` : `9${value}`, ...rest].join(" ");
  if (!textOf(rel.output).includes(shown)) throw new Error(`release seq ${seq} does not show "${shown}"; cannot edit it`);
  for (const mime of Object.keys(rel.output.data ?? {})) {
    const v = rel.output.data![mime];
    if (typeof v === "string") rel.output.data![mime] = v.split(shown).join(edited);
    else if (Array.isArray(v)) rel.output.data![mime] = (v as string[]).map((s) => s.split(shown).join(edited));
  }
  return out;
}

/** Removes every cell showing release `seq`. */
export function deleteReleaseCell(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  const cells = new Set(allWithSeq(out, seq).map((x) => x.cell));
  out.cells = out.cells.filter((_, i) => !cells.has(i));
  return out;
}

/** Swaps the cells holding releases `a` and `b`. */
export function swapReleaseCells(nb: Notebook, a: number, b: number): Notebook {
  const out = clone(nb);
  const ia = releaseWithSeq(out, a).cell;
  const ib = releaseWithSeq(out, b).cell;
  [out.cells[ia], out.cells[ib]] = [out.cells[ib], out.cells[ia]];
  return out;
}

/** Puts `foreign` (a receipt of another analyst) in place of release `seq`'s receipt. */
export function substituteReceipt(nb: Notebook, seq: number, foreign: Receipt): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  rel.meta.receipt = JSON.parse(JSON.stringify(foreign)) as Receipt;
  return out;
}

/** Flips one byte of release `seq`'s signature. */
export function forgeSignature(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  for (const { meta } of allWithSeq(out, seq)) {
    const bytes = Buffer.from(meta.receipt.sig, "base64");
    bytes[0] ^= 0x01;
    meta.receipt.sig = bytes.toString("base64");
  }
  return out;
}

/** Lowers release `seq`'s cost to a tenth (what someone hiding spend would do); the signature is left as it was. */
export function changeCost(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  for (const { meta } of allWithSeq(out, seq)) meta.receipt.cost = Rational.parse(meta.receipt.cost).div(Rational.of(10)).toString();
  return out;
}

/**
 * Re-signs every receipt with another Ed25519 key, re-linking the chain: everything is consistent
 * except that the key is not the curator's.
 */
export function replaceKey(nb: Notebook, other: { privateKey: KeyObject; publicKey: KeyObject }): Notebook {
  const out = clone(nb);
  const located = releasesOf(out);
  const bySeq = new Map<number, Receipt>();
  for (const { meta } of located) bySeq.set(meta.receipt.seq, meta.receipt);
  let prev = GENESIS_PREV;
  const resigned = new Map<number, Receipt>();
  for (const seq of [...bySeq.keys()].sort((a, b) => a - b)) {
    const r: Receipt = { ...bySeq.get(seq)!, prev, keyId: keyIdOf(other.publicKey), sig: "" };
    r.sig = sign(null, receiptSigningBytes(r), other.privateKey).toString("base64");
    resigned.set(seq, r);
    prev = receiptHash(r);
  }
  for (const { meta } of located) meta.receipt = { ...resigned.get(meta.receipt.seq)! };
  return out;
}

/**
 * Ways to show a signed figure that the display rule (docs/methods.md §23) does not write: each is
 * a number a reader may take for the signed one, and each must be caught. `row` is the signed row.
 */
export const RESPELLINGS: { name: string; spell: (row: Receipt["result"][number]) => string }[] = [
  {
    // The exact figures, as a kernel without the rule would print them (more digits than the error bar supports).
    name: "unrounded (the exact value and interval at 12 significant digits)",
    spell: ([, , , v, lo, hi]) => {
      const [V, L, H] = [v!, lo!, hi!].map((x) => Rational.parse(x));
      const d = (x: Rational): string => x.toDecimal(12);
      return V.sub(L).eq(H.sub(V)) ? `${d(V)} ± ${d(H.sub(V))}` : `${d(V)} [${d(L)}, ${d(H)}]`;
    },
  },
  { name: "without thousands separators", spell: ([, , , v, lo, hi]) => formatWithError(v, lo, hi).replace(/(\d),(?=\d{3})/g, "$1") },
  {
    // The last digit of the error bar one lower (or higher after a 0): a narrower or wider bar.
    name: "with the error bar's last digit changed",
    spell: ([, , , v, lo, hi]) =>
      formatWithError(v, lo, hi).replace(/(\d)(\]?)$/, (_m, d: string, close: string) => `${d === "0" ? "1" : String(Number(d) - 1)}${close}`),
  },
];

/** Shows release `seq`'s first figure spelled by `spell` in its text views, leaving the receipt alone. */
export function respellFigure(nb: Notebook, seq: number, spell: (row: Receipt["result"][number]) => string): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  const row = rel.meta.receipt.result.find((r) => r[3] !== null && r[4] !== null)!;
  const shown = formatWithError(row[3], row[4], row[5]);
  const respelled = spell(row);
  if (respelled === shown) throw new Error(`"${shown}" is already spelled that way; the tamper would change nothing`);
  mapText(rel.output, ["text/plain", "text/html"], (s) => s.split(shown).join(respelled));
  return out;
}

/** Drops the receipt from release `seq`'s output(s), leaving the shown text: a release without a receipt. */
export function stripReceipt(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  for (const { output } of allWithSeq(out, seq)) delete output.metadata![OUTPUT_METADATA_KEY];
  return out;
}

/** A figure with an error bar that no receipt in the test notebooks signs. */
export const MADE_UP = "4242.5 ± 1.5";

function firstFigure(rel: Located): string {
  const row = rel.meta.receipt.result.find((r) => r[3] !== null && r[4] !== null)!;
  return formatWithError(row[3], row[4], row[5]);
}

/**
 * The kernel's HTML marks a figure's value and error bar for the browser test
 * (`<span class="hush-value">177,760</span> <span class="hush-errorbar">± 480</span>`); a tamper
 * edits the figure as a person reads it, so the marks are taken off first (still the kernel's
 * vocabulary, and the same text to a reader).
 */
export function plainFigures(html: string): string {
  return html.replace(/<span class="hush-value">([^<]*)<\/span> <span class="hush-errorbar">([^<]*)<\/span>/g, "$1 $2").replace(/<span class="hush-value">([^<]*)<\/span>/g, "$1");
}

function mapText(o: NbOutput, mimes: string[], f: (s: string) => string): void {
  for (const mime of mimes) {
    const v = o.data?.[mime];
    const text = Array.isArray(v) ? (v as string[]).join("") : v;
    if (typeof text === "string") o.data![mime] = f(mime === "text/html" ? plainFigures(text) : text);
  }
}

/** Adds a made-up row (a group that was never released) after the first figure of release `seq`, in every text view. */
export function addMadeUpRow(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  const shown = firstFigure(rel);
  mapText(rel.output, ["text/plain", "text/html"], (s) => s.replace(shown, `${shown}\n  Atlantis  ${MADE_UP}`));
  return out;
}

/** Swaps the first two figures of release `seq` in every text view: each group shows another group's number. */
export function swapGroupFigures(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  const figs = rel.meta.receipt.result.filter((r) => r[3] !== null).map((r) => formatWithError(r[3], r[4], r[5]));
  if (figs.length < 2 || figs[0] === figs[1]) throw new Error(`release seq ${seq} has no two distinct figures to swap`);
  mapText(rel.output, ["text/plain", "text/html"], (s) => s.replace(figs[0], "\u0000").replace(figs[1], figs[0]).replace("\u0000", figs[1]));
  return out;
}

/** Gives release `seq` a text/html view that shows an edited figure and keeps the signed one in a hidden span. */
export function hideSignedInHtml(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  const shown = firstFigure(rel);
  const plain = textOf(rel.output);
  const html = rel.output.data!["text/html"];
  const base = html === undefined ? `<pre>${plain}</pre>` : plainFigures(Array.isArray(html) ? (html as string[]).join("") : String(html));
  rel.output.data!["text/html"] = base.replace(shown, `${MADE_UP}<span style="display:none">${shown}</span>`);
  return out;
}

/** Shows an edited figure in text/plain and keeps the signed one behind an ANSI "conceal" escape. */
export function concealSignedInPlain(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  const shown = firstFigure(rel);
  mapText(rel.output, ["text/plain"], (s) => s.replace(shown, `${MADE_UP}\u001b[8m${shown}\u001b[0m`));
  return out;
}

/** Changes the first data point of release `seq`'s Vega-Lite chart, leaving text and receipt alone. */
export function editChartValue(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  const mime = Object.keys(rel.output.data ?? {}).find((m) => /vegalite/.test(m));
  if (mime === undefined) throw new Error(`release seq ${seq} has no chart`);
  const spec = rel.output.data![mime] as { data: { values: { value: number }[] } };
  spec.data.values[0].value = spec.data.values[0].value * 2 + 1;
  return out;
}

/** Prints a release-looking line with a made-up figure (console.log) in release `seq`'s cell, with no receipt and no spend. */
export function fakeStreamLine(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  out.cells[rel.cell].outputs!.push({ output_type: "stream", name: "stdout", text: [`count = ${MADE_UP} (95%)\n`] });
  return out;
}

/** Adds a view the audit cannot read (LaTeX, which frontends prefer to text/plain) showing a made-up figure. */
export function addUncheckedView(nb: Notebook, seq: number, mime = "text/latex"): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  rel.output.data![mime] = mime.endsWith("json") ? { value: MADE_UP } : `$${MADE_UP.replace("±", "\\pm")}$`;
  return out;
}

/** Edits the cost a release line states ("cost ε=0.1" becomes "cost ε=0.01"), leaving the receipt alone. */
export function editStatedCost(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  if (!/cost (ε|ρ)=/.test(textOf(rel.output))) throw new Error(`release seq ${seq} states no cost`);
  mapText(rel.output, ["text/plain", "text/html"], (s) => s.replace(/cost (ε|ρ)=0?\.?/, (m) => (m.endsWith(".") ? `${m}0` : `${m}0.0`)));
  return out;
}

/** Adds markup to release `seq`'s text/html that can draw text the audit does not read (a script, a style sheet, another image). */
export function addActiveHtml(nb: Notebook, seq: number, markup: string): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  const html = rel.output.data!["text/html"];
  const base = html === undefined ? `<pre>${textOf(rel.output)}</pre>` : Array.isArray(html) ? (html as string[]).join("") : String(html);
  rel.output.data!["text/html"] = base + markup;
  return out;
}

/**
 * An edit of one shown figure that makes a reader see another number than the signed one, while
 * the signed digits stay in the text. `figure` is the signed figure ("199871 ± 60"); the edit
 * returns what is shown in its place.
 */
export interface ReadingTamper {
  name: string;
  /** "html": only the text/html view (made from text/plain when the output has none); "text": text/plain and text/html as written. */
  where: "html" | "text";
  edit: (figure: string) => string;
}

const SUPERSCRIPT = "⁰¹²³⁴⁵⁶⁷⁸⁹";
const SUBSCRIPT = "₀₁₂₃₄₅₆₇₈₉";
/** The figure's value and the rest ("199871", "± 60"). */
const split = (f: string): [string, string] => [f.slice(0, f.indexOf(" ")), f.slice(f.indexOf(" ") + 1)];
const lastDigitAs = (f: string, digits: string): string => {
  const [v, rest] = split(f);
  return `${v.slice(0, -1)}${digits[Number(v.at(-1))]} ${rest}`;
};

export const READING_TAMPERS: ReadingTamper[] = [
  // Minus signs and dashes a reader takes for a minus (Unicode Pd and the minus look-alikes). The
  // small and full-width hyphen-minus (U+FE63, U+FF0D) are left out: NFKC made them "-" already.
  ...(
    [
      ["U+2212 minus sign", "\u2212"],
      ["U+2010 hyphen", "\u2010"],
      ["U+2011 non-breaking hyphen", "\u2011"],
      ["U+2012 figure dash", "\u2012"],
      ["U+2013 en dash", "\u2013"],
      ["U+2014 em dash", "\u2014"],
      ["U+2015 horizontal bar", "\u2015"],
      ["U+02D7 modifier letter minus", "\u02d7"],
      ["U+2796 heavy minus", "\u2796"],
      ["U+207B superscript minus", "\u207b"],
      ["U+FE58 small em dash", "\ufe58"],
      ["U+2043 hyphen bullet", "\u2043"],
    ] as const
  ).map(([name, ch]): ReadingTamper => ({ name: `${name} before the value`, where: "text", edit: (f) => `${ch}${f}` })),
  // Character references the old reader did not decode, and markup that joins a digit to the figure.
  ...(
    [
      ["&minus;", "&minus;"],
      ["&#8722; (decimal reference to U+2212)", "&#8722;"],
      ["&#x2212; (hex reference to U+2212)", "&#x2212;"],
      ["&hyphen;", "&hyphen;"],
      ["&ndash;", "&ndash;"],
      ["&mdash;", "&mdash;"],
      ["1&ZeroWidthSpace;", "1&ZeroWidthSpace;"],
      ["1&shy; (soft hyphen)", "1&shy;"],
      ["1&NoBreak; (word joiner)", "1&NoBreak;"],
      ["1&thinsp; (a thousands separator)", "1&thinsp;"],
      ["1&nbsp;", "1&nbsp;"],
      ["1<!-- comment -->", "1<!-- x -->"],
      ["1<![CDATA[...]]>", "1<![CDATA[x]]>"],
      ["1<span></span>", "1<span></span>"],
      ["<b>1</b>", "<b>1</b>"],
      ["1<wbr>", "1<wbr>"],
      ["1<noscript>", "1<noscript></noscript>"],
      ["1<title> (not drawn in an output)", "1<title>x</title>"],
      ["1 and a hidden attribute", "1<span hidden>x</span>"],
      ["1 and display:none", `1<span style="display:none">x</span>`],
      ["1 and visibility:hidden", `1<span style="visibility:hidden">x</span>`],
      ["1 and font-size:0", `1<span style="font-size:0">x</span>`],
      ["1 and opacity:0", `1<span style="opacity:0">x</span>`],
      ["1 and white text", `1<span style="color:#ffffff">x</span>`],
      ["1 and the frontend's hidden class", `1<span class="hidden">x</span>`],
      ["an input box showing 1", `<input value="1" size="1">`],
    ] as const
  ).map(([name, pre]): ReadingTamper => ({ name: `${name} before the figure in text/html`, where: "html", edit: (f) => `${pre}${f}` })),
  {
    name: "table cells without padding: 1 beside the figure in text/html",
    where: "html",
    edit: (f) => `<table><tr><td style="padding:0">1</td><td style="padding:0">${f}</td></tr></table>`,
  },
  { name: "a stray <td> holding 1 before the figure in text/html (dropped outside a table, its 1 runs on)", where: "html", edit: (f) => `<td>1</td>${f}` },
  { name: "an inline-block <div> holding 1 before the figure in text/html", where: "html", edit: (f) => `<div style="display:inline-block">1</div>${f}` },
  { name: "the value reversed by <bdo dir=rtl> in text/html", where: "html", edit: (f) => `<bdo dir="rtl">${split(f)[0]}</bdo> ${split(f)[1]}` },
  {
    name: "the value reversed by a bidi-override style in text/html",
    where: "html",
    edit: (f) => `<span style="unicode-bidi:bidi-override;direction:rtl">${split(f)[0]}</span> ${split(f)[1]}`,
  },
  { name: "a <sup> exponent after the error bar in text/html", where: "html", edit: (f) => `${f}<sup>2</sup>` },
  // Digits of other numeral systems, superscripts, exponents and look-alike letters.
  ...(
    [
      ["Arabic-Indic", "\u0661"],
      ["Extended Arabic-Indic", "\u06f1"],
      ["Devanagari", "\u0967"],
      ["Bengali", "\u09e7"],
      ["Thai", "\u0e51"],
    ] as const
  ).map(([name, one]): ReadingTamper => ({ name: `a ${name} 1 before the value`, where: "text", edit: (f) => `${one}${f}` })),
  { name: "the value's last digit as a superscript (an exponent)", where: "text", edit: (f) => lastDigitAs(f, SUPERSCRIPT) },
  { name: "the value's last digit as a subscript", where: "text", edit: (f) => lastDigitAs(f, SUBSCRIPT) },
  { name: "a superscript exponent ⁻³ after the error bar", where: "text", edit: (f) => `${f}⁻³` },
  { name: "×10⁻³ after the error bar", where: "text", edit: (f) => `${f}×10⁻³` },
  { name: "an exponent e−3 with U+2212 after the error bar", where: "text", edit: (f) => `${f}e\u22123` },
  { name: "a letter l before the value (read as 1)", where: "text", edit: (f) => `l${f}` },
  { name: "a letter O after the error bar (read as 0)", where: "text", edit: (f) => `${f}O` },
  { name: "a Cyrillic О after the error bar (read as 0)", where: "text", edit: (f) => `${f}\u041e` },
  { name: "1 and a middle dot before the value (read as a decimal point)", where: "text", edit: (f) => `1\u00b7${f}` },
  { name: "an Arabic decimal separator and 5 after the error bar", where: "text", edit: (f) => `${f}\u066b5` },
  { name: "1 and a comma before the value (a thousands separator)", where: "text", edit: (f) => `1,${f}` },
  { name: "1 and an Arabic thousands separator before the value", where: "text", edit: (f) => `1\u066c${f}` },
  { name: "1 and a no-break space before the value", where: "text", edit: (f) => `1\u00a0${f}` },
  { name: "1 and a narrow no-break space before the value (SI thousands separator)", where: "text", edit: (f) => `1\u202f${f}` },
  { name: "1 and a thin space before the value", where: "text", edit: (f) => `1\u2009${f}` },
  { name: "1 and a variation selector before the value", where: "text", edit: (f) => `1\ufe0f${f}` },
  { name: "1 under a combining low line before the value", where: "text", edit: (f) => `1\u0332${f}` },
  { name: "a carriage return and 9 after the figure (9 drawn over its first digit)", where: "text", edit: (f) => `${f}\r9` },
  { name: "a Hebrew letter before the figure (drawn right to left, value and error bar change places)", where: "text", edit: (f) => `\u05d0 ${f}` },
  { name: "a private-use character before the value (an icon font can draw it as a digit)", where: "text", edit: (f) => `\ue000${f}` },
];

/** Applies a reading tamper to the first figure of release `seq`. */
export function rewriteFigure(nb: Notebook, seq: number, t: ReadingTamper): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  const shown = firstFigure(rel);
  const data = rel.output.data!;
  if (t.where === "html" && data["text/html"] === undefined) data["text/html"] = `<pre>${textOf(rel.output)}</pre>`;
  const mimes = t.where === "html" ? ["text/html"] : ["text/plain", "text/html"];
  for (const mime of mimes) {
    const v = data[mime];
    if (v === undefined) continue;
    const raw = Array.isArray(v) ? (v as string[]).join("") : String(v);
    const s = mime === "text/html" ? plainFigures(raw) : raw;
    if (!s.includes(shown)) throw new Error(`release seq ${seq} does not show "${shown}" in ${mime}`);
    data[mime] = s.replace(shown, t.edit(shown));
  }
  return out;
}

/** Prints the first figure of release `seq`, edited by `t`, as a stream line of its cell (no receipt). */
export function printEditedFigure(nb: Notebook, seq: number, t: ReadingTamper): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  out.cells[rel.cell].outputs!.push({ output_type: "stream", name: "stdout", text: [`${t.edit(firstFigure(rel))}\n`] });
  return out;
}

/** Rewrites the cost release `seq` states in every text view ("cost ε=0.1" becomes `f("ε", "0.1")`), leaving the receipt alone. */
export function respellStatedCost(nb: Notebook, seq: number, f: (unit: string, amount: string) => string): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  if (!/cost (ε|ρ)=/.test(textOf(rel.output))) throw new Error(`release seq ${seq} states no cost`);
  mapText(rel.output, ["text/plain", "text/html"], (s) => s.replace(/cost (ε|ρ)=([^\s·,;)<]*)/, (_m, u: string, a: string) => f(u, a)));
  return out;
}

/** A tenth of a stated amount, as a person would edit it ("0.1" to "0.01", "0.333333" to "0.0333333"). */
export const tenth = (a: string): string => Rational.parse(a).div(Rational.of(10)).toDecimal(12);

// ---- the code above a release ------------------------------------------------------------------

const codeOf = (nb: Notebook, cell: number): string => {
  const s = nb.cells[cell].source;
  return Array.isArray(s) ? s.join("") : s;
};

/** The code of the cell showing release `seq` rewritten by `edit`; its output and receipt are left alone. */
export function editReleaseCode(nb: Notebook, seq: number, edit: (code: string) => string): Notebook {
  const out = clone(nb);
  const { cell } = releaseWithSeq(out, seq);
  const before = codeOf(out, cell);
  const after = edit(before);
  if (after === before) throw new Error(`the edit does not change the code of release seq ${seq}: ${JSON.stringify(before)}`);
  out.cells[cell].source = after;
  return out;
}

/** `epsilon: 0.1` becomes `epsilon: 0.01` (or 0.02 when it was 0.01): what a reader takes for the spend. */
export function lowerEpsilonInCode(code: string): string {
  const m = /epsilon:\s*([0-9.]+)/.exec(code);
  if (m === null) throw new Error(`no epsilon in ${JSON.stringify(code)}`);
  return code.replace(m[0], `epsilon: ${m[1] === "0.01" ? "0.02" : "0.01"}`);
}

/** A filter added to the query, so the figure seems to be about fewer people. */
export function addFilterToCode(code: string): string {
  if (!/await \w+\./.test(code)) throw new Error(`no query in ${JSON.stringify(code)}`);
  return code.replace(/await (\w+)\./, "await $1.where({ age: { ge: 65 } }).");
}

/** One space more after `epsilon:`: changes nothing a reader sees, and is still an edit. */
export function widenSpacingInCode(code: string): string {
  if (!code.includes("epsilon: ")) throw new Error(`no "epsilon: " in ${JSON.stringify(code)}`);
  return code.replace("epsilon: ", "epsilon:  ");
}

/** The code of the cells showing releases `a` and `b` exchanged; outputs stay where they were. */
export function swapReleaseCode(nb: Notebook, a: number, b: number): Notebook {
  const out = clone(nb);
  const ca = releaseWithSeq(out, a).cell;
  const cb = releaseWithSeq(out, b).cell;
  const code = out.cells[ca].source;
  out.cells[ca].source = out.cells[cb].source;
  out.cells[cb].source = code;
  return out;
}

/**
 * The code that made release `seq` copied into a new cell just above (no output), and the release
 * cell's own code edited: the true code is in the notebook, but not above the figure it made.
 */
export function moveCodeAbove(nb: Notebook, seq: number): Notebook {
  const out = editReleaseCode(nb, seq, lowerEpsilonInCode);
  const { cell } = releaseWithSeq(out, seq);
  out.cells.splice(cell, 0, { cell_type: "code", source: codeOf(nb, releaseWithSeq(nb, seq).cell), execution_count: null, outputs: [], metadata: {} });
  return out;
}
