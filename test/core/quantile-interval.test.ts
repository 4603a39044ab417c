/**
 * Quantile value intervals (docs/methods.md §20): the noisy dyadic tree, its sensitivity, the
 * bucket search, coverage over 2,000 releases on two data shapes, and the Ding et al. (2018)
 * privacy test on the interval's ends with a broken variant it catches.
 *
 * The finisher (runtime/curator/aggregates/finishers.ts) is driven directly, with the exact
 * bucket counts the SQL would hand it, so the bucket-to-value mapping is the one releases use.
 * The true quantile of each data shape comes from outside the project: numpy's
 * `quantile(..., method="inverted_cdf")` (Hyndman & Fan 1996 definition 1, inf{x : F(x) >= p}),
 * from Debian's python3-numpy, called once per shape.
 */
import { execFileSync } from "node:child_process";
import { describe, expect, it } from "vitest";
import { calibrate, type NoiseLaw } from "../../runtime/core/mechanisms.js";
import { CALIBRATION_DRAWS, noisyTree, quantileInterval, rankCuts, sumHalfWidth, treeDepth, treeSensitivity } from "../../runtime/core/quantile.js";
import { Bits, seededBytes } from "../../runtime/core/random.js";
import { Rational } from "../../runtime/core/rational.js";
import { FINISHERS, type QuantileRecipe } from "../../runtime/curator/aggregates/finishers.js";
import { binomialBand, binomialLowerLimit, dingPValue } from "./stats.js";

const R = Rational.parse;

/** numpy's inverted-cdf quantile of integer data (outside reference). */
function numpyQuantile(xs: number[], p: number): number {
  const out = execFileSync("python3", ["-c", "import sys, json, numpy as np; d = json.load(sys.stdin); print(int(np.quantile(np.array(d['x']), d['p'], method='inverted_cdf')))"], {
    input: JSON.stringify({ x: xs, p }),
  });
  return Number(String(out).trim());
}

/** (bucket, rows) pairs as the SQL hands them to the finisher, candidates lo..hi step 1. */
function buckets(xs: number[], lo: number): [bigint, bigint][] {
  const m = new Map<number, number>();
  for (const x of xs) m.set(x - lo + 1, (m.get(x - lo + 1) ?? 0) + 1);
  return [...m.entries()].sort((a, b) => a[0] - b[0]).map(([b, c]) => [BigInt(b), BigInt(c)]);
}

function recipe(lo: number, hi: number, p: string, epsilon: string, law: NoiseLaw, confidence = 0.95): QuantileRecipe {
  const candidates: bigint[] = [];
  for (let u = lo; u <= hi; u++) candidates.push(BigInt(u));
  return { column: "x", candidates, step: Rational.ONE, parts: [{ p: R(p), stat: "p", epsilon: R(epsilon) }], treeLaw: law, confidence };
}

/** Deterministic data (a small LCG; the data need not be random, only fixed). */
function lcg(seed: number): () => number {
  let s = seed >>> 0;
  return () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0;
    return (s + 0.5) / 2 ** 32;
  };
}

/**
 * Tail of a sum of l independent draws, from numpy: the pmf of one draw on |y| <= 60 sigma-or-scale
 * (the rest is below 1e-25), convolved l times; returns the tail P(|S| > h) at each asked h and
 * the exact least h at miss a. Outside reference for sumHalfWidth.
 */
function numpySumTail(family: string, param: number, l: number, a: number, hs: number[]): { tails: number[]; least: number } {
  const script = `
import sys, json, numpy as np
d = json.load(sys.stdin)
fam, par, l, a = d['family'], d['param'], d['l'], d['a']
W = int(60 * (par if fam == 'laplace' else np.sqrt(par))) + 10
y = np.arange(-W, W + 1)
w = np.exp(-np.abs(y) / par) if fam == 'laplace' else np.exp(-y.astype(float) ** 2 / (2 * par))
w = w / w.sum()
s = w
for _ in range(l - 1):
    s = np.convolve(s, w)
Y = np.arange(-(len(s) // 2), len(s) // 2 + 1)
tail = lambda h: float(s[np.abs(Y) > h].sum())
least = next(h for h in range(0, len(s)) if tail(h) <= a)
print(json.dumps({'tails': [tail(h) for h in d['hs']], 'least': least}))
`;
  const out = execFileSync("python3", ["-c", script], { input: JSON.stringify({ family, param, l, a, hs }) });
  return JSON.parse(String(out));
}

