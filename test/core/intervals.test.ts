import { describe, expect, it } from "vitest";
import { BadInputError } from "../../runtime/errors.js";
import { checkConfidence, dominatingQuantile, halfWidth, noiseVariance, ratioInterval, tailProbability, varianceInterval } from "../../runtime/core/intervals.js";
import { addNoise } from "../../runtime/core/mechanisms.js";
import { Bits, seededBytes } from "../../runtime/core/random.js";
import { calibrate, type NoiseLaw } from "../../runtime/core/mechanisms.js";
import { Rational } from "../../runtime/core/rational.js";
import { erfc, gaussianTail } from "../../runtime/core/tails.js";
import { jstat } from "./stats.js";

const R = Rational.parse;
const lap = (t: string): NoiseLaw => ({ family: "discrete-laplace", scale: R(t) });
const gau = (sigma: string): NoiseLaw => ({ family: "discrete-gaussian", sigma2: R(sigma).mul(R(sigma)) });
const rel = (a: number, b: number): number => Math.abs(a - b) / Math.abs(b);

describe("discrete Laplace tails and half-widths (docs/methods.md §4)", () => {
  // [C4.1x] variance; [C4.2x] h; [C4.3x] tail at h; [C4.4x] tail at h - 1
  const rows = [
    ["1", 1.84134718842, 3n, 0.0267796098654, 0.0727945268703],
    ["10", 199.833416634, 30n, 0.0472997873383, 0.0522743493974],
    ["100", 19999.8333342, 300n, 0.0495381351005, 0.0500360016353],
  ] as const;
  for (const [t, v, h, tailH, tailH1] of rows) {
    it(`[C4.*] t = ${t}: variance ${v}, h = ${h}, tails ${tailH} / ${tailH1}`, () => {
      const law = lap(t);
      expect(rel(noiseVariance(law), v)).toBeLessThan(1e-9);
      expect(halfWidth(law, 0.95)).toBe(h);
      expect(rel(tailProbability(law, h), tailH)).toBeLessThan(1e-9);
      expect(rel(tailProbability(law, h - 1n), tailH1)).toBeLessThan(1e-9);
    });
  }
  it("[C4.5] P(Y = 0) for t = 1 = tanh(1/2) = 0.462117157260", () => {
    // P(Y = 0) = 1 - P(|Y| > 0)
    expect(rel(1 - tailProbability(lap("1"), 0n), 0.46211715726)).toBeLessThan(1e-9);
  });
  it("[C6.3b] t = 10000 -> 29957 grid units; [C6.3c] 29957/100 in value units at g = 0.01", () => {
    const h = halfWidth(calibrate(10000n, { epsilon: R("1") }), 0.95);
    expect(h).toBe(29957n);
    expect(R("0.01").mul(h).toString()).toBe("29957/100");
  });
});

describe("discrete Gaussian tails and half-widths (docs/methods.md §5)", () => {
  // [C5.3x] h; [C5.4x] tail at h; [C5.5x] tail at h - 1
  const rows = [
    ["1", 2n, 0.00913434283561, 0.117116275284],
    ["10", 20n, 0.0402811070741, 0.0510793003767],
    ["100", 196n, 0.0494132899213, 0.0505821088079],
  ] as const;
  for (const [s, h, tailH, tailH1] of rows) {
    it(`[C5.3-5] sigma = ${s}: h = ${h}, tails ${tailH} / ${tailH1}`, () => {
      const law = gau(s);
      expect(halfWidth(law, 0.95)).toBe(h);
      expect(rel(tailProbability(law, h), tailH)).toBeLessThan(1e-9);
      expect(rel(tailProbability(law, h - 1n), tailH1)).toBeLessThan(1e-9);
    });
  }
  it("[C5.1a-c] exact variance: sigma = 1 -> 0.999999788768, sigma = 3 -> 9, sigma = 10 -> 100", () => {
    expect(rel(noiseVariance(gau("1")), 0.999999788768)).toBeLessThan(1e-9);
    expect(rel(noiseVariance(gau("3")), 9)).toBeLessThan(1e-9);
    expect(rel(noiseVariance(gau("10")), 100)).toBeLessThan(1e-9);
  });
  it("large sigma: the Euler–Maclaurin route meets direct summation and the normal limit", () => {
    // both routes at sigma = 2000 (direct) vs 2000.0001 (E–M)
    const a = gaussianTail(2000 * 2000, 3920);
    const b = gaussianTail(2000.0001 ** 2, 3920);
    expect(rel(a, b)).toBeLessThan(1e-6);
    // continuous normal two-sided tail P(|Z| > (h + 1/2)/sigma) is the large-sigma limit (jstat)
    const sigma = 10000;
    const h = halfWidth(gau(String(sigma)), 0.95);
    const zTail = 2 * (1 - jstat.normal.cdf((Number(h) + 0.5) / sigma, 0, 1));
    expect(rel(tailProbability(gau(String(sigma)), h), zTail)).toBeLessThan(1e-4);
    expect(Number(h)).toBeCloseTo(1.95996398454 * sigma, -1); // [C11.3a] z_0.975
  });
  it("erfc matches jstat", () => {
    for (const x of [0, 0.3, 1.2, 1.99, 2.01, 3.5]) expect(rel(erfc(x), jstat.erfc(x))).toBeLessThan(1e-9);
    // jstat underflows to 0 here; erfc(6) = 2.15197367124989e-17 (mpmath.erfc(6), also Python math.erfc)
    expect(rel(erfc(6), 2.15197367124989e-17)).toBeLessThan(1e-9);
  });
});

