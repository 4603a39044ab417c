/**
 * Reading a notebook for the audit: nbformat 4 JSON, and the release outputs in it. A release
 * output carries its signed receipt in `output.metadata[OUTPUT_METADATA_KEY]` (runtime/protocol/messages.ts).
 */
import { readFileSync } from "node:fs";
import { BadInputError } from "../../runtime/errors.js";
import { formatWithError } from "../../runtime/protocol/format.js";
import { OUTPUT_METADATA_KEY, type OutputMetadata, type Receipt } from "../../runtime/protocol/messages.js";
import { figureText, figuresIn, oddCharacters, oddCharactersText, rightToLeftBesideFigure } from "./figure-text.js";
import { htmlText } from "./html-text.js";

export interface NbOutput {
  output_type: string;
  data?: Record<string, unknown>;
  metadata?: Record<string, unknown>;
  text?: string | string[];
  name?: string;
  ename?: string;
  evalue?: string;
  execution_count?: number | null;
}

export interface NbCell {
  cell_type: string;
  source: string | string[];
  outputs?: NbOutput[];
  execution_count?: number | null;
  metadata?: Record<string, unknown>;
  id?: string;
}

export interface Notebook {
  nbformat: number;
  nbformat_minor: number;
  metadata: Record<string, unknown>;
  cells: NbCell[];
}

/** One output that carries (or should carry) a receipt, located by cell and output index. */
export interface FoundRelease {
  cell: number;
  output: number;
  executionCount: number | null;
  meta: OutputMetadata;
  out: NbOutput;
}

/** An output that looks like a release but has no receipt. */
export interface Suspect {
  cell: number;
  output: number;
  executionCount: number | null;
  why: string;
}

export function joinText(t: string | string[] | undefined): string {
  return t === undefined ? "" : Array.isArray(t) ? t.join("") : t;
}

/** Reads and shape-checks a notebook; throws BadInputError (the CLI's exit 2) when it cannot. */
export function readNotebook(file: string): Notebook {
  let text: string;
  try {
    text = readFileSync(file, "utf8");
  } catch (e: unknown) {
    const code = e !== null && typeof e === "object" && "code" in e ? String((e as { code: unknown }).code) : "error";
    throw new BadInputError(`notebook ${file} cannot be read (${code})`);
  }
  return parseNotebook(text, file);
}

export function parseNotebook(text: string, file: string): Notebook {
  let doc: unknown;
  try {
    doc = JSON.parse(text);
  } catch {
    throw new BadInputError(`notebook ${file} is not valid JSON`);
  }
  const o = doc as Partial<Notebook> | null;
  if (o === null || typeof o !== "object" || !Array.isArray(o.cells)) {
    throw new BadInputError(`notebook ${file} has no "cells" list: not an nbformat notebook`);
  }
  if (o.nbformat !== 4) throw new BadInputError(`notebook ${file} is nbformat ${String(o.nbformat)}; only nbformat 4 is supported`);
  o.cells.forEach((c, i) => {
    if (c === null || typeof c !== "object" || typeof c.cell_type !== "string") {
      throw new BadInputError(`notebook ${file}: cell ${i} is not a cell object`);
    }
    if (c.outputs !== undefined && !Array.isArray(c.outputs)) throw new BadInputError(`notebook ${file}: cell ${i} has outputs that are not a list`);
  });
  return { nbformat: 4, nbformat_minor: o.nbformat_minor ?? 0, metadata: o.metadata ?? {}, cells: o.cells };
}

/** Text a reader sees for an output: text/plain of a bundle, or the text of a stream. */
export function shownText(out: NbOutput): string {
  if (out.output_type === "stream") return joinText(out.text);
  const plain = out.data?.["text/plain"];
  return typeof plain === "string" || Array.isArray(plain) ? joinText(plain as string | string[]) : "";
}

// A release display shows a number with its error bar ("24.5 ± 1.3" or "1,200 [1,000, 1,500]", as
// runtime/protocol/format.ts writes them) and its cost ("cost ε=0.1", "replayed, no new cost", or a
// running "total 0.3 / 1" — the kernel's wording in runtime/api/text.ts). An output showing both
// without a receipt was typed in or copied, not released. A preview shows only "± width" with no
// value before it, so it is not taken for a release. A quantile says "no interval on the value"
// instead of showing an error bar (its guarantee is on rank; runtime/api/text.ts methodLine).
const ERROR_BAR = /\d ± \d|\d \[-?\d[\d.,e+-]*, -?\d[\d.,e+-]*\]|no interval on the value/;
const SPEND = /cost (ε|ρ)\s*=|replayed, no new cost|total -?[\d.e/+-]+ \/ [\d.e/+-]+|(ε|ρ)\s*(spent|used)\b/;

