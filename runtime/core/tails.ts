/**
 * Tail sums of the two noise families in binary64, for display only (the `coverage` figure and
 * variances): no half-width, cost or draw depends on them; those use the exact bounds of
 * tailbounds.ts. Every routine here runs in bounded time (closed forms, or at most 80,000 terms). Discrete Laplace has closed forms (docs/methods.md §4); the discrete Gaussian is summed
 * directly, smallest terms first, truncated at |x| <= ceil(40 sigma) + 1 (docs/methods.md §5). Above
 * DIRECT_SUM_LIMIT the sums switch to Euler–Maclaurin around the Gaussian integral, whose error is
 * of relative order sigma^-4 there (common practice; the tests compare both routes where they meet).
 */

/** Largest sigma summed term by term. */
export const DIRECT_SUM_LIMIT = 2000;

/** P(|Y| > h) for the discrete Laplace with scale t: 2 q^(h+1)/(1+q), q = exp(-1/t). */
export function laplaceTail(t: number, h: number): number {
  if (h < 0) return 1;
  const q = Math.exp(-1 / t);
  return Math.min(1, 2 * Math.exp(-(h + 1) / t) / (1 + q));
}

/** Variance of the discrete Laplace with scale t: 1/(2 sinh(1/(2t))^2) (docs/methods.md §4). */
export function laplaceVariance(t: number): number {
  const s = Math.sinh(1 / (2 * t));
  return 1 / (2 * s * s);
}

/** erfc(x) for x >= 0: Taylor series of erf below 2, Lentz continued fraction above (common practice). */
export function erfc(x: number): number {
  if (x < 0) return 2 - erfc(-x);
  if (x < 2) {
    // erf(x) = 2/sqrt(pi) sum (-1)^n x^(2n+1) / (n! (2n+1))
    let term = x;
    let sum = x;
    const x2 = x * x;
    for (let n = 1; n < 200; n++) {
      term *= -x2 / n;
      const add = term / (2 * n + 1);
      sum += add;
      if (Math.abs(add) < 1e-17 * Math.abs(sum)) break;
    }
    return 1 - (2 / Math.sqrt(Math.PI)) * sum;
  }
  // erfc(x) = exp(-x^2)/sqrt(pi) * 1/(x + (1/2)/(x + 1/(x + (3/2)/(x + 2/(x + ...)))))
  const tiny = 1e-300;
  let f = x;
  let c = x;
  let d = 0;
  for (let n = 1; n < 500; n++) {
    const an = n / 2;
    d = x + an * d;
    d = Math.abs(d) < tiny ? tiny : d;
    c = x + an / c;
    c = Math.abs(c) < tiny ? tiny : c;
    d = 1 / d;
    const delta = c * d;
    f *= delta;
    if (Math.abs(delta - 1) < 1e-16) break;
  }
  return Math.exp(-x * x) / (Math.sqrt(Math.PI) * f);
}

interface GaussSums {
  sigma2: number;
  /** tail[h] = sum_{x > h} w(x) for h = 0..limit (direct route only) */
  tail: Float64Array | null;
  total: number; // 1 + 2 sum_{x >= 1} w(x)
  limit: number;
}

// A few recent sigma^2 values (a mean interval alternates between two laws).
const cache = new Map<number, GaussSums>();
const CACHE_SIZE = 8;

function gaussSums(sigma2: number): GaussSums {
  const hit = cache.get(sigma2);
  if (hit !== undefined) return hit;
  const s = computeGaussSums(sigma2);
  if (cache.size >= CACHE_SIZE) cache.delete(cache.keys().next().value as number);
  cache.set(sigma2, s);
  return s;
}

function computeGaussSums(sigma2: number): GaussSums {
  const sigma = Math.sqrt(sigma2);
  if (sigma > DIRECT_SUM_LIMIT) return { sigma2, tail: null, total: sigma * Math.sqrt(2 * Math.PI), limit: 0 };
  const limit = Math.ceil(40 * sigma) + 1;
  const tail = new Float64Array(limit + 1);
  let acc = 0;
  for (let x = limit; x >= 1; x--) {
    tail[x] = acc; // sum over y > x
    acc += Math.exp(-(x * x) / (2 * sigma2));
  }
  tail[0] = acc;
  return { sigma2, tail, total: 1 + 2 * acc, limit };
}

/** sum_{x > h} w(x) by Euler–Maclaurin: integral + f/2 - f'/12 at a = h+1. */
function gaussTailSumEM(sigma2: number, h: number): number {
  const sigma = Math.sqrt(sigma2);
  const a = h + 1;
  const w = Math.exp(-(a * a) / (2 * sigma2));
  const integral = sigma * Math.sqrt(Math.PI / 2) * erfc(a / (sigma * Math.SQRT2));
  const deriv = (-a / sigma2) * w;
  return integral + w / 2 - deriv / 12;
}

/** P(|X| > h) for the discrete Gaussian N_Z(0, sigma2) (docs/methods.md §5). */
export function gaussianTail(sigma2: number, h: number): number {
  if (h < 0) return 1;
  const s = gaussSums(sigma2);
  if (s.tail === null) return Math.min(1, (2 * gaussTailSumEM(sigma2, h)) / s.total);
  if (h >= s.limit) return 0;
  return (2 * s.tail[h]) / s.total;
}

/** Exact variance of the discrete Gaussian by direct summation; sigma^2 itself beyond sigma = 20 (gap < 1e-3000 relative, docs/methods.md §5). */
export function gaussianVariance(sigma2: number): number {
  const sigma = Math.sqrt(sigma2);
  if (sigma > 20) return sigma2;
  const limit = Math.ceil(40 * sigma) + 1;
  let num = 0;
  let den = 0;
  for (let x = limit; x >= 1; x--) {
    const w = Math.exp(-(x * x) / (2 * sigma2));
    num += x * x * w;
    den += w;
  }
  return (2 * num) / (1 + 2 * den);
}

/** P(X = 0) for the discrete Gaussian ([C5.6]). */
export function gaussianPmfZero(sigma2: number): number {
  return 1 / gaussSums(sigma2).total;
}
