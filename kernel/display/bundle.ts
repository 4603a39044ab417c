/**
 * Mime bundles for the cell API objects. A release gets text/plain and text/html in one compact
 * view (the figures rounded by docs/methods.md §23, one plain line on the error bars, the cost, the
 * rest folded away; views.ts), for grouped results and histograms a Vega-Lite chart with error bars
 * plus the same chart as SVG rendered here, and output metadata carrying the signed receipt so the
 * notebook can be audited without the data. The running privacy loss is one line per cell
 * (lossBundle), never inside a release.
 */
import { Answer } from "../../runtime/api/answer.js";
import { BudgetReport, LedgerView } from "../../runtime/api/budget.js";
import { HUSH_HELP, Hush } from "../../runtime/api/hush.js";
import { CostQuote } from "../../runtime/api/quote.js";
import { SealedTable } from "../../runtime/api/table.js";
import { isolateRightToLeft, planWords } from "../../runtime/protocol/words.js";
import { OUTPUT_METADATA_KEY, type OutputMetadata } from "../../runtime/protocol/messages.js";
import { VEGALITE_MIME, chartable, renderSvg, vegaLiteSpec } from "./chart.js";
import { esc } from "./html.js";
import { modelTextNote } from "./regression.js";
import { type LossLine, answerHtml, budgetHtml, ledgerHtml, lossHtml, lossText, preHtml, quoteHtml, tableHtml } from "./views.js";

export interface MimeBundle {
  data: Record<string, unknown>;
  metadata: Record<string, unknown>;
}

/** The bundle of a release, with chart and receipt metadata. */
export async function answerBundle(a: Answer): Promise<MimeBundle> {
  const note = modelTextNote(a); // regression.ts: estimates left unavailable by the noise
  // The data's and the steward's words (group keys, filter values, names) in isolates where they
  // hold a right-to-left letter, so they cannot reorder the figures on their line (protocol/words.ts).
  const words = [...a.release.rows.flatMap((row) => row.key.filter((k): k is string => k !== null)), ...planWords(a.release.plan)];
  const plain = isolateRightToLeft(note === null ? a.toString() : `${a.toString()}\n${note}`, words);
  const data: Record<string, unknown> = { "text/plain": plain };
  let img: string | null = null;
  if (chartable(a)) {
    const spec = vegaLiteSpec(a);
    const svg = await renderSvg(spec);
    data[VEGALITE_MIME] = spec;
    data["image/svg+xml"] = svg;
    // Most frontends prefer text/html over the chart types, so the chart is in the HTML too, as an image.
    img = `<img alt="${esc(`chart: ${a.what}`)}" src="data:image/svg+xml;base64,${Buffer.from(svg, "utf8").toString("base64")}">`;
  }
  data["text/html"] = answerHtml(a, img);
  const meta: OutputMetadata = { receipt: a.release.receipt, replay: a.release.replay, dataset: a.release.dataset, plan: a.release.plan };
  // A replay asked from other code than its receipt names: the curator's statement travels with it, for the audit.
  if (a.release.reasked !== undefined) meta.reasked = a.release.reasked;
  return { data, metadata: { [OUTPUT_METADATA_KEY]: meta } };
}

/** The bundle of any cell API object; null for values hush does not render (the kernel's default applies). */
export async function renderValue(value: unknown): Promise<MimeBundle | null> {
  if (value instanceof Answer) return answerBundle(value);
  if (value instanceof SealedTable) return { data: { "text/plain": value.toString(), "text/html": tableHtml(value) }, metadata: {} };
  if (value instanceof CostQuote) return { data: { "text/plain": value.toString(), "text/html": quoteHtml(value) }, metadata: {} };
  if (value instanceof BudgetReport) return { data: { "text/plain": value.toString(), "text/html": budgetHtml(value) }, metadata: {} };
  if (value instanceof LedgerView) return { data: { "text/plain": value.toString(), "text/html": ledgerHtml(value) }, metadata: {} };
  if (value instanceof Hush) return { data: { "text/plain": HUSH_HELP, "text/html": preHtml(HUSH_HELP, "help") }, metadata: {} };
  return null;
}

/** The running privacy-loss bundle shown under a cell that released something. */
export function lossBundle(lines: readonly LossLine[]): MimeBundle {
  return { data: { "text/plain": lossText(lines), "text/html": lossHtml(lines) }, metadata: {} };
}

/** A plain notice (e.g. "started a local curator"), text and HTML. */
export function noticeBundle(text: string): MimeBundle {
  return {
    data: { "text/plain": text, "text/html": `<div style="font-family:system-ui,sans-serif;font-size:12px;border-left:3px solid #e8a33d;padding:2px 8px">${esc(text)}</div>` },
    metadata: {},
  };
}
