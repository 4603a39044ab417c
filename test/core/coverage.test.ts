/**
 * Coverage of the 95% intervals in 10,000 simulated releases (docs/methods.md §12.2). Symmetric
 * intervals are checked against the two-sided 99.9% band 9427..9570 ([C12.1a], [C12.1b]) for laws
 * whose exact coverage is within 0.001 of 95%, and against the band at their exact coverage; the
 * mean and variance intervals against the one-sided limit 9431 ([C12.2]). Fixed seeds.
 */
import { describe, expect, it } from "vitest";
import { halfWidth, ratioInterval, tailProbability, varianceInterval } from "../../runtime/core/intervals.js";
import { addNoise, calibrate, type NoiseLaw } from "../../runtime/core/mechanisms.js";
import { makeGrid, sumSensitivity, toGridUnits } from "../../runtime/core/fixedpoint.js";
import { Bits, seededBytes } from "../../runtime/core/random.js";
import { Rational } from "../../runtime/core/rational.js";
import { binomialBand } from "./stats.js";

const R = Rational.parse;
const RUNS = 10_000;

function coverageOf(truth: bigint, law: NoiseLaw, bits: Bits): { hits: number; exact: number } {
  const h = halfWidth(law, 0.95);
  let hits = 0;
  for (let i = 0; i < RUNS; i++) {
    const noisy = addNoise(truth, law, bits);
    if (noisy - h <= truth && truth <= noisy + h) hits++;
  }
  return { hits, exact: 1 - tailProbability(law, h) };
}

function expectInBands(hits: number, exact: number): void {
  const band = binomialBand(RUNS, exact, 0.001);
  expect(hits).toBeGreaterThanOrEqual(band.lo);
  expect(hits).toBeLessThanOrEqual(band.hi);
  if (Math.abs(exact - 0.95) < 0.001) {
    expect(hits).toBeGreaterThanOrEqual(9427); // [C12.1a]
    expect(hits).toBeLessThanOrEqual(9570); // [C12.1b]
  }
}

describe("coverage of 95% intervals, 10,000 releases each", () => {
  it("[C12.1c/d] the band's tail probabilities are at most beta/2", () => {
    // P(X < 9427) = 0.000474302 and P(X > 9570) = 0.000475967 at p = 0.95 (docs/methods.md §12.2)
    expect(binomialBand(RUNS, 0.95, 0.001)).toEqual({ lo: 9427, hi: 9570 });
  });

  it("count, discrete Laplace (epsilon = 0.01, t = 100)", () => {
    const { hits, exact } = coverageOf(500n, calibrate(1n, { epsilon: R("0.01") }), new Bits(seededBytes("cov-count-lap")));
    expect(exact).toBeCloseTo(1 - 0.0495381351005, 12); // [C4.3c]
    expectInBands(hits, exact);
  });

  it("count, discrete Gaussian (sigma = 100)", () => {
    const { hits, exact } = coverageOf(500n, calibrate(1n, { rho: R("0.00005") }), new Bits(seededBytes("cov-count-gau")));
    expect(exact).toBeCloseTo(1 - 0.0494132899213, 12); // [C5.4c]
    expectInBands(hits, exact);
  });

  it("sum on a 0.01 grid over [0, 100], discrete Laplace at epsilon = 1 and discrete Gaussian at rho = 0.5", () => {
    const grid = makeGrid({ lower: "0", upper: "100", step: "0.01" });
    const bits = new Bits(seededBytes("cov-sum-data"));
    let truth = 0n;
    for (let i = 0; i < 2000; i++) truth += toGridUnits(bits.uniformSmall(1_000_000) / 10_000, grid) as bigint;
    const d = sumSensitivity(grid, 1);
    for (const param of [{ epsilon: R("1") }, { rho: R("0.5") }]) {
      const { hits, exact } = coverageOf(truth, calibrate(d, param), new Bits(seededBytes(`cov-sum-${JSON.stringify(Object.keys(param))}`)));
      expectInBands(hits, exact);
    }
  });

  it("mean by the pivot method covers at least nominally ([C12.2] one-sided limit 9431)", () => {
    // 400 rows in [0, 10] on grid 1, epsilon = 1 split 1/2 : 1/2 (docs/methods.md §8 setup)
    const n = 400n;
    const S = 1720n;
    const truth = Rational.of(S, n);
    for (const [name, sumLaw, countLaw] of [
      ["laplace", calibrate(10n, { epsilon: R("0.5") }), calibrate(1n, { epsilon: R("0.5") })],
      ["gaussian", calibrate(10n, { rho: R("0.25") }), calibrate(1n, { rho: R("0.25") })],
    ] as const) {
      const bits = new Bits(seededBytes(`cov-mean-${name}`));
      let hits = 0;
      for (let i = 0; i < RUNS; i++) {
        const r = ratioInterval({
          sum: { noisy: addNoise(S, sumLaw, bits), law: sumLaw },
          count: { noisy: addNoise(n, countLaw, bits), law: countLaw },
          sumStep: Rational.ONE,
          lower: R("0"),
          upper: R("10"),
          confidence: 0.95,
        });
        if (r.low.le(truth) && truth.le(r.high)) hits++;
      }
      expect(hits, name).toBeGreaterThanOrEqual(9431);
    }
  });

  it("variance by the pivot method covers at least nominally ([C12.2] one-sided limit 9431)", () => {
    // 400 rows in [0, 10], g = 1, centred at 5: half-units d = 2x - 10 (|d| <= 10), squares d^2 <= 100
    const bits = new Bits(seededBytes("cov-var-data"));
    const xs = Array.from({ length: 400 }, () => bits.uniformSmall(11));
    const n = BigInt(xs.length);
    const S = xs.reduce((a, x) => a + BigInt(2 * x - 10), 0n);
    const Q = xs.reduce((a, x) => a + BigInt((2 * x - 10) ** 2), 0n);
    const half = R("1/2");
    // population variance of the data, exactly
    const truth = Rational.of(Q, n).mul(half.mul(half)).sub(Rational.of(S, n).mul(half).mul(Rational.of(S, n).mul(half)));
    const third = R("1/3");
    const countLaw = calibrate(1n, { epsilon: third });
    const sumLaw = calibrate(10n, { epsilon: third });
    const sqLaw = calibrate(100n, { epsilon: third });
    let hits = 0;
    for (let i = 0; i < RUNS; i++) {
      const r = varianceInterval({
        count: { noisy: addNoise(n, countLaw, bits), law: countLaw },
        sum: { noisy: addNoise(S, sumLaw, bits), law: sumLaw },
        sumSquares: { noisy: addNoise(Q, sqLaw, bits), law: sqLaw },
        sumStep: half,
        squareStep: half.mul(half),
        lower: R("0"),
        upper: R("10"),
        confidence: 0.95,
      });
      if (r.low.le(truth) && truth.le(r.high)) hits++;
    }
    expect(hits).toBeGreaterThanOrEqual(9431);
  });
});
