/**
 * The data's and the steward's own words in a release's views (group keys, a filter's declared
 * values, column and dataset names), shared by the kernel, which writes them, and the audit, which
 * reads them. They may hold any character; two things follow.
 *
 * - A word with a right-to-left letter beside a figure on one line can make the figure be drawn in
 *   another order: the Unicode bidirectional algorithm (UAX #9, rules W2, N1, I1, L2) draws
 *   "district = א = 10 [5, 15]" with the digits after the letter taken into its right-to-left run.
 *   The kernel therefore sets each such word in text/plain in a first-strong isolate (U+2068 FSI
 *   ... U+2069 PDI; UAX #9, section 2.7), which keeps its direction from reaching its neighbours.
 *   (In text/html the words stand in their own blocks or table cells, each a paragraph of its own.)
 * - The audit reads such words as labels, not as odd characters beside a figure: group keys always,
 *   a plan's words only once the plan is the one the receipt signed.
 */

/** Letters of the right-to-left scripts (bidi class R or AL, UAX #9 Table 4); JavaScript has no Bidi_Class property. */
export const RIGHT_TO_LEFT =
  /[\p{Script=Arabic}\p{Script=Hebrew}\p{Script=Syriac}\p{Script=Thaana}\p{Script=Nko}\p{Script=Samaritan}\p{Script=Mandaic}\p{Script=Adlam}\p{Script=Hanifi_Rohingya}\p{Script=Yezidi}]/u;

/** U+2068 FIRST STRONG ISOLATE and U+2069 POP DIRECTIONAL ISOLATE. */
export const FSI = "\u2068";
export const PDI = "\u2069";

/** Plan fields whose strings are names and values from the steward's policy. */
const WORD_FIELDS = new Set(["dataset", "column", "columns", "value", "values", "response", "predictors", "rows", "cols"]);

/**
 * The steward's words in a plan: strings under the fields that name columns, the dataset or a
 * filter's values, with at least one letter (a number written as text is never one: nothing a
 * figure is made of is read as a word).
 */
export function planWords(plan: unknown): string[] {
  const words = new Set<string>();
  const visit = (v: unknown, field: string | null, depth: number): void => {
    if (depth > 64) return;
    if (typeof v === "string") {
      if (field !== null && WORD_FIELDS.has(field) && /\p{L}/u.test(v)) words.add(v);
    } else if (Array.isArray(v)) {
      for (const x of v) visit(x, field, depth + 1);
    } else if (v !== null && typeof v === "object") {
      for (const [k, x] of Object.entries(v)) visit(x, k, depth + 1);
    }
  };
  visit(plan, null, 0);
  return [...words];
}

function escapeRegExp(s: string): string {
  return s.replace(/[.*+?^${}()|[\]\\/]/g, "\\$&");
}

/** `text` with every occurrence of each word that holds a right-to-left letter set in an FSI ... PDI isolate (longest words first). */
export function isolateRightToLeft(text: string, words: readonly string[]): string {
  const rtl = [...new Set(words.filter((w) => w.length > 0 && RIGHT_TO_LEFT.test(w)))].sort((a, b) => b.length - a.length);
  if (rtl.length === 0) return text;
  return text.replace(new RegExp(rtl.map(escapeRegExp).join("|"), "gu"), (w) => `${FSI}${w}${PDI}`);
}
