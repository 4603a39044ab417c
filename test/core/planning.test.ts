import { describe, expect, it } from "vitest";
import { BadInputError } from "../../runtime/errors.js";
import { halfWidth } from "../../runtime/core/intervals.js";
import { gaussianReference, halfWidthFor, laplaceReference, meanPlanFor, planForHalfWidth, planMeanForHalfWidth } from "../../runtime/core/planning.js";
import { Rational } from "../../runtime/core/rational.js";

const R = Rational.parse;
const rel = (a: number, b: number): number => Math.abs(a - b) / Math.abs(b);

describe("accuracy-first planning (docs/methods.md §11), Delta = 1, H = 10, a = 0.05", () => {
  it("[C11.1] Laplace reference epsilon 0.299573227355; [C11.3a-c] z 1.95996398454, sigma 5.10213456925, rho 0.0192072941035", () => {
    expect(rel(laplaceReference({ sensitivity: 1, a: 0.05, halfWidth: 10 }).epsilon, 0.299573227355)).toBeLessThan(1e-9);
    const g = gaussianReference({ sensitivity: 1, a: 0.05, halfWidth: 10 });
    expect(rel(g.z, 1.95996398454)).toBeLessThan(1e-9);
    expect(rel(g.sigma, 5.10213456925)).toBeLessThan(1e-9);
    expect(rel(g.rho, 0.0192072941035)).toBeLessThan(1e-9);
  });
  it("[C3.1-4] continuous Laplace half-widths 2.99573227355, 29.9573227355, 59.9146454711 and variance 800", () => {
    expect(rel(laplaceReference({ sensitivity: 1, a: 0.05, epsilon: 1 }).halfWidth, 2.99573227355)).toBeLessThan(1e-9);
    expect(rel(laplaceReference({ sensitivity: 1, a: 0.05, epsilon: 0.1 }).halfWidth, 29.9573227355)).toBeLessThan(1e-9);
    const r = laplaceReference({ sensitivity: 10, a: 0.05, epsilon: 0.5 });
    expect(rel(r.halfWidth, 59.9146454711)).toBeLessThan(1e-9);
    expect(rel(r.variance, 800)).toBeLessThan(1e-9);
  });
  it("[C11.2] discrete Laplace: smallest epsilon with integer half-width <= 10 -> 0.284348512423", () => {
    const plan = planForHalfWidth({ family: "discrete-laplace", sensitivity: 1n, halfWidthUnits: 10n, confidence: 0.95 });
    if (!("epsilon" in plan.param)) throw new Error("expected epsilon");
    // the handbook's exact minimum 0.284348512423 lies between the short decimal chosen and the one below
    expect(plan.param.epsilon.toNumber()).toBeGreaterThanOrEqual(0.284348512423);
    expect(R("0.284348").toNumber()).toBeLessThan(0.284348512423);
    // rounded up to 6 significant digits, confirmed with the exact tail
    expect(plan.param).toEqual({ epsilon: R("0.284349") });
    expect(plan.halfWidthUnits).toBe(10n);
    expect(halfWidth(plan.law, 0.95)).toBe(10n);
    // one unit less in the 6th digit no longer reaches h = 10
    expect(halfWidthFor({ sensitivity: 1n, param: { epsilon: R("0.284348") }, confidence: 0.95 })).toBe(11n);
  });
  it("[C11.4a] discrete Gaussian: largest sigma with half-width <= 10 -> 5.36501138658; [C11.4b] rho 0.0173711555124", () => {
    const plan = planForHalfWidth({ family: "discrete-gaussian", sensitivity: 1n, halfWidthUnits: 10n, confidence: 0.95 });
    expect(plan.law).toEqual({ family: "discrete-gaussian", sigma2: R("28.7833") });
    // the handbook's largest sigma 5.36501138658 lies between sqrt(28.7833) and sqrt(28.7834)
    expect(Math.sqrt(28.7833)).toBeLessThanOrEqual(5.36501138658);
    expect(Math.sqrt(28.7834)).toBeGreaterThan(5.36501138658);
    expect(halfWidth({ family: "discrete-gaussian", sigma2: R("28.7834") }, 0.95)).toBe(11n);
    expect(plan.halfWidthUnits).toBe(10n);
    if (!("rho" in plan.param)) throw new Error("expected rho");
    // sigma^2 rounded down, so rho is slightly above the exact minimum
    expect(plan.param.rho.toNumber()).toBeGreaterThanOrEqual(0.0173711555124);
    expect(rel(plan.param.rho.toNumber(), 0.0173711555124)).toBeLessThan(1e-5);
  });
  it("larger sensitivities scale the cost; plans round-trip through halfWidthFor", () => {
    for (const family of ["discrete-laplace", "discrete-gaussian"] as const) {
      for (const [d, h] of [
        [10000n, 29957n],
        [3n, 0n],
        [1n, 1n],
        [20n, 500n],
      ] as const) {
        const plan = planForHalfWidth({ family, sensitivity: d, halfWidthUnits: h, confidence: 0.9 });
        expect(plan.halfWidthUnits <= h).toBe(true);
        expect(halfWidthFor({ sensitivity: d, param: plan.param, confidence: 0.9 })).toBe(plan.halfWidthUnits);
      }
    }
    // [C6.3b] read backwards: epsilon = 1 at Delta = 10000 gives h = 29957, so planning h = 29957 costs <= 1
    const p = planForHalfWidth({ family: "discrete-laplace", sensitivity: 10000n, halfWidthUnits: 29957n, confidence: 0.95 });
    if (!("epsilon" in p.param)) throw new Error("expected epsilon");
    expect(p.param.epsilon.le(R("1"))).toBe(true);
  });
  it("refuses bad inputs", () => {
    expect(() => planForHalfWidth({ family: "discrete-laplace", sensitivity: 0n, halfWidthUnits: 1n, confidence: 0.95 })).toThrow(BadInputError);
    expect(() => planForHalfWidth({ family: "discrete-laplace", sensitivity: 1n, halfWidthUnits: -1n, confidence: 0.95 })).toThrow(BadInputError);
    expect(() => planForHalfWidth({ family: "discrete-laplace", sensitivity: 1n, halfWidthUnits: 1n, confidence: 1 })).toThrow(BadInputError);
    expect(() => planForHalfWidth({ family: "cauchy" as never, sensitivity: 1n, halfWidthUnits: 1n, confidence: 0.5 })).toThrow(BadInputError);
    expect(() => halfWidthFor({ sensitivity: 1n, param: { epsilon: R("0") }, confidence: 0.95 })).toThrow(BadInputError);
  });
});