describe("mean interval by the pivot method (docs/methods.md §8 worked example)", () => {
  // values in [0, 10], g = 1, k = 1; t_S = 20, t_N = 2; S~ = 5000, N~ = 1000 (uncentred, so |m| <= 10)
  const res = ratioInterval({
    sum: { noisy: 5000n, law: lap("20") },
    count: { noisy: 1000n, law: lap("2") },
    sumStep: Rational.ONE,
    lower: R("0"),
    upper: R("10"),
    confidence: 0.95,
  });
  // Exact tails P(|X + b Y| > h), X ~ discrete Laplace(20), Y ~ discrete Laplace(2), summed over
  // the pmfs with mpmath at 25 digits (python3, independently of this code), at the coefficients
  // rounded up to the grid 2^(i/16) (10 -> 2^(54/16) = 10.3747164372, 5.066 -> 2^(38/16) = 5.1873582186):
  //   b = 10.3747: h = 83 -> 0.0507595922508, h = 84 -> 0.0487056231945 (least exact h: 84)
  //   b = 5.18736: h = 65 -> 0.0518368030368, h = 66 -> 0.0493385338566 (least exact h: 66)
  it("[C8.4a] q at |m| <= 10 is 84, [C8.4b] at |m| <= 5.066 it is 66: the exact least h at the grid coefficient", () => {
    expect(dominatingQuantile(lap("20"), [{ law: lap("2"), c: R("10") }], 0.05).q).toBe(84n);
    expect(dominatingQuantile(lap("20"), [{ law: lap("2"), c: R("5.066") }], 0.05).q).toBe(66n);
    expect(dominatingQuantile(lap("20"), [], 0.05).q).toBe(halfWidth(lap("20"), 0.95));
  });
  it("[C8.5] rounds narrow |m| from 10 to 5.066: interval [2467/500, 2533/500] = (5000 -+ 66)/1000", () => {
    expect(res.low.toString()).toBe("2467/500");
    expect(res.high.toString()).toBe("2533/500");
    expect(res.estimate?.toString()).toBe("5");
    expect(res.noiseOnly).toBe(true);
    expect(res.method).toMatch(/pivot method.*±66 sum units for \|m\| up to 5\.066/);
    expect(res.coverage).toBeGreaterThanOrEqual(0.95);
  });
  it("is narrower than the corner method's [4926/1007, 5074/993] ([C8.2a], [C8.2b])", () => {
    expect(res.low.gt(R("4926/1007")) && res.high.lt(R("5074/993"))).toBe(true);
  });
  it("reports [L, U], says why, and gives no estimate when the noisy count is not positive", () => {
    for (const n of [0n, -3n]) {
      const r = ratioInterval({ sum: { noisy: 10n, law: lap("20") }, count: { noisy: n, law: lap("2") }, sumStep: Rational.ONE, lower: R("0"), upper: R("10"), confidence: 0.95 });
      expect(r.estimate).toBeNull();
      expect([r.low.toString(), r.high.toString()]).toEqual(["0", "10"]);
      expect(r.method).toMatch(/noisy count is not positive/);
    }
  });
  it("a small positive noisy count gives a wide interval within the range, never a wrong narrow one", () => {
    const r = ratioInterval({ sum: { noisy: 40n, law: lap("20") }, count: { noisy: 3n, law: lap("2") }, sumStep: Rational.ONE, lower: R("0"), upper: R("10"), confidence: 0.95 });
    expect([r.low.toString(), r.high.toString()]).toEqual(["0", "10"]);
  });
  it("centred sums add the centre back", () => {
    const r = ratioInterval({ sum: { noisy: 0n, law: lap("20") }, count: { noisy: 1000n, law: lap("2") }, sumStep: R("1/2"), lower: R("0"), upper: R("10"), confidence: 0.95, centre: R("5") });
    expect(r.estimate?.toString()).toBe("5");
    expect(r.low.lt(R("5")) && r.high.gt(R("5"))).toBe(true);
  });
});