describe("half-width of a sum of noise draws (sumHalfWidth)", () => {
  it("holds against numpy's exact convolution, and is within 1.6x (or 2 steps) of the least half-width, for l = 2..9", () => {
    const a = R("1/60");
    for (const [family, law, param] of [
      ["laplace", { family: "discrete-laplace", scale: R("20") }, 20],
      ["laplace", { family: "discrete-laplace", scale: R("3") }, 3],
      ["laplace", { family: "discrete-laplace", scale: R("1/2") }, 0.5], // tiny noise: the union bound's case
      ["gauss", { family: "discrete-gaussian", sigma2: R("1/2") }, 0.5],
      ["gauss", { family: "discrete-gaussian", sigma2: R("100") }, 100],
    ] as const) {
      const ls = [2, 3, 5, 9];
      const hs = ls.map((l) => Number(sumHalfWidth(law as NoiseLaw, l, a)));
      for (let i = 0; i < ls.length; i++) {
        const ref = numpySumTail(family, param, ls[i], 1 / 60, [hs[i]]);
        expect(ref.tails[0], `${family} ${param} l=${ls[i]} h=${hs[i]}`).toBeLessThanOrEqual(1 / 60);
        expect(hs[i], `${family} ${param} l=${ls[i]} least ${ref.least}`).toBeLessThanOrEqual(Math.max(1.6 * ref.least, ref.least + 2));
      }
    }
  });

  it("l = 1 is the single-draw half-width; refuses nonsense", () => {
    const law: NoiseLaw = { family: "discrete-laplace", scale: R("1") };
    expect(sumHalfWidth(law, 1, R("1/20"))).toBe(3n); // [C4.2a]
    expect(() => sumHalfWidth(law, 0, R("1/20"))).toThrow();
    expect(() => sumHalfWidth(law, 2, R("0"))).toThrow();
  });
});

/**
 * Law of U = b' S - a' E (S a sum of l draws, E one more), from numpy's exact convolution of the
 * pmf on |y| <= 60 scale-or-sigma (the rest is below 1e-25): P(U < lo) and P(U > hi). Outside
 * reference for rankCuts.
 */
function numpyCutTails(family: string, param: number, l: number, a: number, b: number, lo: number, hi: number): { below: number; above: number } {
  const script = `
import sys, json, numpy as np
d = json.load(sys.stdin)
fam, par, l, a, b = d['family'], d['param'], d['l'], d['a'], d['b']
W = int(60 * (par if fam == 'laplace' else np.sqrt(par))) + 10
y = np.arange(-W, W + 1)
w = np.exp(-np.abs(y) / par) if fam == 'laplace' else np.exp(-y.astype(float) ** 2 / (2 * par))
w = w / w.sum()
s = w
for _ in range(l - 1):
    s = np.convolve(s, w)
S = np.arange(-(len(s) // 2), len(s) // 2 + 1)
U = b * S[:, None] - a * y[None, :]
P = s[:, None] * w[None, :]
print(json.dumps({'below': float(P[U < d['lo']].sum()), 'above': float(P[U > d['hi']].sum())}))
`;
  const out = execFileSync("python3", ["-c", script], { input: JSON.stringify({ family, param, l, a, b, lo, hi }) });
  return JSON.parse(String(out));
}

