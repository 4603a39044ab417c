/**
 * The best valid epsilon at delta for a zCDP account (docs/methods.md §22): plain composition when
 * every release was pure, else the zCDP conversion. Check values computed independently with
 * mpmath at 40 digits (python3; golden section over ln(alpha - 1) of the Canonne, Kamath & Steinke
 * 2020 objective, the same formula as docs/methods.md §2, and Bun & Steinke 2016 Prop. 1.3):
 *   rho 0.05:  CKS 1.47159475053242 (alpha 15.8669), BS 1.71225813626911    ([C2.6b], [C2.6c])
 *   rho 0.125: CKS 2.41909317686720 (alpha 10.5738), BS 2.75326088487847    ([C22.2])
 *   rho 4.5:   CKS 19.2295104339285 (alpha 2.68830), BS 20.2695653092708    ([C22.3])
 */
import { describe, expect, it } from "vitest";
import { bestEpsilon, pureEpsilonOfParts, pureToRho } from "../../runtime/core/accounting.js";
import { Rational } from "../../runtime/core/rational.js";
import { spendSummary } from "../../runtime/curator/spend-summary.js";
import { epsilonAtDelta } from "../../runtime/api/text.js";
import type { DatasetPolicy } from "../../runtime/curator/policy.js";

const R = Rational.parse;
const delta = R("0.000001");
const sumOf = (xs: Rational[]): Rational => xs.reduce((a, b) => a.add(b), Rational.ZERO);

describe("best epsilon at delta (docs/methods.md §22)", () => {
  it("[C22.1] ten pure epsilon = 0.1 releases: epsilon 1 by plain composition, not 1.47160 by conversion", () => {
    const rho = sumOf(Array.from({ length: 10 }, () => pureToRho(R("0.1"))));
    expect(rho.toString()).toBe("1/20"); // [C2.6a]
    const best = bestEpsilon(rho, R("1"), delta);
    expect(best).toEqual({ epsilon: R("1"), by: "plain composition" });
    const conv = bestEpsilon(rho, null, delta);
    expect(conv.by).toBe("zCDP conversion");
    // rounded up to 6 digits: never below the mpmath value, at most one unit of the 6th digit above
    expect(conv.epsilon.toNumber()).toBeGreaterThanOrEqual(1.47159475053242);
    expect(conv.epsilon.toString()).toBe(R("1.47160").toString());
  });
  it("[C22.2] a Gaussian release in the mix: plain composition no longer applies", () => {
    // five pure 0.1 (rho 1/40) and one Gaussian at rho 0.1: rho 0.125
    const rho = sumOf([...Array.from({ length: 5 }, () => pureToRho(R("0.1"))), R("0.1")]);
    expect(rho.toString()).toBe("1/8");
    const best = bestEpsilon(rho, null, delta);
    expect(best.by).toBe("zCDP conversion");
    expect(best.epsilon.toNumber()).toBeGreaterThanOrEqual(2.4190931768672);
    expect(best.epsilon.toString()).toBe(R("2.41910").toString());
  });
  it("[C22.3] one pure epsilon = 3 release: 3 by plain composition (the conversion gives 19.2296)", () => {
    const best = bestEpsilon(pureToRho(R("3")), R("3"), delta);
    expect(best).toEqual({ epsilon: R("3"), by: "plain composition" });
    expect(bestEpsilon(pureToRho(R("3")), null, delta).epsilon.toString()).toBe(R("19.2296").toString());
  });
  it("many small pure releases: the conversion wins (1000 x 0.01: plain 10, conversion 1.47160)", () => {
    const rho = pureToRho(R("0.01")).mul(1000n);
    expect(rho.toString()).toBe("1/20");
    const best = bestEpsilon(rho, R("10"), delta);
    expect(best.by).toBe("zCDP conversion");
    expect(best.epsilon.toString()).toBe(R("1.47160").toString());
  });
  it("refuses a negative pure sum", () => {
    expect(() => bestEpsilon(R("1/20"), R("-1"), delta)).toThrow(/non-negative/);
  });
});

describe("pure epsilon of a release from its receipt's parts", () => {
  const lap = (sensitivity: string, scale: string, cost: string) => ({ family: "discrete-laplace", scale, sensitivity, cost });
  it("discrete Laplace: D/t; exponential: its recorded epsilon; parts add", () => {
    // t = D/epsilon = 2/0.1 = 20, charged 0.1^2/2 = 1/200
    expect(pureEpsilonOfParts([lap("2", "20", "1/200")])?.toString()).toBe("1/10");
    expect(pureEpsilonOfParts([{ family: "exponential", scale: "1/10", sensitivity: "1", cost: "1/200" }])?.toString()).toBe("1/10");
    // a mean at epsilon 0.1: two parts at 0.05 each, charged 2 x 0.05^2/2 = 1/400
    expect(pureEpsilonOfParts([lap("1", "20", "1/800"), lap("100", "2000", "1/800")])?.toString()).toBe("1/10");
  });
  it("not pure: a Gaussian part, a charge that does not match, unreadable or empty input", () => {
    expect(pureEpsilonOfParts([lap("2", "20", "1/200"), { family: "discrete-gaussian", scale: "100", sensitivity: "1", cost: "1/200" }])).toBeNull();
    expect(pureEpsilonOfParts([lap("2", "20", "1/100")])).toBeNull();
    expect(pureEpsilonOfParts([lap("2", "0", "1/200")])).toBeNull();
    expect(pureEpsilonOfParts([lap("x", "20", "1/200")])).toBeNull();
    expect(pureEpsilonOfParts([])).toBeNull();
    expect(pureEpsilonOfParts("nope" as never)).toBeNull();
  });
});

describe("the spend summary and line state the bound and its route", () => {
  const d = {
    name: "clinic_z",
    population: "clinic-z.csv",
    accounting: { mode: "zcdp", capEpsilon: R("3"), delta, capRho: R("0.2") },
  } as unknown as DatasetPolicy;
  it("plain composition", () => {
    const s = spendSummary("ada", d, R("1/20"), 10, R("1"));
    expect(s).toMatchObject({ spentEpsilon: "1", epsilonBy: "plain composition", spentRho: "1/20", remainingRho: "3/20", releases: 10 });
    expect(epsilonAtDelta(s)).toBe("ε 1 of 3 at δ=0.000001, by plain composition");
  });
  it("zCDP conversion when a release was not pure", () => {
    const s = spendSummary("ada", d, R("1/20"), 10, null);
    expect(s).toMatchObject({ spentEpsilon: R("1.4716").toString(), epsilonBy: "zCDP conversion" });
    expect(epsilonAtDelta(s)).toBe("ε 1.4716 of 3 at δ=0.000001, by zCDP conversion");
  });
});
