import { describe, expect, it } from "vitest";
import { binomialBand, binomialCdf, binomialLowerLimit, dingPValue, fisherOneSided, hypergeomUpperTail, jstat, logGamma, thinnedPValue } from "./stats.js";

describe("test statistics helpers", () => {
  it("hypergeometric upper tail far below the mean does not underflow to 0 (scipy.stats.hypergeom.sf, Debian python3-scipy, computed for this test)", () => {
    // Population 100,000, 14,697 successes, 50,000 draws (mean 7348.5): the Ding test's thinned
    // counts at c1 = 11571, c2 = 10440 reach k = 4257, where the first term underflowed.
    expect(hypergeomUpperTail(4257, 100_000, 14_697, 50_000)).toBeCloseTo(1, 12);
    expect(hypergeomUpperTail(7300, 100_000, 14_697, 50_000)).toBeCloseTo(0.8092794282077187, 8);
    expect(hypergeomUpperTail(7400, 100_000, 14_697, 50_000)).toBeCloseTo(0.18115598248349374, 8);
    expect(dingPValue(11571, 50_000, 10440, 50_000, 1)).toBe(1);
  });

  it("log-gamma matches factorials and jstat", () => {
    expect(Math.exp(logGamma(11))).toBeCloseTo(3628800, 6);
    for (const x of [0.5, 3.7, 120.25, 20001]) expect(logGamma(x)).toBeCloseTo(jstat.gammaln(x), 8);
  });

  it("hypergeometric tail agrees with jstat on a small table", () => {
    // jstat.hypgeom.cdf(x, N, m, n): P(X <= x), population N, m successes, n draws
    for (const k of [3, 5, 8]) {
      const ours = hypergeomUpperTail(k, 50, 20, 15);
      const theirs = 1 - jstat.hypgeom.cdf(k - 1, 50, 20, 15);
      expect(ours).toBeCloseTo(theirs, 10);
    }
  });

  const sig6 = (x: number): number => Number(x.toPrecision(6));
  // docs/methods.md §12.1 check values, n1 = n2 = 10000, epsilon = 1 (6 digits as shown)
  it("[C12.3a] Fisher one-sided p, 1104/10000 vs 1000/10000 = 0.00879376", () => {
    expect(sig6(fisherOneSided(1104, 10000, 1000, 10000))).toBe(0.00879376);
  });
  it("[C12.3b] thinning-averaged p, c1=3000, c2=1000 = 0.0212739; [C12.3d] min(1, 2x) = 0.0425479", () => {
    expect(sig6(thinnedPValue(3000, 10000, 1000, 10000, 1))).toBe(0.0212739);
    expect(sig6(dingPValue(3000, 10000, 1000, 10000, 1))).toBe(0.0425479);
  });
  it("[C12.3c] thinning-averaged p, c1=2600, c2=1000 = 0.819856", () => {
    expect(sig6(thinnedPValue(2600, 10000, 1000, 10000, 1))).toBe(0.819856);
  });
  it("[C12.1a-b] binomial band R=10000, p=0.95, 99.9% = 9427..9570", () => {
    expect(binomialBand(10000, 0.95, 0.001)).toEqual({ lo: 9427, hi: 9570 });
  });
  it("[C12.1c] P(X < 9427) = 0.000474302; [C12.1d] P(X > 9570) = 0.000475967; [C12.2] one-sided limit 9431", () => {
    expect(sig6(binomialCdf(9426, 10000, 0.95))).toBe(0.000474302);
    expect(sig6(1 - binomialCdf(9570, 10000, 0.95))).toBe(0.000475967);
    expect(binomialLowerLimit(10000, 0.95, 0.001)).toBe(9431);
  });
});
