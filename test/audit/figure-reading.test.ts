/** The two readers under the audit's view checks: text/html to text (parse5), and text to figures. */
import { describe, expect, it } from "vitest";
import { figureAt, figureText, figuresIn, oddCharacters } from "../../cli/audit/figure-text.js";
import { htmlText } from "../../cli/audit/html-text.js";

describe("figureText: text in the kernel's spelling", () => {
  it("folds the digits of every numeral system to ASCII", () => {
    // Code points from the Unicode code charts (Arabic U+0660.., Devanagari U+0966.., Bengali
    // U+09E6.., Thai U+0E50.., Fullwidth U+FF10.., Mathematical Alphanumeric Symbols U+1D7CE..).
    expect(figureText("\u0660\u0661\u0662\u0663\u0664\u0665\u0666\u0667\u0668\u0669")).toBe("0123456789");
    expect(figureText("\u06f4\u0967\u09ea\u0e59\uff17")).toBe("41497");
    // The fifth set of mathematical digits (monospace, U+1D7F6..1D7FF): NFKC folds them too.
    expect(figureText("\u{1d7f6}\u{1d7ff}")).toBe("09");
  });

  it("folds every minus and dash to '-', drops invisible characters, keeps runs of spaces, tabs and line breaks", () => {
    expect(figureText("\u2212\u2010\u2011\u2012\u2013\u2014\u2015\u02d7\u2796\u207b\ufe63\uff0d")).toBe("-".repeat(12));
    expect(figureText("1\u200b5\u00ad \u2060")).toBe("15 ");
    expect(figureText("a\u00a0\u2009\u202f\u3000b\tc\r\nd")).toBe("a    b\tc\nd");
  });
});

describe("figuresIn and figureAt: figures standing on their own", () => {
  it("reads a figure beside letters, digits, separators or a decimal-looking mark as not alone", () => {
    for (const t of ["1O5 ± 1", "5 ± 1O", "1,5 ± 1", "1 5 ± 1", "5 ± 1\u00b75", "5 ± 1 5", "x-5 ± 1", "5 ± 1,5"]) {
      expect(figuresIn(t).every((f) => !f.alone), t).toBe(true);
      expect(figureAt(t, "5 ± 1", 0), t).toBe(-1);
    }
  });

  it("reads the kernel's own layouts as alone (scalar line, aligned rows, table cells, brackets)", () => {
    for (const t of ["count = 5 ± 1 (95%) · cost ε=0.1", "  2024  5 ± 1", "2024\t5 ± 1\t[4, 6]", "(5 ± 1)", "5 ± 1.", "mean: -0.5 ± 1.25e-9\n"]) {
      const f = figuresIn(t);
      expect(f.length, t).toBe(1);
      expect(f[0].alone, t).toBe(true);
    }
  });
});

describe("oddCharacters", () => {
  it("names each character that can change how a figure reads, and none of the kernel's own", () => {
    expect(oddCharacters("count = 5 ± 1 (95%) · cost ε=0.1 · total 0.1 / 1 — replayed ⓘ note\n")).toEqual([]);
    const found = oddCharacters("\u22121 1\u200b 2\u00b9 \u0663 5\u0332 \ue000 1\u00b75");
    expect(found.map((o) => o.codePoint)).toEqual(["U+2212", "U+200B", "U+00B9", "U+0663", "U+0332", "U+E000", "U+00B7"]);
  });
});

