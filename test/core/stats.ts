/**
 * Statistical helpers for the core's tests: exact-pmf chi-square goodness of fit (p-value from
 * jstat's chi-square cdf), a log-gamma hypergeometric tail and the thinning-averaged p-value of
 * Ding, Wang, Wang, Zhang & Kifer (2018) with the factor 2 of Vovk & Wang (2020) (docs/methods.md §12.1).
 */
// @ts-expect-error jstat ships no type declarations
import jStatModule from "jstat";

const jStat = (jStatModule as { jStat?: unknown }).jStat ?? jStatModule;
// eslint-disable-next-line @typescript-eslint/no-explicit-any
export const jstat = jStat as any;

/** Chi-square upper-tail p-value (jstat). */
export function chiSquarePValue(stat: number, df: number): number {
  return 1 - jstat.chisquare.cdf(stat, df);
}

/**
 * Chi-square test of integer samples against an exact pmf on [-K, K] (mass outside is pooled into
 * the end bins). Bins are merged left to right until each holds >= 1/maxBins of the mass, so every
 * expected count is large.
 */
export function chiSquareAgainstPmf(
  counts: Map<number, number>,
  pmf: (y: number) => number,
  K: number,
  n: number,
  maxBins = 100,
): { stat: number; df: number; p: number; bins: number } {
  const target = 1 / maxBins;
  const edges: { lo: number; hi: number; p: number }[] = [];
  let lo = -K;
  let acc = 0;
  let inside = 0;
  for (let y = -K; y <= K; y++) {
    const p = pmf(y);
    acc += p;
    inside += p;
    if (acc >= target) {
      edges.push({ lo, hi: y, p: acc });
      lo = y + 1;
      acc = 0;
    }
  }
  if (acc > 0 || lo <= K) {
    if (edges.length > 0) {
      const last = edges[edges.length - 1];
      last.hi = K;
      last.p += acc;
    } else edges.push({ lo: -K, hi: K, p: acc });
  }
  // mass beyond +-K, split evenly by symmetry
  const outside = Math.max(0, 1 - inside);
  edges[0].p += outside / 2;
  edges[edges.length - 1].p += outside / 2;
  const observed = new Array<number>(edges.length).fill(0);
  for (const [y, c] of counts) {
    let idx = 0;
    if (y > K) idx = edges.length - 1;
    else if (y >= -K) {
      // binary search
      let a = 0;
      let b = edges.length - 1;
      while (a < b) {
        const mid = (a + b) >> 1;
        if (edges[mid].hi < y) a = mid + 1;
        else b = mid;
      }
      idx = a;
    }
    observed[idx] += c;
  }
  let stat = 0;
  for (let i = 0; i < edges.length; i++) {
    const e = edges[i].p * n;
    stat += ((observed[i] - e) * (observed[i] - e)) / e;
  }
  const df = edges.length - 1;
  return { stat, df, p: chiSquarePValue(stat, df), bins: edges.length };
}

// Lanczos approximation (g = 7, n = 9), relative error about 1e-15 (common practice).
const LANCZOS = [
  0.99999999999980993, 676.5203681218851, -1259.1392167224028, 771.32342877765313, -176.61502916214059, 12.507343278686905,
  -0.13857109526572012, 9.9843695780195716e-6, 1.5056327351493116e-7,
];

export function logGamma(x: number): number {
  if (x < 0.5) return Math.log(Math.PI / Math.abs(Math.sin(Math.PI * x))) - logGamma(1 - x);
  x -= 1;
  let a = LANCZOS[0];
  const t = x + 7.5;
  for (let i = 1; i < 9; i++) a += LANCZOS[i] / (x + i);
  return 0.5 * Math.log(2 * Math.PI) + (x + 0.5) * Math.log(t) - t + Math.log(a);
}

function logChoose(n: number, k: number): number {
  return logGamma(n + 1) - logGamma(k + 1) - logGamma(n - k + 1);
}