describe("calibrated cuts (rankCuts)", () => {
  it("[C20.3] k = floor((N + 1) a / 2): cuts at 95% and 99.98%, none above about 99.980%", () => {
    const law: NoiseLaw = { family: "discrete-laplace", scale: R("3") };
    const bits = new Bits(seededBytes("c203"));
    expect(CALIBRATION_DRAWS).toBe(10_000);
    expect(rankCuts(law, 3, R("1/2"), R("1/20"), bits)).not.toBeNull();
    expect(rankCuts(law, 3, R("1/2"), R("1/5000"), bits)).not.toBeNull(); // k = floor(10001 / 10000) = 1
    expect(rankCuts(law, 3, R("1/2"), R("1/5001"), bits)).toBeNull(); // 10001 / 10002 < 1: k = 0
    // A quantile whose denominator is past 2^53 takes the bigint path; its cuts still bracket 0.
    const fine = rankCuts(law, 3, Rational.of(1n, 2n ** 60n + 1n), R("1/20"), bits)!;
    for (let l = 0; l <= 4; l++) expect(fine.low[l] <= 0n && 0n <= fine.high[l]).toBe(true);
    expect(fine.high[2]).toBeGreaterThan(2n ** 60n);
    expect(() => rankCuts(law, -1, R("1/2"), R("1/20"), bits)).toThrow();
    expect(() => rankCuts(law, 31, R("1/2"), R("1/20"), bits)).toThrow();
    expect(() => rankCuts(law, 3, R("1"), R("1/20"), bits)).toThrow();
    expect(() => rankCuts(law, 3, R("1/2"), R("0"), bits)).toThrow();
    expect(() => rankCuts({ family: "discrete-laplace", scale: R("-1") }, 3, R("1/2"), R("1/20"), bits)).toThrow();
    // Without a calibration the union-bound cuts are used.
    const tree = noisyTree([5n, 5n, 5n, 5n], law, bits);
    expect(quantileInterval({ tree, m: 4, p: R("1/2"), law, miss: R("1/5001"), bits }).method).toBe("union bound");
    expect(quantileInterval({ tree, m: 4, p: R("1/2"), law, miss: R("1/20"), bits }).method).toBe("calibrated");
  });

  it("each cut leaves a tail of a/2 of the exact law of U (numpy convolution), within the calibration's spread", () => {
    // The tail left by a cut has mean k/(N + 1) <= a/2 over calibrations and standard deviation
    // about sqrt(a/(2N)) (Beta(k, N + 1 - k)); each cut is checked within 5 of those deviations
    // plus the discreteness of U (the tail at the cut excludes the atom at the cut).
    const miss = 1 / 20;
    const sd = Math.sqrt(miss / 2 / CALIBRATION_DRAWS);
    for (const [family, law, param] of [
      ["laplace", { family: "discrete-laplace", scale: R("3") }, 3],
      ["gauss", { family: "discrete-gaussian", sigma2: R("10") }, 10],
    ] as const) {
      for (const [p, a, b] of [["1/2", 1, 2], ["9/10", 9, 10]] as const) {
        const L = 3;
        const cuts = rankCuts(law as NoiseLaw, L, R(p), R("1/20"), new Bits(seededBytes(`cut-${family}-${p}`)));
        expect(cuts).not.toBeNull();
        for (const l of [1, 2, 3]) {
          const lo = Number(cuts!.low[l]);
          const hi = Number(cuts!.high[l]);
          const t = numpyCutTails(family, param, l, a, b, lo, hi);
          const atLo = numpyCutTails(family, param, l, a, b, lo + 1, hi - 1); // tails including the atoms
          expect(t.below, `${family} p ${p} l ${l} low ${lo}`).toBeLessThan(miss / 2 + 5 * sd);
          expect(t.above, `${family} p ${p} l ${l} high ${hi}`).toBeLessThan(miss / 2 + 5 * sd);
          expect(atLo.below, `${family} p ${p} l ${l} low ${lo}`).toBeGreaterThan(miss / 2 - 5 * sd);
          expect(atLo.above, `${family} p ${p} l ${l} high ${hi}`).toBeGreaterThan(miss / 2 - 5 * sd);
        }
      }
    }
  });
});

