/**
 * The answer to "what would this cost, and how precise would it be?" — a preview from the curator,
 * computed from the plan and the public policy only. Nothing is spent and nothing about the data
 * is revealed.
 */
import type { Preview, RatioError, SpendSummary } from "../protocol/messages.js";
import { formatHalfWidth } from "../protocol/format.js";
import { INSPECT, aligned, percent, q, spendText, unitSymbol } from "./text.js";

export interface ExpectedError {
  stat: string;
  column: string | null;
  /** Expected half-width of the error bar at the preview's confidence. */
  halfWidth: number;
  /** The same, exact, as the curator computed it. */
  exact: string;
}

/**
 * A preview lists at most this many of its parts' expected errors when it has more than
 * PARTS_LISTED_UP_TO of them (a describe, a correlation or a regression has tens); one line then
 * gives how many more there are and their range, and `expectedErrors` holds every one.
 */
export const PARTS_SHOWN = 6;
export const PARTS_LISTED_UP_TO = 8;

/** The parts a preview shows in full, and the range of the rest (null when every part is shown). */
export function listedParts(errs: readonly ExpectedError[]): { shown: ExpectedError[]; rest: { count: number; least: ExpectedError; most: ExpectedError } | null } {
  if (errs.length <= PARTS_LISTED_UP_TO) return { shown: [...errs], rest: null };
  const rest = errs.slice(PARTS_SHOWN);
  // Ordered by the binary64 value: these are the curator's public widths, shown only.
  const least = rest.reduce((a, e) => (e.halfWidth < a.halfWidth ? e : a));
  const most = rest.reduce((a, e) => (e.halfWidth > a.halfWidth ? e : a));
  return { shown: errs.slice(0, PARTS_SHOWN), rest: { count: rest.length, least, most } };
}

/** "14 more parts: ± 680 to ± 2,100,000,000" (one value when they are all the same). */
export function restText(rest: { count: number; least: ExpectedError; most: ExpectedError }): string {
  const lo = formatHalfWidth(rest.least.exact);
  const hi = formatHalfWidth(rest.most.exact);
  return `${rest.count} more parts: ± ${lo}${hi === lo ? "" : ` to ± ${hi}`}`;
}

/** Cost and expected error of a query that has not been run. */
export class CostQuote {
  /** The curator's preview (frozen). */
  readonly preview: Preview;
  /** What would be asked, in words. */
  readonly what: string;

  constructor(preview: Preview, what: string) {
    this.preview = Object.freeze(structuredClone(preview));
    this.what = what;
    Object.freeze(this);
  }

  /** Cost the query would debit, exact, in `unit` ("0" when it would be a replay). */
  get cost(): string {
    return this.preview.replay ? "0" : this.preview.cost;
  }

  /** Accounting unit of the dataset: "epsilon" (pure) or "rho" (zCDP). */
  get unit(): "epsilon" | "rho" {
    return this.preview.unit;
  }

  /** Expected half-width of each number the query would release. */
  get expectedErrors(): ExpectedError[] {
    return this.preview.halfWidths.map((h) => ({ stat: h.stat, column: h.column, halfWidth: Number(h.halfWidth), exact: h.halfWidth }));
  }

  /**
   * Means, variances and std: the expected error of the estimate itself for an assumed count of
   * values (`assumeCount`, or the steward's public size hint); empty without one.
   */
  get estimateErrors(): RatioError[] {
    return (this.preview.ratioErrors ?? []).map((r) => ({ ...r }));
  }

  /** Would it fit under the cap right now? */
  get affordable(): boolean {
    return this.preview.affordable;
  }

  /** True when the same query was already answered: running it returns the stored release for free. */
  get replay(): boolean {
    return this.preview.replay;
  }

  /** The analyst's spend on the dataset now. */
  get spend(): SpendSummary {
    return this.preview.spend;
  }

  get confidence(): number {
    return this.preview.confidence;
  }

  get notes(): string[] {
    return [...this.preview.notes];
  }

  [INSPECT](): string {
    return this.toString();
  }

  toString(): string {
    const p = this.preview;
    const head = p.replay
      ? `preview ${this.what}: already released, running it again costs nothing`
      : `preview ${this.what}: would cost ${unitSymbol(p.unit)}=${q(p.cost)} · ${p.affordable ? "fits under the cap" : "does NOT fit under the cap"}`;
    const errs = this.expectedErrors;
    const same = errs.every((e) => e.stat === errs[0]?.stat && e.column === errs[0]?.column && e.exact === errs[0]?.exact);
    const { shown, rest } = listedParts(errs);
    const lines =
      errs.length > 0 && same
        ? [`  expected error ± ${formatHalfWidth(errs[0].exact)} (${percent(p.confidence)})${errs.length > 1 ? ` for each of ${errs.length} numbers` : ""}`]
        : [
            ...aligned(
              // The curator's labels for the parts of a mean already name the column.
              shown.map((e) => [`${e.stat}${e.column && !e.stat.includes(e.column) ? ` ${e.column}` : ""}`, `± ${formatHalfWidth(e.exact)} (${percent(p.confidence)})`]),
              "  ",
            ),
            ...(rest === null ? [] : [`  … ${restText(rest)} (${percent(p.confidence)}; every part: .expectedErrors)`]),
          ];
    const own = this.estimateErrors.map(
      (r) =>
        `  expected error of the ${r.stat} itself ± ${q(r.typical)} (${percent(p.confidence)}) for ${r.typicalAt}; up to ± ${q(r.widest)} elsewhere in the range (${r.assumedFrom === "analyst" ? "your assumed count" : "the steward's public size hint"})`,
    );
    const parts = own.length > 0 && lines.length > 0 ? ["  its parts:", ...lines.map((l) => `  ${l}`)] : lines;
    return [head, ...own, ...parts, `  now: ${spendText(p.spend)}`].join("\n");
  }
}