describe("mean planning (docs/methods.md §11 'Means', §8 worked example)", () => {
  // §8 setup: values in [0, 10], g = 1, k = 1, epsilon = 1 split 0.5/0.5 -> h_S = 74 [C8.1a], h_N = 7 [C8.1b]
  const base = {
    family: "discrete-laplace" as const,
    sumSensitivity: 10n,
    countSensitivity: 1n,
    sumStep: Rational.ONE,
    confidence: 0.95,
    expectedCount: 1000,
    expectedOffset: 5,
  };
  it("epsilon = 1 gives the expected half-width (74 + 5*7)/(1000 - 7)", () => {
    const p = meanPlanFor({ ...base, total: R("1") });
    expect(p.sum.law).toEqual({ family: "discrete-laplace", scale: R("20") });
    expect(p.count.law).toEqual({ family: "discrete-laplace", scale: R("2") });
    expect(p.expectedHalfWidth).toBeCloseTo((74 + 5 * 7) / 993, 12);
  });
  it("inverts: the half-width bought by epsilon = 1 costs at most 1, and a bit less costs a wider interval", () => {
    const p = planMeanForHalfWidth({ ...base, halfWidth: Rational.fromNumberUp((74 + 5 * 7) / 993, 12) });
    if (!("epsilon" in p.total)) throw new Error("expected epsilon");
    expect(p.total.epsilon.le(R("1"))).toBe(true);
    expect(p.total.epsilon.ge(R("0.99"))).toBe(true);
    const cheaper = meanPlanFor({ ...base, total: p.total.epsilon.mul(R("0.999")) });
    expect(cheaper.expectedHalfWidth as number).toBeGreaterThan((74 + 5 * 7) / 993);
  });
  it("zCDP plans split rho equally; too few rows gives no finite half-width", () => {
    const p = planMeanForHalfWidth({ ...base, family: "discrete-gaussian", halfWidth: R("0.5") });
    expect("rho" in p.total && "rho" in p.sum.param).toBe(true);
    expect(p.expectedHalfWidth as number).toBeLessThanOrEqual(0.5);
    expect(meanPlanFor({ ...base, expectedCount: 3, total: R("0.01") }).expectedHalfWidth).toBeNull();
    expect(() => meanPlanFor({ ...base, expectedCount: -1, total: R("1") })).toThrow(BadInputError);
  });
});