describe("the dyadic tree", () => {
  it("[C20.1] depth and sensitivity: L + 1 levels, k (L + 1) in L1, k ceil(sqrt(L + 1)) for the Gaussian", () => {
    expect(treeDepth(1)).toBe(0);
    expect(treeDepth(2)).toBe(1);
    expect(treeDepth(8)).toBe(3);
    expect(treeDepth(9)).toBe(4);
    expect(treeDepth(2001)).toBe(11);
    expect(treeSensitivity(2001, 3, "discrete-laplace")).toBe(36n);
    expect(treeSensitivity(2001, 3, "discrete-gaussian")).toBe(12n); // sqrt(12) = 3.46 -> 4, times 3
    expect(treeSensitivity(8, 1, "discrete-gaussian")).toBe(2n); // sqrt(4) = 2 exactly
    expect(() => treeDepth(0)).toThrow();
    expect(() => treeSensitivity(8, 0, "discrete-laplace")).toThrow();
  });

  it("neighbour check: adding one unit of k rows moves the exact tree by at most its recorded sensitivity (L1 and L2)", () => {
    // Exact trees from a zero-noise stand-in: a tiny discrete Gaussian is not zero, so compare the
    // exact level sums directly: every level sums to n, so a unit of k rows moves each level by k in L1.
    const m = 37;
    const L = treeDepth(m);
    const exact = (counts: number[]): number[][] => {
      const leaves = Array.from({ length: 2 ** L }, (_, i) => counts[i] ?? 0);
      const out = [leaves];
      while (out[0].length > 1) out.unshift(Array.from({ length: out[0].length / 2 }, (_, i) => out[0][2 * i] + out[0][2 * i + 1]));
      return out;
    };
    const rnd = lcg(7);
    const base = Array.from({ length: m }, () => Math.floor(rnd() * 5));
    for (let trial = 0; trial < 200; trial++) {
      const k = 1 + (trial % 4);
      const plus = [...base];
      for (let r = 0; r < k; r++) plus[Math.floor(rnd() * m)] += 1;
      const a = exact(base).flat();
      const b = exact(plus).flat();
      const l1 = a.reduce((s, v, i) => s + Math.abs(v - b[i]), 0);
      const l2sq = a.reduce((s, v, i) => s + (v - b[i]) ** 2, 0);
      expect(l1).toBeLessThanOrEqual(Number(treeSensitivity(m, k, "discrete-laplace")));
      expect(l2sq).toBeLessThanOrEqual(Number(treeSensitivity(m, k, "discrete-gaussian")) ** 2);
    }
  });

  it("draws every node whatever the counts (the number of draws depends on m only)", () => {
    const law = calibrate(4n, { epsilon: R("1") });
    const empty = noisyTree(Array.from({ length: 5 }, () => 0n), law, new Bits(seededBytes("t1")));
    expect(empty.map((l) => l.length)).toEqual([1, 2, 4, 8]);
    expect(() => noisyTree([1n, -1n], law, new Bits(seededBytes("t2")))).toThrow();
  });

  it("with very little noise the interval is the true quantile's bucket (numpy inverted_cdf)", () => {
    const law: NoiseLaw = { family: "discrete-laplace", scale: R("1/1000") };
    const xs = [1, 2, 2, 4, 5, 5, 5, 8, 9, 10];
    for (const [p, pr] of [["1/2", 0.5], ["1/10", 0.1], ["9/10", 0.9], ["3/10", 0.3]] as const) {
      const counts = Array.from({ length: 11 }, (_, v) => BigInt(xs.filter((x) => x === v).length));
      const tree = noisyTree(counts, law, new Bits(seededBytes(`sharp-${p}`)));
      const iv = quantileInterval({ tree, m: 11, p: R(p), law, miss: R("1/20"), bits: new Bits(seededBytes(`sharp-cal-${p}`)) });
      // With cuts 0 nothing but the true bucket passes both scans.
      expect(iv.lowBucket - 1).toBe(numpyQuantile(xs, pr));
      expect(iv.highBucket - 1).toBe(numpyQuantile(xs, pr));
    }
  });

  it("a draw that is uniform across a gap is moved into the interval (p99.9 with the top rows at the bound)", () => {
    // 300 rows below 40 and 30 rows at the upper bound 240: every candidate in (39, 240] has the same
    // rank cost for p = 0.999, so the exponential draw is uniform there; the interval is [240, 240].
    const xs = [...Array.from({ length: 300 }, (_, i) => i % 40), ...Array.from({ length: 30 }, () => 240)];
    expect(numpyQuantile(xs, 0.999)).toBe(240);
    const law: NoiseLaw = { family: "discrete-laplace", scale: R("1/1000") };
    const r = recipe(0, 240, "999/1000", "1000", law);
    const bits = new Bits(seededBytes("gap"));
    for (let i = 0; i < 20; i++) {
      const [row] = FINISHERS.quantile(r, buckets(xs, 0), bits);
      expect([row.value, row.low, row.high]).toEqual(["240", "240", "240"]);
    }
  });

  it("refuses malformed input", () => {
    const law = calibrate(4n, { epsilon: R("1") });
    const tree = noisyTree([1n, 2n, 3n], law, new Bits(seededBytes("t3")));
    expect(() => quantileInterval({ tree, m: 3, p: R("0"), law, miss: R("1/20") })).toThrow();
    expect(() => quantileInterval({ tree, m: 3, p: R("1"), law, miss: R("1/20") })).toThrow();
    expect(() => quantileInterval({ tree, m: 3, p: R("1/2"), law, miss: R("0") })).toThrow();
    expect(() => quantileInterval({ tree, m: 9, p: R("1/2"), law, miss: R("1/20") })).toThrow();
  });
});