describe("htmlText: what a person reads in a text/html view", () => {
  it("decodes every entity and drops comments, CDATA and tags without adding spaces", () => {
    expect(htmlText("&minus;1&ZeroWidthSpace;5<!-- x --><![CDATA[y]]><b>0</b> &PlusMinus; 1", null)).toEqual({ text: "\u22121\u200b50 ± 1", problems: [] });
  });

  it("separates blocks by line breaks and table cells by tabs, and joins what a browser joins", () => {
    expect(htmlText("<table><tr><td>a</td><td>5 ± 1</td></tr></table><div>x</div>y<br>z", null).text).toBe("a\t5 ± 1\nx\ny\nz");
    // Outside a table a <td> is dropped by the parser, so its text runs on (innerHTML of a <div>).
    expect(htmlText("<td>1</td>5 ± 1", null).text).toBe("15 ± 1");
    expect(htmlText(`<div style="display:inline-block">1</div>5`, null).text).toBe("15");
    expect(htmlText("<pre>  a  b</pre>", null).text).toBe("a  b");
  });

  it("reports markup the kernel does not write, and none of what it writes", () => {
    expect(htmlText(`<div class="hush-release" style="font-family:system-ui,-apple-system,'Segoe UI',sans-serif;font-size:13px;opacity:0.75"><span style="display:inline-block;border:1px solid #2e7d32;color:#2e7d32">b</span></div>`, null).problems).toEqual([]);
    const cases: [string, RegExp][] = [
      [`<span style="display:none">x</span>`, /display: none/],
      [`<span class="hidden">x</span>`, /class "hidden"/],
      [`<span hidden>x</span>`, /attribute "hidden"/],
      [`<sup>2</sup>`, /<sup>/],
      [`<svg><text>1</text></svg>`, /<svg>/],
      [`<span style="font-family:Wingdings">1</span>`, /font-family/],
      [`<span style="margin-left:-1em">1</span>`, /margin-left/],
      [`<span style="background:#fff;color:#2e7d32">1</span>`, /background/],
      [`<img src="data:image/png;base64,AAAA">`, /not the output's own chart/],
      [`<table><tr><td style="padding:0">1</td></tr></table>`, /cells drawn without space/],
    ];
    for (const [html, why] of cases) expect(htmlText(html, null).problems.join("; "), html).toMatch(why);
  });

  it("reads the kernel's disclosure element, and reports a figure folded inside it (hidden until opened)", () => {
    const words = `<details class="hush-notes"><summary>details and 2 notes</summary><div>method: released value ± the smallest half-width</div><ul><li>Values are clamped to [0, 240].</li></ul></details>`;
    expect(htmlText(`<div class="hush-release"><span class="hush-value">177,760</span> <span class="hush-errorbar">± 480</span>${words}</div>`, null)).toEqual({
      text: "177,760 ± 480\ndetails and 2 notes\nmethod: released value ± the smallest half-width\nValues are clamped to [0, 240].",
      problems: [],
    });
    // A figure in the summary is drawn; one in the folded part is not, until a reader opens it.
    expect(htmlText(`<details><summary>177,760 ± 480</summary>words</details>`, null).problems).toEqual([]);
    expect(htmlText(`<details><summary>more</summary><div><b>177,760 ± 480</b></div></details>`, null).problems).toEqual(["a figure with an error bar inside a folded <details> (hidden until opened)"]);
    expect(htmlText(`<details><summary>more</summary>24.3 [22.6, 25.9]</details>`, null).problems).toHaveLength(1);
  });

  it("knows the kernel's classes by name: another hush-looking class is reported", () => {
    for (const c of ["hush-release", "hush-value", "hush-errorbar", "hush-loss", "hush-notes", "hush-refusal", "hush-chart"]) {
      expect(htmlText(`<span class="${c}">x</span>`, null).problems, c).toEqual([]);
    }
    expect(htmlText(`<span class="hush-hidden">x</span>`, null).problems).toEqual(['class "hush-hidden" on <span>']);
  });

  it("reads figures with thousands separators as one number, and a broken group as digits run into a figure", () => {
    expect(figuresIn("count = 177,760 ± 480").map((f) => [f.text, f.alone])).toEqual([["177,760 ± 480", true]]);
    expect(figuresIn("1,234,567.89 [1,234,000.5, 1,235,000]").map((f) => [f.text, f.alone])).toEqual([["1,234,567.89 [1,234,000.5, 1,235,000]", true]]);
    expect(figuresIn("12,34 ± 1").every((f) => !f.alone)).toBe(true);
    expect(figuresIn("1234,567 ± 1").every((f) => !f.alone)).toBe(true);
    expect(figureAt("x 177760 ± 480", "177,760 ± 480", 0)).toBe(-1);
  });

  it("reads a deeply nested view without exhausting the stack", () => {
    const r = htmlText(`${"<span>".repeat(50_000)}5 ± 1`, null);
    expect(r.text).toBe("5 ± 1");
  });
});
