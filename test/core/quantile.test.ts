import { describe, expect, it } from "vitest";
import { BadInputError } from "../../runtime/errors.js";
import { TRIAL_PATH_LIMIT, dyadicBase, dyadicWeights, exponentialQuantile, quantileCosts, trialPath } from "../../runtime/core/quantile.js";
import { Bits, seededBytes } from "../../runtime/core/random.js";
import { Rational } from "../../runtime/core/rational.js";
import { chiSquarePValue } from "./stats.js";

const R = Rational.parse;
// docs/methods.md §9 worked example: D = [1, 2, 2, 4, 5, 5, 5, 8, 9, 10], candidates 0..10, median, epsilon = 1
const D = [1, 2, 2, 4, 5, 5, 5, 8, 9, 10];
const countsBelow = Array.from({ length: 11 }, (_, y) => BigInt(D.filter((x) => x < y).length));

describe("exponential-mechanism quantile (docs/methods.md §9)", () => {
  it("[C9.1] costs |2 r(y) - n| -> [10, 10, 8, 4, 4, 2, 4, 4, 4, 6, 8], Delta' = 1", () => {
    const { costs, sensitivity } = quantileCosts(countsBelow, 10n, R("1/2"));
    expect(costs).toEqual([10n, 10n, 8n, 4n, 4n, 2n, 4n, 4n, 4n, 6n, 8n]);
    expect(sensitivity).toBe(1n);
    // q = 1/4: Delta' = max(a, b - a) = 3
    expect(quantileCosts(countsBelow, 10n, R("1/4")).sensitivity).toBe(3n);
  });
  it("[C9.2a] natural-base P(y = 5) = 0.321446467588; [C9.2b] P(y in {4,5,6}) = 0.557953561314", () => {
    const costs = [10, 10, 8, 4, 4, 2, 4, 4, 4, 6, 8];
    const w = costs.map((c) => Math.exp(-c / 2));
    const z = w.reduce((a, b) => a + b, 0);
    expect(w[5] / z).toBeCloseTo(0.321446467588, 11);
    expect((w[4] + w[5] + w[6]) / z).toBeCloseTo(0.557953561314, 11);
  });
  it("[C9.3a] dyadic base ceil(512 e^(-1/2))/512 = 311/512; [C9.3b] 2 ln(1/beta) = 0.997063425721", () => {
    expect(dyadicBase(R("1"), 1n, 9)).toBe(311n);
    const r = exponentialQuantile({ countsBelow, n: 10n, p: R("0.5"), epsilon: R("1"), bits: new Bits(seededBytes("q0")), baseBits: 9 });
    expect(r.baseNum).toBe(311n);
    expect(r.epsilonEffective).toBeCloseTo(0.997063425721, 11);
    expect(r.epsilonUsed.toString()).toBe("1");
  });
  it("[C9.3c] integer weights beta^c 512^cmax, exactly; [C9.3d] P(y = 5) = 2361183241434822606848/7363251870613539773761", () => {
    const { costs } = quantileCosts(countsBelow, 10n, R("1/2"));
    const w = dyadicWeights(costs, 311n, 9);
    expect(w.map(String)).toEqual([
      "8464550303319308288547601",
      "8464550303319308288547601",
      "22941564652074903609278464",
      "168523830500786142177132544",
      "168523830500786142177132544",
      "456752008589634954713890816",
      "168523830500786142177132544",
      "168523830500786142177132544",
      "168523830500786142177132544",
      "62178777350870271520669696",
      "22941564652074903609278464",
    ]);
    const total = w.reduce((a, b) => a + b, 0n);
    expect(Rational.of(w[5], total).toString()).toBe("2361183241434822606848/7363251870613539773761");
  });
  it("draws follow the exact dyadic probabilities (10^5 draws, chi-square at 0.001)", () => {
    const { costs } = quantileCosts(countsBelow, 10n, R("1/2"));
    const w = dyadicWeights(costs, 311n, 9);
    const total = w.reduce((a, b) => a + b, 0n);
    const probs = w.map((x) => Rational.of(x, total).toNumber());
    const bits = new Bits(seededBytes("q1"));
    const n = 100_000;
    const counts = new Array<number>(11).fill(0);
    for (let i = 0; i < n; i++) counts[exponentialQuantile({ countsBelow, n: 10n, p: R("1/2"), epsilon: R("1"), bits, baseBits: 9 }).index]++;
    let stat = 0;
    for (let j = 0; j < 11; j++) stat += (counts[j] - n * probs[j]) ** 2 / (n * probs[j]);
    expect(chiSquarePValue(stat, 10)).toBeGreaterThan(0.001);
    expect(probs[5]).toBeCloseTo(0.320671258151, 11); // [C9.3d] decimal
  });
  it("where beta is near 1 (the power path), draws still follow the exact dyadic probabilities (30,000 draws, chi-square at 0.001)", () => {
    // The worked example with every row repeated K = 10^5 times and epsilon 1/K: costs K times
    // [10, 10, 8, ...], beta = x/2^20 with x = ceil(2^20 e^(-1/(2K))) = 2^20 - 5, so a proposal
    // would need about 2^20/5 trials and the draw compares with bounds on beta^c instead
    // (quantile.ts drawByPowers). Reference: P(j) proportional to beta^(c_j), here in binary64
    // (exp(c ln beta); relative error far below the test's resolution), with the exact costs.
    const K = 100_000n;
    const below = countsBelow.map((r) => r * K);
    const n = 10n * K;
    const epsilon = R("1/100000");
    const x = dyadicBase(epsilon, 1n, 20);
    expect(x).toBe((1n << 20n) - 5n);
    expect(trialPath(11, x, 1n << 20n)).toBe(false);
    expect(trialPath(11, 311n, 512n)).toBe(true); // the worked example above keeps the trials
    expect(2 * 11 * (2 ** 20 / 5)).toBeGreaterThan(TRIAL_PATH_LIMIT);
    const { costs } = quantileCosts(below, n, R("1/2"));
    const lnBeta = Math.log(Number(x) / 2 ** 20);
    const cMin = costs.reduce((a, b) => (b < a ? b : a));
    const w = costs.map((c) => Math.exp(Number(c - cMin) * lnBeta));
    const z = w.reduce((a, b) => a + b, 0);
    const probs = w.map((v) => v / z);
    const bits = new Bits(seededBytes("q-powers"));
    const draws = 30_000;
    const counts = new Array<number>(11).fill(0);
    for (let i = 0; i < draws; i++) counts[exponentialQuantile({ countsBelow: below, n, p: R("1/2"), epsilon, bits }).index]++;
    let stat = 0;
    for (let j = 0; j < 11; j++) stat += (counts[j] - draws * probs[j]) ** 2 / (draws * probs[j]);
    expect(chiSquarePValue(stat, 10)).toBeGreaterThan(0.001);
    // x rounds 2^20 e^(-1/(2K)) up, so this law is a little flatter than [C9.2a]'s natural base.
    expect(probs[5]).toBeGreaterThan(0.3);
    expect(probs[5]).toBeLessThan(0.3215);
  }, 120_000);
  it("the power path where beta^c is tiny (capped) or far below 2^-128 (a cap of 10^12): a lone candidate at cost 0 against costs of 2 x 10^9", () => {
    // Every other candidate's cost is capped (at about 8.5 x 10^6) and weighs beta^cap, about
    // e^-47.6 (below 2^-68): 2000 of them together about 4 x 10^-18 against 1 for the cost-0
    // candidate, so the draw returns it every time.
    const bits = new Bits(seededBytes("q-powers-far"));
    const m = 2001;
    const n = 2_000_000_000n;
    // cost |2 r_j - n|: 0 at candidate 1000 (r = n/2), n at every other
    const below = Array.from({ length: m }, (_, j) => (j < 1000 ? 0n : j === 1000 ? n / 2n : n));
    for (let i = 0; i < 20; i++) expect(exponentialQuantile({ countsBelow: below, n, p: R("1/2"), epsilon: R("1/100000"), bits }).index).toBe(1000);
    // With a cap of 10^12 the costs stay 2 x 10^9, weights about e^-10^4: the 128-bit bounds read
    // [0, 1] ulp for them and every comparison still rejects them.
    for (let i = 0; i < 20; i++) expect(exponentialQuantile({ countsBelow: below, n, p: R("1/2"), epsilon: R("1/100000"), bits, costCap: 10n ** 12n }).index).toBe(1000);
  }, 60_000);
  it("a cost cap leaves costs below it unchanged and flattens those above", () => {
    const bits = new Bits(seededBytes("q2"));
    const counts = new Array<number>(11).fill(0);
    for (let i = 0; i < 20_000; i++) counts[exponentialQuantile({ countsBelow, n: 10n, p: R("1/2"), epsilon: R("1"), bits, costCap: 4n }).index]++;
    // capped at 4: candidates 0,1,2 (cost 10,10,8) weigh as much as candidate 3 (cost 4)
    expect(Math.abs(counts[0] - counts[3])).toBeLessThan(6 * Math.sqrt(counts[3]));
    expect(counts[5]).toBeGreaterThan(counts[3]);
  });
  it("refuses bad inputs", () => {
    const bits = new Bits(seededBytes("q3"));
    const base = { countsBelow, n: 10n, p: R("1/2"), epsilon: R("1"), bits };
    expect(() => exponentialQuantile({ ...base, countsBelow: [] })).toThrow(BadInputError);
    expect(() => exponentialQuantile({ ...base, countsBelow: [3n, 2n] })).toThrow(/non-decreasing/);
    expect(() => exponentialQuantile({ ...base, countsBelow: [11n] })).toThrow(BadInputError);
    expect(() => exponentialQuantile({ ...base, p: R("1") })).toThrow(/strictly between/);
    expect(() => exponentialQuantile({ ...base, p: R("0") })).toThrow(BadInputError);
    expect(() => exponentialQuantile({ ...base, epsilon: R("0") })).toThrow(/epsilon/);
    expect(() => exponentialQuantile({ ...base, costCap: 0n })).toThrow(BadInputError);
  });
});