/**
 * Coverage over RUNS releases (docs/methods.md §12.2), with the cuts calibrated from the noise law
 * (rankCuts). The band is the two-sided 99.9% binomial band of §12.2 (binomialBand, checked by
 * [C12.1a], [C12.1b] at R = 10,000); the one-sided lower limit is binomialLowerLimit ([C12.2]).
 */
const RUNS = 2000;

function coverage(name: string, xs: number[], lo: number, hi: number, p: string, pr: number, law: NoiseLaw, seed: string, calibrated = true, runs = RUNS) {
  const truth = numpyQuantile(xs, pr);
  const r = recipe(lo, hi, p, "1/2", law);
  const data = buckets(xs, lo);
  const bits = new Bits(seededBytes(seed));
  let hits = 0;
  let width = 0;
  const m = hi - lo + 1;
  const counts = Array.from({ length: m }, () => 0n);
  for (const x of xs) counts[x - lo]++;
  for (let i = 0; i < runs; i++) {
    let a: number;
    let b: number;
    if (calibrated) {
      const [row] = FINISHERS.quantile(r, data, bits);
      a = Number(row.low);
      b = Number(row.high);
      expect(Number(row.value) >= a && Number(row.value) <= b).toBe(true); // the draw is moved into its interval
    } else {
      // The union-bound cuts of the earlier method, for the width comparison.
      const iv = quantileInterval({ tree: noisyTree(counts, law, bits), m, p: R(p), law, miss: R("1/20") });
      expect(iv.method).toBe("union bound");
      a = lo + iv.lowBucket - 1;
      b = lo + iv.highBucket - 1;
    }
    if (a <= truth && truth <= b) hits++;
    width += b - a;
  }
  console.log(`${name}: p ${p}, truth ${truth}, ${calibrated ? "calibrated" : "union bound"}, coverage ${hits}/${runs}, mean width ${(width / runs).toFixed(1)} on [${lo}, ${hi}]`);
  return { hits, width: width / runs };
}

