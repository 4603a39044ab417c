/**
 * The data's and the steward's words in a release's text (runtime/protocol/words.ts): which words
 * a plan holds, and the isolates the kernel sets right-to-left words in. The bidi behaviour the
 * isolates guard against is UAX #9 (rules W2 and N1: European digits after an Arabic letter become
 * Arabic numbers and join its right-to-left run; section 2.7: an isolate keeps a run's direction
 * from its neighbours), cited from the standard's text as recalled, not run here.
 */
import { describe, expect, it } from "vitest";
import { FSI, PDI, RIGHT_TO_LEFT, isolateRightToLeft, planWords } from "../../runtime/protocol/words.js";

describe("planWords", () => {
  it("takes column names, the dataset and filter values with a letter, and nothing a figure is made of", () => {
    const plan = {
      v: 1,
      dataset: "visits",
      measure: { kind: "mean", column: "wait_minutes" },
      privacy: { epsilon: "0.1" },
      confidence: 0.95,
      groupBy: [{ column: "district" }, { column: "age", bins: 4 }],
      where: {
        op: "and",
        of: [
          { op: "eq", column: "district", value: "Zone\u20133" },
          { op: "in", column: "reason", values: ["check-up", "2024", "منطقة ٣"] },
          { op: "not", of: { op: "ge", column: "age", value: 65 } },
          { op: "eq", column: "code", value: "-12.5" },
        ],
      },
    };
    expect(planWords(plan).sort()).toEqual(["age", "check-up", "code", "district", "reason", "visits", "wait_minutes", "Zone\u20133", "منطقة ٣"].sort());
  });

  it("returns nothing for what is not a plan, and stops at a bounded depth", () => {
    expect(planWords(null)).toEqual([]);
    expect(planWords("visits")).toEqual([]);
    let deep: unknown = { column: "bottom" };
    for (let i = 0; i < 10_000; i++) deep = { of: deep };
    expect(planWords(deep)).toEqual([]);
  });
});

describe("isolateRightToLeft", () => {
  it("sets each word with a right-to-left letter in FSI ... PDI, every time it occurs, and leaves the rest alone", () => {
    const text = "count where district = منطقة ٣ = 120 [-120, 360]\nمنطقة ٣ again; Zone\u20133 stays";
    const out = isolateRightToLeft(text, ["منطقة ٣", "Zone\u20133", "district"]);
    expect(out).toBe(`count where district = ${FSI}منطقة ٣${PDI} = 120 [-120, 360]\n${FSI}منطقة ٣${PDI} again; Zone\u20133 stays`);
    // Nothing to isolate: the same string.
    expect(isolateRightToLeft("age = 40 ± 2", ["age", "Northgate"])).toBe("age = 40 ± 2");
  });

  it("prefers the longest word, so a shorter one inside it is not isolated twice", () => {
    expect(isolateRightToLeft("שלום עולם 5 ± 1", ["שלום", "שלום עולם"])).toBe(`${FSI}שלום עולם${PDI} 5 ± 1`);
  });

  it("takes words as text, not as patterns", () => {
    const w = "א (b|c) [d] $1 \\";
    expect(isolateRightToLeft(`x ${w} y`, [w])).toBe(`x ${FSI}${w}${PDI} y`);
  });

  it("knows the right-to-left scripts by script (Arabic-Indic digits are of the Arabic script too), not other scripts or shared punctuation", () => {
    for (const s of ["\u05d0", "\u0639", "\u0710", "\u0780", "\u07ca", "\u{1e900}", "\u0663"]) expect(RIGHT_TO_LEFT.test(s), s).toBe(true);
    for (const s of ["a", "\u2014", "5", "\u0416", "\u4e2d", "\u00b7", "\u00b1"]) expect(RIGHT_TO_LEFT.test(s), s).toBe(false);
  });
});
