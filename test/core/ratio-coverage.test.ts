/**
 * Coverage and width of the mean, variance and std intervals (docs/methods.md §8, §12.2), through
 * the finishers the curator's workers run (runtime/curator/aggregates/finishers.ts), 2,000 releases
 * per case with fixed seeds, on invented data (500 rows of whole minutes in [0, 100]).
 *
 * - Coverage: the number of intervals holding the true value must lie in the two-sided 99.9%
 *   binomial band of 2,000 releases between the band's low end at the nominal 95% and its high end
 *   at 97% (the target [95%, 97%]). Band ends from scipy.stats.binom.ppf (Debian python3-scipy,
 *   run from the test), cross-checked with the project's binomialBand.
 * - Width: the mean width over the releases must be at most 1.15 times the width of the best
 *   noise-only interval, estimate +- h*, where h* is the 95% quantile of |estimate - true value|
 *   under the noise alone with the true count known (docs/methods.md §8): simulated here with
 *   20,000 draws from the same exact samplers.
 */
import { execFileSync } from "node:child_process";
import { describe, expect, it } from "vitest";
import { SEARCH_CELLS } from "../../runtime/core/intervals.js";
import { addNoise, calibrate, type NoiseLaw } from "../../runtime/core/mechanisms.js";
import { Bits, seededBytes } from "../../runtime/core/random.js";
import { Rational } from "../../runtime/core/rational.js";
import { FINISHERS, type MeanRecipe, type SpreadRecipe } from "../../runtime/curator/aggregates/finishers.js";
import { binomialBand } from "./stats.js";

const R = Rational.parse;
const RELEASES = 2000;
const ORACLE_DRAWS = 20000;
const half = R("1/2");
const lower = R("0");
const upper = R("100");
const centre = R("50");

// Invented data: 500 waiting times in whole minutes, roughly 40 +- 15, within [0, 100].
const dataBits = new Bits(seededBytes("ratio-coverage-data"));
const xs = Array.from({ length: 500 }, () => Math.max(0, Math.min(100, Math.round(40 + 26 * (dataBits.uniformSmall(1000) / 1000 - 0.5)))));
const n = BigInt(xs.length);
const s = xs.reduce((a, x) => a + BigInt(x), 0n);
const q = xs.reduce((a, x) => a + BigInt(x * x), 0n);
const trueMean = Rational.of(s, n);
const trueVar = Rational.of(q, n).sub(trueMean.mul(trueMean));

function band(p: number): { lo: number; hi: number } {
  const out = execFileSync("python3", ["-c", `from scipy.stats import binom; print(int(binom.ppf(0.0005, ${RELEASES}, ${p})), int(binom.ppf(0.9995, ${RELEASES}, ${p})))`], { encoding: "utf8" });
  const [lo, hi] = out.trim().split(" ").map(Number);
  return { lo, hi };
}

function quantile95(errors: number[]): number {
  const sorted = errors.map(Math.abs).sort((a, b) => a - b);
  return sorted[Math.ceil(0.95 * sorted.length) - 1];
}

const grid = { labels: [] as string[][], column: "wait", lowerUnits: 0n, upperUnits: 100n, lower, upper, centre, half, confidence: 0.95 };
// Centred sums as the finisher forms them: d = 2x - 100 half-units.
const d = 2n * s - 100n * n;
const d2 = 4n * q - 400n * s + 10000n * n;

function meanCase(countLaw: NoiseLaw, sumLaw: NoiseLaw, seed: string) {
  const recipe: MeanRecipe = { ...grid, countLaw, sumLaw };
  const bits = new Bits(seededBytes(seed));
  let hits = 0;
  let width = 0;
  for (let i = 0; i < RELEASES; i++) {
    const [row] = FINISHERS.mean(recipe, [[n, s]], bits);
    const lo = R(row.low as string);
    const hi = R(row.high as string);
    if (lo.le(trueMean) && trueMean.le(hi)) hits++;
    width += hi.sub(lo).toNumber();
  }
  const errors: number[] = [];
  for (let i = 0; i < ORACLE_DRAWS; i++) {
    const N = addNoise(n, countLaw, bits);
    const S = addNoise(d, sumLaw, bits);
    const est = N > 0n ? Math.min(100, Math.max(0, 50 + Number(S) / (2 * Number(N)))) : 50;
    errors.push(est - trueMean.toNumber());
  }
  return { hits, ratio: width / RELEASES / (2 * quantile95(errors)) };
}

