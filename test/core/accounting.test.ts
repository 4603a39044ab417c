import { describe, expect, it } from "vitest";
import { BadInputError } from "../../runtime/errors.js";
import {
  checkCost,
  composeParallel,
  composeSequential,
  deltaFromRho,
  epsilonBS,
  epsilonCKS,
  epsilonFromRho,
  pureToRho,
  rhoFromEpsilonDelta,
} from "../../runtime/core/accounting.js";
import { Rational } from "../../runtime/core/rational.js";

const R = Rational.parse;
const rel = (a: number, b: number): number => Math.abs(a - b) / Math.abs(b);
const DELTA = R("1e-6");

describe("composition (docs/methods.md §1)", () => {
  it("[C1.1] 1/2 + 1/4 + 1/4 -> 1", () => {
    expect(composeSequential([R("1/2"), R("1/4"), R("1/4")]).toString()).toBe("1");
  });
  it("[C1.2] basic composition of (0.5, 1e-7) and (0.3, 2e-7) -> (4/5, 3/10000000)", () => {
    expect(composeSequential([R("0.5"), R("0.3")]).toString()).toBe("4/5");
    expect(composeSequential([R("1e-7"), R("2e-7")]).toString()).toBe("3/10000000");
  });
  it("[C1.3] parallel composition over 4 parts at rho = 0.1 -> 1/10", () => {
    expect(composeParallel([R("0.1"), R("0.1"), R("0.1"), R("0.1")]).toString()).toBe("1/10");
    expect(composeParallel([R("0.1"), R("0.3"), R("0.2")]).toString()).toBe("3/10");
  });
  it("refuses zero, negative and non-rational costs", () => {
    for (const bad of [R("0"), R("-0.1"), NaN, Infinity, 0.1, "0.1", null]) {
      expect(() => checkCost(bad as Rational)).toThrow(BadInputError);
    }
    expect(() => composeSequential([R("0.1"), R("0")])).toThrow(/positive/);
  });
});

describe("conversions (docs/methods.md §2)", () => {
  it("[C2.1a] epsilon = 1 -> rho 1/2; [C2.1b] epsilon = 0.1 -> rho 1/200", () => {
    expect(pureToRho(R("1")).toString()).toBe("1/2");
    expect(pureToRho(R("0.1")).toString()).toBe("1/200");
  });
  // rho, [C2.2x] BS, [C2.3x] CKS, [C2.3x-alpha], [C2.4x] exact Gaussian (lower reference), delta = 1e-6
  const rows = [
    [0.1, 2.45078800048, 2.14193892839, 11.6581, 1.9945269007],
    [0.5, 5.75652176976, 5.22153444453, 5.90701, 4.88655411746],
    [1.0, 8.4338443777, 7.76621662531, 4.5085, 7.28608096642],
  ] as const;
  for (const [rho, bs, cks, alpha, gauss] of rows) {
    it(`[C2.2-4] rho = ${rho}: BS ${bs}, CKS ${cks} at alpha ${alpha}, above the Gaussian curve ${gauss}`, () => {
      expect(rel(epsilonBS(rho, 1e-6), bs)).toBeLessThan(1e-9);
      const c = epsilonCKS(rho, 1e-6);
      expect(rel(c.epsilon, cks)).toBeLessThan(1e-9);
      expect(rel(c.alpha, alpha)).toBeLessThan(2e-5);
      const stored = epsilonFromRho(R(String(rho)), DELTA);
      // rounded up to 6 significant digits: never below CKS, at most one unit in the 6th digit above
      expect(stored.toNumber()).toBeGreaterThanOrEqual(cks);
      expect(rel(stored.toNumber(), cks)).toBeLessThan(1e-5);
      // sanity bounds: Gaussian curve < CKS < BS
      expect(gauss < cks && cks < bs).toBe(true);
    });
  }
  it("[C2.5a] CKS delta at rho = 0.5, epsilon = 4 -> 0.000195795416958", () => {
    expect(rel(deltaFromRho(R("0.5"), R("4")), 0.000195795416958)).toBeLessThan(1e-8);
  });
  it("[C2.6a-c] ten pure 0.1-DP mechanisms: rho 0.05, BS 1.71225813627, CKS 1.47159475053; plain composition 1 is better", () => {
    const rho = composeSequential(Array.from({ length: 10 }, () => pureToRho(R("0.1"))));
    expect(rho.toString()).toBe("1/20");
    expect(rel(epsilonBS(0.05, 1e-6), 1.71225813627)).toBeLessThan(1e-9);
    expect(rel(epsilonCKS(0.05, 1e-6).epsilon, 1.47159475053)).toBeLessThan(1e-9);
    expect(epsilonFromRho(rho, DELTA).gt(composeSequential(Array.from({ length: 10 }, () => R("0.1"))))).toBe(true);
  });
  it("rho = 0 gives epsilon = 0; delta must lie in (0, 1)", () => {
    expect(epsilonFromRho(Rational.ZERO, DELTA).toString()).toBe("0");
    expect(() => epsilonFromRho(R("0.1"), R("0"))).toThrow(/delta/);
    expect(() => epsilonFromRho(R("0.1"), R("1"))).toThrow(BadInputError);
    expect(() => rhoFromEpsilonDelta(R("1"), R("2"))).toThrow(BadInputError);
    expect(() => rhoFromEpsilonDelta(R("0"), DELTA)).toThrow(BadInputError);
  });
  it("the rho cap inverts the conversion, rounded down ([C2.3a] read backwards: epsilon 2.14193892839 -> rho just below 0.1)", () => {
    const rho = rhoFromEpsilonDelta(R("2.14193892839"), DELTA);
    expect(rho.le(R("0.1"))).toBe(true);
    expect(rho.ge(R("0.09999"))).toBe(true);
    for (const eps of ["0.5", "1", "2", "8"]) {
      const cap = rhoFromEpsilonDelta(R(eps), DELTA);
      expect(epsilonFromRho(cap, DELTA).le(R(eps))).toBe(true);
      // one more unit in the 6th digit would cross
      const bigger = Rational.fromNumberUp(cap.toNumber() * (1 + 2e-6), 6);
      expect(epsilonFromRho(bigger, DELTA).gt(R(eps)) || epsilonCKS(bigger.toNumber(), 1e-6).epsilon > Number(eps) * (1 - 1e-5)).toBe(true);
    }
  });
});

describe("costs and spend in epsilon", () => {
  // Spend is kept by the ledger (test/curator/ledger.test.ts holds the exact-cap cases [C1.4a-c]).
  it("reports zCDP spend as epsilon at delta, rounded up", () => {
    expect(epsilonFromRho(R("0.5"), DELTA).toNumber()).toBeGreaterThanOrEqual(5.22153444453); // [C2.3b]
  });
  it("refuses costs that are not positive exact rationals", () => {
    for (const bad of [R("0"), R("-1"), NaN as unknown as Rational, Infinity as unknown as Rational]) {
      expect(() => checkCost(bad)).toThrow(BadInputError);
    }
  });
});