/** P(H >= k) for H ~ Hypergeometric(population N, successes K, draws n). */
export function hypergeomUpperTail(k: number, N: number, K: number, n: number): number {
  const jMin = Math.max(0, n - (N - K));
  const jMax = Math.min(K, n);
  if (k <= jMin) return 1;
  if (k > jMax) return 0;
  const logDen = logChoose(N, n);
  if (k <= (n * K) / N) {
    // Below the mean the upper tail is near 1 and its first term can underflow to 0: use
    // 1 - P(H <= k - 1), summed downward from k - 1 (its terms shrink away from the mean).
    let down = Math.exp(logChoose(K, k - 1) + logChoose(N - K, n - k + 1) - logDen);
    let lower = down;
    for (let j = k - 1; j > jMin; j--) {
      down *= (j * (N - K - n + j)) / ((K - j + 1) * (n - j + 1));
      lower += down;
      if (down < 1e-18 * lower) break;
    }
    return Math.max(0, 1 - lower);
  }
  let term = Math.exp(logChoose(K, k) + logChoose(N - K, n - k) - logDen);
  let sum = term;
  for (let j = k; j < jMax; j++) {
    term *= ((K - j) * (n - j)) / ((j + 1) * (N - K - n + j + 1));
    sum += term;
    if (term < 1e-18 * sum && j > (n * K) / N) break;
  }
  return Math.min(1, sum);
}

/** One-sided Fisher exact p-value for c1/n1 > c2/n2: P(H >= c1), H ~ Hypergeom(n1+n2, c1+c2, n1). */
export function fisherOneSided(c1: number, n1: number, c2: number, n2: number): number {
  return hypergeomUpperTail(c1, n1 + n2, c1 + c2, n1);
}

/**
 * Thinning-averaged p-value of Ding et al. 2018: sum_k Binom(k; c1, e^-eps) * P(H_k >= k),
 * H_k ~ Hypergeom(n1+n2, k + c2, n1) (docs/methods.md §12.1 step 3).
 */
export function thinnedPValue(c1: number, n1: number, c2: number, n2: number, epsilon: number): number {
  const r = Math.exp(-epsilon);
  const mean = c1 * r;
  const sd = Math.sqrt(c1 * r * (1 - r));
  const kLo = Math.max(0, Math.floor(mean - 12 * sd - 10));
  const kHi = Math.min(c1, Math.ceil(mean + 12 * sd + 10));
  let total = 0;
  for (let k = kLo; k <= kHi; k++) {
    const w = Math.exp(logChoose(c1, k) + k * Math.log(r) + (c1 - k) * Math.log1p(-r));
    if (w < 1e-300) continue;
    total += w * hypergeomUpperTail(k, n1 + n2, k + c2, n1);
  }
  return Math.min(1, total);
}

/** Valid p-value from the average: min(1, 2 x average) (Vovk & Wang 2020). */
export function dingPValue(c1: number, n1: number, c2: number, n2: number, epsilon: number): number {
  return Math.min(1, 2 * thinnedPValue(c1, n1, c2, n2, epsilon));
}

/** Two-sided binomial acceptance band (docs/methods.md §12.2). */
export function binomialBand(R: number, p: number, beta: number): { lo: number; hi: number } {
  let lo = -1;
  let hi = -1;
  let cdf = 0;
  for (let k = 0; k <= R; k++) {
    cdf += Math.exp(logChoose(R, k) + k * Math.log(p) + (R - k) * Math.log1p(-p));
    if (lo < 0 && cdf >= beta / 2) lo = k;
    if (hi < 0 && cdf >= 1 - beta / 2) {
      hi = k;
      break;
    }
  }
  return { lo, hi };
}

/** P(X <= k) for X ~ Binomial(R, p), by direct summation in log space. */
export function binomialCdf(k: number, R: number, p: number): number {
  let cdf = 0;
  for (let j = 0; j <= k; j++) cdf += Math.exp(logChoose(R, j) + j * Math.log(p) + (R - j) * Math.log1p(-p));
  return Math.min(1, cdf);
}

/** One-sided lower limit: the smallest k with P(X <= k) >= beta (docs/methods.md §12.2, [C12.2]). */
export function binomialLowerLimit(R: number, p: number, beta: number): number {
  let cdf = 0;
  for (let k = 0; k <= R; k++) {
    cdf += Math.exp(logChoose(R, k) + k * Math.log(p) + (R - k) * Math.log1p(-p));
    if (cdf >= beta) return k;
  }
  return R;
}

/** Counts of integer samples. */
export function tally(samples: Iterable<number>): Map<number, number> {
  const m = new Map<number, number>();
  for (const s of samples) m.set(s, (m.get(s) ?? 0) + 1);
  return m;
}