describe("coverage of quantile value intervals, 2,000 releases per case", () => {
  const band = binomialBand(RUNS, 0.95, 0.001);
  const limit = binomialLowerLimit(RUNS, 0.95, 0.001);

  it("where the bound is nearly attained, coverage lies between 1 - a and 1 - a/2 (median and p90, both noise families); the union bound does not", () => {
    // The argument of §20 is nearly tight when G_(i*) = p n exactly, bucket i* holds one row and its
    // neighbours hold every other row: no bucket but i* - 1 and i* can pass a scan, and the
    // interval misses when U_i* < low (and U_(i*-1) < low + b') or U_(i*-1) > high (and U_i* > high).
    // The two prefixes differ by one or two nodes, so each pair is almost one event and each side
    // misses with probability a little below a/2: coverage between 95% and 97.5% (the value if only
    // one side could miss), both up to the two-sided 99.9% binomial band of §12.2. The union
    // bound of tail bounds (the earlier method) covers 100% and fails the upper end.
    const upper = binomialBand(RUNS, 0.975, 0.001).hi;
    for (const [p, pr, below] of [["1/2", 0.5, 9_999], ["9/10", 0.9, 17_999]] as const) {
      const xs = [...Array.from({ length: below }, () => 1000), 1001, ...Array.from({ length: 20_000 - below - 1 }, () => 1002)];
      expect(numpyQuantile(xs, pr)).toBe(1001);
      for (const law of [
        calibrate(treeSensitivity(2001, 1, "discrete-laplace"), { epsilon: R("1/2") }),
        calibrate(treeSensitivity(2001, 1, "discrete-gaussian"), { rho: R("1/8") }),
      ]) {
        const c = coverage(`tight ${law.family}`, xs, 0, 2000, p, pr, law, `cov-tight-${p}-${law.family}`);
        expect(c.hits).toBeGreaterThanOrEqual(band.lo);
        expect(c.hits).toBeLessThanOrEqual(upper);
      }
      const law = calibrate(treeSensitivity(2001, 1, "discrete-laplace"), { epsilon: R("1/2") });
      const u = coverage("tight, union bound", xs, 0, 2000, p, pr, law, `cov-tight-${p}-union`, false);
      expect(u.hits).toBeGreaterThan(upper);
    }
    // Source of the band: docs/methods.md §12.2 (exact binomial quantiles); [C12.1a/b] fix it at R = 10,000.
    expect(band.lo).toBeGreaterThan(1850);
    expect(upper).toBeLessThan(1990);
  }, 600_000);

  it("smooth data on a fine grid (skewed waits and uniform, 20,000 rows on 0..2000), median and p90: valid, and about half the width of the union bound", () => {
    // On smooth data the interval over-covers (about 97% to 99.8% at a nominal 95%): buckets next
    // to i* have nearly the same rank, so a scan can also stop on one of them (docs/methods.md §20,
    // "Coverage"); a rule valid on every data set cannot avoid that with these scans.
    const rnd = lcg(11);
    const skewed = Array.from({ length: 20_000 }, () => Math.min(2000, Math.floor(-350 * Math.log(rnd()))));
    const uniform = Array.from({ length: 20_000 }, () => Math.floor(rnd() * 2001));
    const law = calibrate(treeSensitivity(2001, 1, "discrete-laplace"), { epsilon: R("1/2") });
    for (const [name, xs] of [["skewed", skewed], ["uniform", uniform]] as const) {
      for (const [p, pr] of [["1/2", 0.5], ["9/10", 0.9]] as const) {
        const c = coverage(name, xs, 0, 2000, p, pr, law, `cov-${name}-${p}`);
        expect(c.hits).toBeGreaterThanOrEqual(limit);
        const u = coverage(name, xs, 0, 2000, p, pr, law, `cov-${name}-${p}-union`, false, 300);
        expect(c.width).toBeLessThan(0.7 * u.width);
      }
    }
  }, 600_000);

  it("ties and gaps (five values only, 1,500 rows on 0..255), median, p25 and p75, discrete Gaussian", () => {
    // Over-coverage is expected here: each quantile sits in a bucket of hundreds of rows, so the
    // slack G_i* - p n is large against the noise and the bucket is pinned by the data.
    const rnd = lcg(23);
    const values = [10, 11, 50, 200, 201];
    const weights = [0.2, 0.28, 0.05, 0.3, 0.17];
    const xs = Array.from({ length: 1500 }, () => {
      let u = rnd();
      for (let j = 0; j < values.length; j++) if ((u -= weights[j]) < 0) return values[j];
      return values[values.length - 1];
    });
    const law = calibrate(treeSensitivity(256, 1, "discrete-gaussian"), { rho: R("1/8") });
    for (const [p, pr] of [["1/2", 0.5], ["1/4", 0.25], ["3/4", 0.75]] as const) {
      const c = coverage("ties", xs, 0, 255, p, pr, law, `cov-ties-${p}`);
      expect(c.hits).toBeGreaterThanOrEqual(limit);
    }
  });
});

/**
 * Ding et al. (2018) on the interval's ends (docs/methods.md §12.1). Each end is a function of the
 * tree alone (post-processing), so it must be epsilon_tree-DP with epsilon_tree the tree's share.
 * Neighbours: D (400 rows, 50 at each of 0..7) and D plus one row at the lowest value (it moves
 * every prefix and the total). A miss of 1/2 keeps the ends moving between buckets.
 */
const SELECT_RUNS = 20_000;
const TEST_RUNS = 50_000;
const LEVEL = 1e-3;

