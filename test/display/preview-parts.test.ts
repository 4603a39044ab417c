/**
 * A preview with many parts (a describe, a correlation, a regression) lists the first few and
 * folds the rest into one line with their count and range, in text and in HTML; every part stays
 * in `expectedErrors`. A preview with few parts lists them all.
 */
import { describe, expect, test } from "vitest";
import { quoteHtml } from "../../kernel/display/views.js";
import { CostQuote, PARTS_LISTED_UP_TO, PARTS_SHOWN } from "../../runtime/api/quote.js";
import type { Preview } from "../../runtime/protocol/messages.js";

function preview(widths: string[]): Preview {
  return {
    dataset: "clinic",
    digest: "d",
    cost: "1/2",
    unit: "epsilon",
    halfWidths: widths.map((w, i) => ({ stat: `part ${i + 1} (for the correlation)`, column: null, halfWidth: w })),
    confidence: 0.95,
    affordable: true,
    replay: false,
    spend: { analyst: "ada", dataset: "clinic", population: "clinic", mode: "pure", spentEpsilon: "0", capEpsilon: "3", remainingEpsilon: "3", releases: 0 },
    notes: [],
  };
}

describe("a preview's parts", () => {
  test("up to the limit every part is listed", () => {
    const widths = Array.from({ length: PARTS_LISTED_UP_TO }, (_, i) => String(10 * (i + 1)));
    const q = new CostQuote(preview(widths), "correlation of a, b");
    const text = String(q);
    for (const [i, w] of widths.entries()) expect(text.split("\n")[i + 1]).toMatch(new RegExp(`^  part ${i + 1} \\(for the correlation\\) +± ${w} \\(95%\\)$`));
    expect(text).not.toContain("more parts");
    expect(quoteHtml(q)).not.toContain("hush-parts");
    expect(text.split("\n")).toHaveLength(1 + PARTS_LISTED_UP_TO + 1);
  });

  test("past it the first few are listed and the rest folded, with their count and range; expectedErrors keeps all", () => {
    // 20 parts; the rest (parts 7..20) range from 3 (part 9) to 2,100,000,000 (part 20).
    const widths = Array.from({ length: 20 }, (_, i) => (i === 8 ? "3" : i === 19 ? "2100000000" : String(500 + i)));
    const q = new CostQuote(preview(widths), "describe");
    const text = String(q);
    const lines = text.split("\n");
    expect(lines).toHaveLength(1 + PARTS_SHOWN + 1 + 1);
    for (let i = 1; i <= PARTS_SHOWN; i++) expect(lines[i]).toContain(`part ${i} (for the correlation)`);
    expect(text).not.toContain(`part ${PARTS_SHOWN + 1} (`);
    expect(lines[PARTS_SHOWN + 1]).toBe("  … 14 more parts: ± 3 to ± 2,100,000,000 (95%; every part: .expectedErrors)");
    expect(q.expectedErrors).toHaveLength(20);
    // HTML: the same first rows in the table, every other part in the folded one.
    const html = quoteHtml(q);
    const fold = html.indexOf('<details class="hush-parts"');
    expect(fold).toBeGreaterThan(0);
    expect(html.slice(fold)).toContain("<summary");
    expect(html.slice(fold)).toContain("14 more parts: ± 3 to ± 2,100,000,000");
    for (let i = 1; i <= 20; i++) {
      const at = html.indexOf(`part ${i} (for the correlation)`);
      expect(at, `part ${i}`).toBeGreaterThan(0);
      expect(at > fold, `part ${i} folded`).toBe(i > PARTS_SHOWN);
    }
  });

  test("the same width for every part folds to one number", () => {
    const q = new CostQuote(preview([...Array.from({ length: 6 }, (_, i) => String(i + 1)), ...Array(5).fill("40")]), "describe");
    expect(String(q)).toContain("  … 5 more parts: ± 40 (95%; every part: .expectedErrors)");
  });
});
