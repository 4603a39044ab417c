/**
 * Review checks of the exponential-mechanism quantile at small epsilon (docs/methods.md §9): the draw
 * keeps the exact law of the dyadic weights, and a small per-row epsilon with many rows is answered
 * without forming weights of millions of bits (it took about a minute per quantile at epsilon 0.001
 * over 2001 candidates and 200000 rows, and minutes for a describe; this suite runs under vitest's
 * default per-test limit).
 */
import { describe, expect, it } from "vitest";
import { dyadicWeights, exponentialQuantile, quantileCosts } from "../../runtime/core/quantile.js";
import { Bits, seededBytes } from "../../runtime/core/random.js";
import { Rational } from "../../runtime/core/rational.js";
import { chiSquarePValue } from "./stats.js";

const R = Rational.parse;

describe("review: exponential-mechanism quantile at small epsilon", () => {
  it("per-row epsilon 0.001, 2001 candidates, 200000 rows: draws land within the utility guarantee", () => {
    const m = 2001;
    const n = 200000n;
    // Evenly spread ranks: r_j = n j / (m - 1), so the median cost is |2 r_j - n| = 200 |j - 1000|.
    const below = Array.from({ length: m }, (_, j) => (n * BigInt(j)) / BigInt(m - 1));
    const bits = new Bits(seededBytes("review-q"));
    for (let i = 0; i < 5; i++) {
      const r = exponentialQuantile({ countsBelow: below, n, p: R("1/2"), epsilon: R("0.001"), bits });
      // McSherry & Talwar utility bound (docs/methods.md §9): cost <= OPT + (2 Delta'/eps)(ln m + s) with
      // probability >= 1 - e^-s; s = 10 gives 2000 * (ln 2001 + 10) ~ 35200, i.e. |j - 1000| <= 176.
      expect(Math.abs(r.index - 1000)).toBeLessThanOrEqual(176);
    }
  });

  it("draws follow the exact dyadic probabilities when many trials are needed (epsilon 0.2, 10^5 draws, chi-square at 0.001)", () => {
    // docs/methods.md §9 worked example data; dyadic base 2^-9 precision as in [C9.3a].
    const D = [1, 2, 2, 4, 5, 5, 5, 8, 9, 10];
    const countsBelow = Array.from({ length: 11 }, (_, y) => BigInt(D.filter((x) => x < y).length));
    const first = exponentialQuantile({ countsBelow, n: 10n, p: R("1/2"), epsilon: R("0.2"), bits: new Bits(seededBytes("r0")), baseBits: 9 });
    const { costs } = quantileCosts(countsBelow, 10n, R("1/2"));
    const w = dyadicWeights(costs, first.baseNum, 9);
    const total = w.reduce((a, b) => a + b, 0n);
    const probs = w.map((x) => Rational.of(x, total).toNumber());
    const bits = new Bits(seededBytes("r1"));
    const draws = 100_000;
    const counts = new Array<number>(11).fill(0);
    for (let i = 0; i < draws; i++) counts[exponentialQuantile({ countsBelow, n: 10n, p: R("1/2"), epsilon: R("0.2"), bits, baseBits: 9 }).index]++;
    let stat = 0;
    for (let j = 0; j < 11; j++) stat += (counts[j] - draws * probs[j]) ** 2 / (draws * probs[j]);
    expect(chiSquarePValue(stat, 10)).toBeGreaterThan(0.001);
  });
});