/** Every figure some receipt in the notebook signed, as the shared formatter shows it. */
function signedFigures(nb: Notebook): Set<string> {
  const figures = new Set<string>();
  for (const cell of nb.cells) {
    for (const out of Array.isArray(cell.outputs) ? cell.outputs : []) {
      const result = (out?.metadata?.[OUTPUT_METADATA_KEY] as { receipt?: { result?: unknown } } | null | undefined)?.receipt?.result;
      if (!Array.isArray(result)) continue;
      for (const row of result) {
        try {
          if (Array.isArray(row) && typeof row[3] === "string") figures.add(formatWithError(row[3], row[4] ?? null, row[5] ?? null));
        } catch {
          // a malformed receipt is reported where it stands
        }
      }
    }
  }
  return figures;
}

/**
 * Everything a reader sees of an output without a receipt: its text views and stream text,
 * decoded, and the markup of its HTML the audit cannot judge (html-text.ts).
 */
function allText(out: NbOutput): { text: string; markup: string[] } {
  const parts = [shownText(out)];
  const markup: string[] = [];
  for (const mime of ["text/html", "text/markdown"]) {
    const v = out.data?.[mime];
    if (typeof v !== "string" && !Array.isArray(v)) continue;
    const raw = Array.isArray(v) ? v.map(String).join("") : v;
    if (mime === "text/html") {
      const html = htmlText(raw, null);
      parts.push(html.text);
      markup.push(...html.problems);
    } else {
      parts.push(raw);
    }
  }
  return { text: parts.join("\n"), markup };
}

/**
 * Whether a line may hold an error bar: a "±", or a "[" with a "," and then a "]" after it. In
 * linear time: the pattern /\[.*,.*\]/ tried at every "[" of a long line without a "]" after its
 * "," scans the rest of the line from each, so a notebook line of a million "[" held the audit for
 * hours.
 */
function mayHoldBar(line: string): boolean {
  if (line.includes("±")) return true;
  const open = line.indexOf("[");
  const comma = open < 0 ? -1 : line.indexOf(",", open + 1);
  return comma >= 0 && line.indexOf("]", comma + 1) >= 0;
}

/**
 * Why an output without a receipt shows a figure no receipt signed, or one that may read
 * otherwise than signed, or null. Only outputs and lines with an error bar are judged, so an
 * analyst's own words, emoji or markup elsewhere are not.
 */
function unsignedProblem({ text, markup }: { text: string; markup: string[] }, signed: Set<string>): string | null {
  const folded = figureText(text);
  const figures = figuresIn(folded);
  // The analyst's own markup is fine, but not around a figure with an error bar: <bdo>, <sup> or
  // a hidden span can make a signed-looking figure read as another number.
  if (figures.length > 0 && markup.length > 0) {
    return `it shows a figure with an error bar ("${figures[0].text}") in HTML that uses ${markup.slice(0, 3).join(", ")}, which can draw it otherwise than the audit reads it`;
  }
  for (const f of figures) {
    if (!signed.has(f.text)) return `it shows "${f.text}", a figure with an error bar that no receipt in this notebook signed`;
    if (!f.alone) return `it shows the figure "${f.text}" run into the characters beside it, so a reader may see another number`;
  }
  for (const line of text.split("\n")) {
    if (!mayHoldBar(line) || figuresIn(figureText(line)).length === 0) continue;
    const odd = [...oddCharacters(line), ...rightToLeftBesideFigure(line, /\t/)];
    if (odd.length > 0) return `it shows a figure with an error bar beside ${oddCharactersText(odd)}, which the kernel never writes`;
  }
  return null;
}

export function findReleases(nb: Notebook): { releases: FoundRelease[]; suspects: Suspect[] } {
  const releases: FoundRelease[] = [];
  const suspects: Suspect[] = [];
  const signed = signedFigures(nb);
  nb.cells.forEach((cell, ci) => {
    if (cell.cell_type !== "code") return;
    const executionCount = typeof cell.execution_count === "number" ? cell.execution_count : null;
    (cell.outputs ?? []).forEach((out, oi) => {
      if (out === null || typeof out !== "object") return;
      const meta = out.metadata?.[OUTPUT_METADATA_KEY];
      if (meta !== undefined) {
        const m = meta as Partial<OutputMetadata> | null;
        if (m === null || typeof m !== "object" || typeof m.receipt !== "object" || m.receipt === null) {
          suspects.push({ cell: ci, output: oi, executionCount, why: "its hush metadata holds no receipt" });
          return;
        }
        releases.push({
          cell: ci,
          output: oi,
          executionCount,
          meta: { receipt: m.receipt as Receipt, replay: m.replay === true, dataset: String(m.dataset ?? ""), ...(m.plan !== undefined ? { plan: m.plan } : {}) },
          out,
        });
        return;
      }
      const text = shownText(out);
      if (ERROR_BAR.test(text) && SPEND.test(text)) {
        suspects.push({ cell: ci, output: oi, executionCount, why: "it shows an error bar and a privacy spend but carries no receipt" });
        return;
      }
      // A figure with an error bar that no receipt signed was typed in or computed off the books.
      // Repeating a signed figure (console.log of an answer) is fine.
      const why = unsignedProblem(allText(out), signed);
      if (why !== null) suspects.push({ cell: ci, output: oi, executionCount, why });
    });
  });
  return { releases, suspects };
}
