/**
 * Empirical privacy test of Ding, Wang, Wang, Zhang & Kifer (2018), "Detecting Violations of
 * Differential Privacy" (docs/methods.md §12.1): on neighbouring inputs, pick the most suspicious event on a
 * first batch, then on fresh runs test H0: P[M(D) in E] <= e^eps P[M(D') in E] with the
 * thinning-averaged Fisher p-value, doubled (Vovk & Wang 2020), in both directions. Fixed seeds;
 * decision level 1e-3 as the handbook suggests for CI. A mechanism with half the claimed noise scale
 * must be caught by the same procedure.
 */
import { describe, expect, it } from "vitest";
import { epsilonFromRho } from "../../runtime/core/accounting.js";
import { addNoise, calibrate, type NoiseLaw } from "../../runtime/core/mechanisms.js";
import { exponentialQuantile } from "../../runtime/core/quantile.js";
import { Bits, seededBytes } from "../../runtime/core/random.js";
import { Rational } from "../../runtime/core/rational.js";
import { dingPValue } from "./stats.js";

const R = Rational.parse;
const LEVEL = 1e-3;
const SELECT_RUNS = 20_000;
const TEST_RUNS = 50_000;

type Event = { name: string; has: (y: number) => boolean };

function candidateEvents(samples: number[]): Event[] {
  const sorted = [...samples].sort((a, b) => a - b);
  const lo = sorted[Math.floor(sorted.length * 0.005)];
  const hi = sorted[Math.floor(sorted.length * 0.995)];
  const step = Math.max(1, Math.floor((hi - lo) / 60));
  const events: Event[] = [];
  for (let c = lo; c <= hi; c += step) {
    events.push({ name: `>= ${c}`, has: (y) => y >= c });
    events.push({ name: `<= ${c}`, has: (y) => y <= c });
    events.push({ name: `== ${c}`, has: (y) => y === c });
  }
  return events;
}

/**
 * Selection statistic (cheap stand-in for the p-value; selection affects power only): z-score of
 * the thinned proportion c1 e^-eps / n against c2 / n.
 */
function suspicion(c1: number, c2: number, n: number, eps: number): number {
  const p1 = (c1 * Math.exp(-eps)) / n;
  const p2 = c2 / n;
  const se = Math.sqrt((p1 + p2) / n + 1e-12);
  return (p1 - p2) / se;
}

function dingTest(runD: () => number, runD2: () => number, epsilon: number): { p: number; event: string } {
  const a = Array.from({ length: SELECT_RUNS }, runD);
  const b = Array.from({ length: SELECT_RUNS }, runD2);
  let best = { score: -Infinity, event: null as Event | null, swap: false };
  for (const e of candidateEvents(a.concat(b))) {
    const ca = a.filter(e.has).length;
    const cb = b.filter(e.has).length;
    if (Math.max(ca, cb) < SELECT_RUNS / 200) continue; // too rare to test with any power
    for (const swap of [false, true]) {
      const score = swap ? suspicion(cb, ca, SELECT_RUNS, epsilon) : suspicion(ca, cb, SELECT_RUNS, epsilon);
      if (score > best.score) best = { score, event: e, swap };
    }
  }
  const e = best.event as Event;
  let c1 = 0;
  let c2 = 0;
  for (let i = 0; i < TEST_RUNS; i++) if (e.has(best.swap ? runD2() : runD())) c1++;
  for (let i = 0; i < TEST_RUNS; i++) if (e.has(best.swap ? runD() : runD2())) c2++;
  return { p: dingPValue(c1, TEST_RUNS, c2, TEST_RUNS, epsilon), event: `${best.swap ? "D'" : "D"} ${e.name}` };
}

function additive(truth: bigint, law: NoiseLaw, bits: Bits): () => number {
  return () => Number(addNoise(truth, law, bits));
}

describe("hypothesis test for privacy violations (Ding et al. 2018)", () => {
  it("count with discrete Laplace at epsilon = 1: no violation (neighbours 10 vs 11 rows)", () => {
    const bits = new Bits(seededBytes("ding-count"));
    const law = calibrate(1n, { epsilon: R("1") });
    const r = dingTest(additive(10n, law, bits), additive(11n, law, bits), 1);
    expect(r.p, r.event).toBeGreaterThan(LEVEL);
  });

  it("sum on [0, 10], k = 2 rows per unit, discrete Laplace at epsilon = 0.5: no violation (one unit at the upper bound)", () => {
    const bits = new Bits(seededBytes("ding-sum"));
    const law = calibrate(20n, { epsilon: R("0.5") });
    const r = dingTest(additive(137n, law, bits), additive(157n, law, bits), 0.5);
    expect(r.p, r.event).toBeGreaterThan(LEVEL);
  });

  it("median by the exponential mechanism at epsilon = 1: no violation (adding one unit at U)", () => {
    const bits = new Bits(seededBytes("ding-quantile"));
    const D = [1, 2, 2, 4, 5, 5, 5, 8, 9, 10];
    const D2 = [...D, 10];
    const below = (xs: number[]): bigint[] => Array.from({ length: 11 }, (_, y) => BigInt(xs.filter((x) => x < y).length));
    const run = (xs: number[]) => () =>
      exponentialQuantile({ countsBelow: below(xs), n: BigInt(xs.length), p: R("1/2"), epsilon: R("1"), bits }).index;
    const r = dingTest(run(D), run(D2), 1);
    expect(r.p, r.event).toBeGreaterThan(LEVEL);
  });

  it("count with discrete Gaussian at rho = 0.05: no violation of its epsilon at delta = 1e-6", () => {
    // rho-zCDP gives (eps, 1e-6)-DP (CKS 2020 conversion, docs/methods.md §2); with 5*10^4 runs the delta
    // slack (0.05 expected events) is invisible to the pure-epsilon test
    const bits = new Bits(seededBytes("ding-gauss"));
    const eps = epsilonFromRho(R("0.05"), R("1e-6")).toNumber();
    const law = calibrate(1n, { rho: R("0.05") });
    const r = dingTest(additive(10n, law, bits), additive(11n, law, bits), eps);
    expect(r.p, r.event).toBeGreaterThan(LEVEL);
  });

  it("a broken count mechanism (half the noise scale) claiming epsilon = 1 IS detected", () => {
    const bits = new Bits(seededBytes("ding-broken"));
    const honest = calibrate(1n, { epsilon: R("1") });
    if (honest.family !== "discrete-laplace") throw new Error("expected Laplace");
    const broken: NoiseLaw = { family: "discrete-laplace", scale: honest.scale.div(2n) };
    const r = dingTest(additive(10n, broken, bits), additive(11n, broken, bits), 1);
    expect(r.p, r.event).toBeLessThan(LEVEL);
  });

  it("a broken sum mechanism (sensitivity taken as U - L = 5 instead of max(|L|,|U|) = 10) IS detected", () => {
    // Casacuberta et al. 2022 / docs/methods.md §7: an interval excluding 0 still costs max(|L|, |U|) under add/remove
    const bits = new Bits(seededBytes("ding-broken-sum"));
    const broken = calibrate(5n, { epsilon: R("1") });
    const r = dingTest(additive(60n, broken, bits), additive(70n, broken, bits), 1);
    expect(r.p, r.event).toBeLessThan(LEVEL);
  });
});