describe("variance interval", () => {
  const count = { noisy: 40n, law: lap("1") };
  const sum = { noisy: -6n, law: lap("3") };
  const sumSquares = { noisy: 300n, law: lap("9") };
  const args = { count, sum, sumSquares, sumStep: Rational.ONE, squareStep: Rational.ONE, lower: R("-6"), upper: R("6"), confidence: 0.9 };
  it("brackets the estimate within [0, ((U - L)/2)^2] and states its method", () => {
    const res = varianceInterval(args);
    expect(res.estimate?.toString()).toBe(R("300/40").sub(R("36/1600")).toString());
    expect(res.low.le(res.estimate as Rational) && (res.estimate as Rational).le(res.high)).toBe(true);
    expect(res.low.sign() >= 0 && res.high.le(R("36"))).toBe(true);
    expect(res.method).toMatch(/pivot method/);
    expect(res.coverage).toBeGreaterThanOrEqual(0.9);
  });
  it("the whole range when the noisy count is not positive", () => {
    const res = varianceInterval({ ...args, count: { noisy: 0n, law: lap("1") } });
    expect(res.estimate).toBeNull();
    expect([res.low.toString(), res.high.toString()]).toEqual(["0", "36"]);
  });
  it("the variance pivot's quantile is never below a simulated one (three Laplace noises, 40,000 draws)", () => {
    // P(|X + 35.34 Y + 618 Z| > q) <= 0.0475 with X ~ DL(30000), Y ~ DL(300), Z ~ DL(3): the
    // bound must sit at or above the empirical 95.25% quantile (mpmath-free check by simulation).
    const q3 = lap("30000");
    const r = dominatingQuantile(q3, [{ law: lap("300"), c: R("35.34") }, { law: lap("3"), c: R("618") }], 0.0475);
    const bits = new Bits(seededBytes("var-pivot-q"));
    const xs: number[] = [];
    for (let i = 0; i < 40000; i++) xs.push(Math.abs(Number(addNoise(0n, q3, bits)) + 35.34 * Number(addNoise(0n, lap("300"), bits)) + 618 * Number(addNoise(0n, lap("3"), bits))));
    xs.sort((x, y) => x - y);
    const emp = xs[Math.ceil(0.9525 * xs.length) - 1];
    expect(Number(r.q)).toBeGreaterThan(emp);
    expect(Number(r.q)).toBeLessThan(emp * 1.06);
  });
});

describe("confidence and law validation", () => {
  it("refuses confidence outside (0, 1) and bad laws", () => {
    for (const c of [0, 1, -0.5, 1.5, NaN, Infinity]) expect(() => checkConfidence(c)).toThrow(BadInputError);
    expect(() => halfWidth(lap("1"), 1)).toThrow(/strictly between 0 and 1/);
    expect(() => halfWidth(lap("0"), 0.95)).toThrow(BadInputError);
    expect(() => tailProbability({ family: "discrete-gaussian", sigma2: R("-1") }, 1n)).toThrow(BadInputError);
    expect(() => ratioInterval({ sum: { noisy: 1n, law: lap("1") }, count: { noisy: 1n, law: lap("1") }, sumStep: Rational.ONE, lower: R("1"), upper: R("0"), confidence: 0.95 })).toThrow(BadInputError);
  });
});