function dingOnEnd(run: (xs: number[]) => number, D: number[], D2: number[], epsilon: number): { p: number; event: string } {
  const a = Array.from({ length: SELECT_RUNS }, () => run(D));
  const b = Array.from({ length: SELECT_RUNS }, () => run(D2));
  const values = [...new Set(a.concat(b))].sort((x, y) => x - y);
  let best = { score: -Infinity, has: (_: number) => false, name: "", swap: false };
  for (const c of values) {
    for (const [name, has] of [[`>= ${c}`, (y: number) => y >= c], [`<= ${c}`, (y: number) => y <= c], [`== ${c}`, (y: number) => y === c]] as const) {
      const ca = a.filter(has).length;
      const cb = b.filter(has).length;
      // too rare, or too common, to test with any power (and to keep the Fisher tails away from their edges)
      if (Math.max(ca, cb) < SELECT_RUNS / 200 || Math.min(ca, cb) > SELECT_RUNS - SELECT_RUNS / 200) continue;
      for (const swap of [false, true]) {
        const [c1, c2] = swap ? [cb, ca] : [ca, cb];
        const p1 = (c1 * Math.exp(-epsilon)) / SELECT_RUNS;
        const p2 = c2 / SELECT_RUNS;
        const score = (p1 - p2) / Math.sqrt((p1 + p2) / SELECT_RUNS + 1e-12);
        if (score > best.score) best = { score, has, name, swap };
      }
    }
  }
  let c1 = 0;
  let c2 = 0;
  for (let i = 0; i < TEST_RUNS; i++) if (best.has(run(best.swap ? D2 : D))) c1++;
  for (let i = 0; i < TEST_RUNS; i++) if (best.has(run(best.swap ? D : D2))) c2++;
  return { p: dingPValue(c1, TEST_RUNS, c2, TEST_RUNS, epsilon), event: `${best.swap ? "D'" : "D"} ${best.name}` };
}

describe("hypothesis test for privacy violations on the value interval (Ding et al. 2018)", () => {
  const D = Array.from({ length: 400 }, (_, i) => i % 8);
  const D2 = [...D, 0];
  const m = 8; // values 0..7: L = 3, four levels
  const epsTree = R("1");
  const runWith = (law: NoiseLaw, bits: Bits, end: "low" | "high") => (xs: number[]) => {
    const counts = Array.from({ length: m }, (_, v) => BigInt(xs.filter((x) => x === v).length));
    const iv = quantileInterval({ tree: noisyTree(counts, law, bits), m, p: R("1/2"), law, miss: R("1/2"), bits });
    expect(iv.method).toBe("calibrated");
    return end === "low" ? iv.lowBucket : iv.highBucket;
  };

  it("honest tree (sensitivity k (L + 1) = 4) at epsilon 1: no violation on either end", () => {
    const law = calibrate(treeSensitivity(m, 1, "discrete-laplace"), { epsilon: epsTree });
    for (const end of ["low", "high"] as const) {
      const r = dingOnEnd(runWith(law, new Bits(seededBytes(`ding-tree-${end}`)), end), D, D2, 1);
      expect(r.p, r.event).toBeGreaterThan(LEVEL);
    }
  });

  it("a broken tree (per-unit bound forgotten: sensitivity L + 1 for a unit of k = 16 rows) claiming epsilon 1 IS detected", () => {
    // The ends are coarse (bucket indices), so a small slip hides in them; forgetting the unit's
    // k rows (group privacy, docs/methods.md §1) is the slip that shows. Neighbours: D and D plus one
    // unit of 16 rows at the lowest value.
    const Dk = [...D, ...Array.from({ length: 16 }, () => 0)];
    const honest = calibrate(treeSensitivity(m, 16, "discrete-laplace"), { epsilon: epsTree });
    const ok = dingOnEnd(runWith(honest, new Bits(seededBytes("ding-tree-k")), "low"), D, Dk, 1);
    expect(ok.p, ok.event).toBeGreaterThan(LEVEL);
    const broken = calibrate(treeSensitivity(m, 1, "discrete-laplace"), { epsilon: epsTree });
    const r = dingOnEnd(runWith(broken, new Bits(seededBytes("ding-tree-broken")), "low"), D, Dk, 1);
    expect(r.p, r.event).toBeLessThan(LEVEL);
  });
});