function spreadCase(stat: "variance" | "std", countLaw: NoiseLaw, sumLaw: NoiseLaw, squaresLaw: NoiseLaw, seed: string) {
  const recipe: SpreadRecipe = { ...grid, stat, countLaw, sumLaw, squaresLaw };
  const bits = new Bits(seededBytes(seed));
  const truth = stat === "variance" ? trueVar.toNumber() : Math.sqrt(trueVar.toNumber());
  let hits = 0;
  let width = 0;
  for (let i = 0; i < RELEASES; i++) {
    const [row] = FINISHERS.spread(recipe, [[n, s, q]], bits);
    const lo = Number(row.low);
    const hi = Number(row.high);
    // The std's ends are rounded outward to 12 digits; the truth is compared in binary64, far from them.
    if (lo <= truth && truth <= hi) hits++;
    width += hi - lo;
  }
  const errors: number[] = [];
  for (let i = 0; i < ORACLE_DRAWS; i++) {
    const N = Number(addNoise(n, countLaw, bits));
    const S = Number(addNoise(d, sumLaw, bits)) / 2;
    const Q = Number(addNoise(d2, squaresLaw, bits)) / 4;
    const v = N > 0 ? Math.min(2500, Math.max(0, Q / N - (S / N) ** 2)) : 0;
    errors.push((stat === "variance" ? v : Math.sqrt(v)) - truth);
  }
  return { hits, ratio: width / RELEASES / (2 * quantile95(errors)) };
}

describe("ratio intervals: coverage in [95%, 97%] and width within 1.15 of the best noise-only interval, 2,000 releases each", () => {
  const at95 = band(0.95);
  const at97 = band(0.97);
  it("band ends from scipy agree with the project's binomialBand", () => {
    expect(binomialBand(RELEASES, 0.95, 0.001)).toEqual(at95);
    expect(binomialBand(RELEASES, 0.97, 0.001)).toEqual(at97);
  });

  const cases: [string, () => { hits: number; ratio: number }][] = [
    ["mean, discrete Laplace, epsilon 1 (1/2 + 1/2)", () => meanCase(calibrate(1n, { epsilon: half }), calibrate(100n, { epsilon: half }), "rc-mean-lap")],
    ["mean, discrete Gaussian, rho 1/4 (1/8 + 1/8)", () => meanCase(calibrate(1n, { rho: R("1/8") }), calibrate(100n, { rho: R("1/8") }), "rc-mean-gau")],
    ["variance, discrete Gaussian, rho 1/4 (1/12 each)", () => spreadCase("variance", calibrate(1n, { rho: R("1/12") }), calibrate(100n, { rho: R("1/12") }), calibrate(10000n, { rho: R("1/12") }), "rc-var-gau")],
    ["std, discrete Gaussian, rho 1/2 (1/6 each)", () => spreadCase("std", calibrate(1n, { rho: R("1/6") }), calibrate(100n, { rho: R("1/6") }), calibrate(10000n, { rho: R("1/6") }), "rc-std-gau")],
    ["variance, discrete Laplace, epsilon 1 (1/3 each)", () => spreadCase("variance", calibrate(1n, { epsilon: R("1/3") }), calibrate(100n, { epsilon: R("1/3") }), calibrate(10000n, { epsilon: R("1/3") }), "rc-var-lap")],
  ];
  it("variance over more than 64 cells (union-bound quantile, intervals.ts SEARCH_CELLS): 31 releases x 65 cells cover at least nominally", () => {
    const countLaw = calibrate(1n, { epsilon: R("1/3") });
    const sumLaw = calibrate(100n, { epsilon: R("1/3") });
    const squaresLaw = calibrate(10000n, { epsilon: R("1/3") });
    const cells = SEARCH_CELLS + 1;
    const recipe: SpreadRecipe = { ...grid, labels: [Array.from({ length: cells }, (_, i) => `k${i}`)], stat: "variance", countLaw, sumLaw, squaresLaw };
    const bits = new Bits(seededBytes("rc-var-union"));
    let hits = 0;
    let total = 0;
    for (let i = 0; total < RELEASES; i++) {
      for (const row of FINISHERS.spread(recipe, Array.from({ length: cells }, () => [n, s, q]), bits)) {
        if (R(row.low as string).le(trueVar) && trueVar.le(R(row.high as string))) hits++;
        total++;
      }
    }
    console.log(`variance over ${cells} cells: coverage ${hits}/${total}`);
    expect(total).toBe(31 * cells);
    expect(hits).toBeGreaterThanOrEqual(binomialBand(total, 0.95, 0.001).lo);
  }, 600_000);

  for (const [name, run] of cases) {
    it(name, () => {
      const { hits, ratio } = run();
      console.log(`${name}: coverage ${hits}/${RELEASES}, width ratio ${ratio.toFixed(3)}`);
      expect(hits).toBeGreaterThanOrEqual(at95.lo);
      expect(hits).toBeLessThanOrEqual(at97.hi);
      expect(ratio).toBeLessThanOrEqual(1.15);
    }, 600_000);
  }
});
