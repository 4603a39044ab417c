/**
 * Error bars. Half-widths come from rigorous upper bounds on the tails of the integer noise, in
 * exact integer arithmetic (tailbounds.ts; docs/methods.md §4–5: the smallest integer h with
 * P(|noise| > h) <= a, never smaller). Ratio estimates (means, variances) get conservative
 * noise-only intervals by the corner method of docs/methods.md §8: they cover the DP noise, not clamping
 * bias, grid rounding or sampling error.
 */
import { BadInputError } from "../errors.js";
import { checkLaw, type NoiseLaw } from "./mechanisms.js";
import { Rational } from "./rational.js";
import { gaussianHalfWidth, laplaceHalfWidth, missOf } from "./tailbounds.js";
import { erfc, gaussianTail, gaussianVariance, laplaceTail, laplaceVariance } from "./tails.js";

export interface NoisyPart {
  noisy: bigint;
  law: NoiseLaw;
}

export interface IntervalResult {
  estimate: Rational | null;
  low: Rational;
  high: Rational;
  method: string;
  /** Always true: the interval covers the DP noise only, not clamping/grid bias or sampling error. */
  noiseOnly: true;
  /** Guaranteed lower bound on the noise-only coverage (>= the requested confidence). */
  coverage: number;
}

/** Confidence used when the caller does not choose one (the default, 95%). */
export const DEFAULT_CONFIDENCE = 0.95;

/** Throws unless 0 < c < 1. */
export function checkConfidence(c: number): void {
  if (typeof c !== "number" || !Number.isFinite(c) || c <= 0 || c >= 1) {
    throw new BadInputError(`confidence must be a number strictly between 0 and 1, got ${String(c)}`);
  }
}

/**
 * P(|noise| > h) for an integer h, in binary64. Display only (the `coverage` figure of an interval):
 * no half-width, cost or draw depends on it, and it runs in bounded time (closed form, or a sum of
 * at most 80,000 terms, cached).
 */
export function tailProbability(law: NoiseLaw, h: bigint): number {
  checkLaw(law);
  if (h < 0n) return 1;
  const hn = Number(h);
  if (law.family === "discrete-laplace") return laplaceTail(law.scale.toNumber(), hn);
  return gaussianTail(law.sigma2.toNumber(), hn);
}

/** Noise variance in binary64 (display only): exact for the discrete Laplace (§4), summed for the discrete Gaussian (§5). */
export function noiseVariance(law: NoiseLaw): number {
  checkLaw(law);
  return law.family === "discrete-laplace" ? laplaceVariance(law.scale.toNumber()) : gaussianVariance(law.sigma2.toNumber());
}

/**
 * Smallest integer h >= 0 with P(|noise| > h) <= 1 - confidence (docs/methods.md §4–5), from rigorous
 * upper bounds on the tail in exact integer arithmetic (tailbounds.ts): never below the exact
 * value, at most one grid unit above it for the discrete Laplace, and within the relative slack
 * stated in tailbounds.ts for the discrete Gaussian. A binary64 normal quantile only picks where the
 * bounded exact search starts.
 */
export function halfWidth(law: NoiseLaw, confidence: number = DEFAULT_CONFIDENCE): bigint {
  checkConfidence(confidence);
  checkLaw(law);
  // A release's cells share one law: recent answers are kept (the result depends only on the key).
  const key = `${law.family}:${law.family === "discrete-laplace" ? law.scale : law.sigma2}:${confidence}`;
  const hit = recent.get(key);
  if (hit !== undefined) return hit;
  const a = missOf(confidence);
  let h: bigint;
  if (law.family === "discrete-laplace") h = laplaceHalfWidth(law.scale, a);
  else {
    const guess = Math.sqrt(law.sigma2.toNumber()) * normalQuantile(1 - (1 - confidence) / 2);
    const hint = Number.isFinite(guess) && guess > 0 ? BigInt(Math.floor(guess)) : 0n;
    h = gaussianHalfWidth(law.sigma2, a, hint);
  }
  if (recent.size >= RECENT_SIZE) recent.delete(recent.keys().next().value as string);
  recent.set(key, h);
  return h;
}

const RECENT_SIZE = 64;
const recent = new Map<string, bigint>();

/**
 * Inverse of the standard normal cdf: Acklam's rational approximation (relative error ~1e-9, common
 * practice) refined by one Newton step on Phi(z) = erfc(-z/sqrt 2)/2, which brings it to ~1e-15.
 * Binary64, bounded time: used only for starting guesses and the continuous references.
 */
export function normalQuantile(p: number): number {
  if (!(p > 0 && p < 1)) throw new BadInputError(`normal quantile needs 0 < p < 1, got ${p}`);
  const z = acklam(p);
  const cdf = erfc(-z / Math.SQRT2) / 2;
  const pdf = Math.exp(-(z * z) / 2) / Math.sqrt(2 * Math.PI);
  return z - (cdf - p) / pdf;
}

function acklam(p: number): number {
  const a = [-3.969683028665376e1, 2.209460984245205e2, -2.759285104469687e2, 1.38357751867269e2, -3.066479806614716e1, 2.506628277459239];
  const b = [-5.447609879822406e1, 1.615858368580409e2, -1.556989798598866e2, 6.680131188771972e1, -1.328068155288572e1];
  const c = [-7.784894002430293e-3, -3.223964580411365e-1, -2.400758277161838, -2.549732539343734, 4.374664141464968, 2.938163982698783];
  const d = [7.784695709041462e-3, 3.224671290700398e-1, 2.445134137142996, 3.754408661907416];
  const pl = 0.02425;
  if (p < pl) {
    const q = Math.sqrt(-2 * Math.log(p));
    return (((((c[0] * q + c[1]) * q + c[2]) * q + c[3]) * q + c[4]) * q + c[5]) / ((((d[0] * q + d[1]) * q + d[2]) * q + d[3]) * q + 1);
  }
  if (p > 1 - pl) return -acklam(1 - p);
  const q = p - 0.5;
  const r = q * q;
  return ((((((a[0] * r + a[1]) * r + a[2]) * r + a[3]) * r + a[4]) * r + a[5]) * q) / (((((b[0] * r + b[1]) * r + b[2]) * r + b[3]) * r + b[4]) * r + 1);
}

function clampR(x: Rational, lo: Rational, hi: Rational): Rational {
  return x.lt(lo) ? lo : x.gt(hi) ? hi : x;
}

function checkBounds(lower: Rational, upper: Rational): void {
  if (!(lower instanceof Rational) || !(upper instanceof Rational) || !lower.lt(upper)) {
    throw new BadInputError("interval bounds must be exact rationals with lower < upper");
  }
}

export interface RatioIntervalArgs {
  /** noisy (possibly centred) sum, in units of sumStep */
  sum: NoisyPart;
  /** noisy row count */
  count: NoisyPart;
  sumStep: Rational;
  /** public clamp bounds of the mean */
  lower: Rational;
  upper: Rational;
  confidence: number;
  /** when given, `sum` is the centred sum of (x - centre) and the mean is centre + sum/count (§7) */
  centre?: Rational;
}

/**
 * Mean interval by the corner method (docs/methods.md §8): a_S = a_N = a/2 (union bound), half-widths
 * h_S, h_N; if N~ - h_N <= 0 report [L, U]; otherwise the extremes of (S~ ± h_S)/(N~ ± h_N),
 * intersected with [L, U]. Guaranteed noise-only coverage (1 - tail_S)(1 - tail_N) >= 1 - a
 * ([C8.3]).
 */
export function ratioInterval(args: RatioIntervalArgs): IntervalResult {
  checkConfidence(args.confidence);
  checkBounds(args.lower, args.upper);
  const a = 1 - args.confidence;
  const conf = 1 - a / 2;
  const hS = halfWidth(args.sum.law, conf);
  const hN = halfWidth(args.count.law, conf);
  const coverage = (1 - tailProbability(args.sum.law, hS)) * (1 - tailProbability(args.count.law, hN));
  const c = args.centre ?? Rational.ZERO;
  const g = args.sumStep;
  const S = args.sum.noisy;
  const N = args.count.noisy;
  const toValue = (s: bigint, n: bigint): Rational => c.add(g.mul(s).div(n));
  const estimate = N > 0n ? clampR(toValue(S, N), args.lower, args.upper) : null;
  const method = `corner method (docs/methods.md §8), union bound a/2 per part, sum ±${hS}, count ±${hN}; noise only, excludes clamping and grid bias`;
  if (N - hN <= 0n) return { estimate, low: args.lower, high: args.upper, method, noiseOnly: true, coverage };
  let low: Rational | null = null;
  let high: Rational | null = null;
  for (const s of [S - hS, S + hS]) {
    for (const n of [N - hN, N + hN]) {
      const v = toValue(s, n);
      if (low === null || v.lt(low)) low = v;
      if (high === null || v.gt(high)) high = v;
    }
  }
  return {
    estimate,
    low: clampR(low as Rational, args.lower, args.upper),
    high: clampR(high as Rational, args.lower, args.upper),
    method,
    noiseOnly: true,
    coverage,
  };
}

export interface VarianceIntervalArgs {
  /** noisy row count */
  count: NoisyPart;
  /** noisy sum of (x - centre), in units of sumStep */
  sum: NoisyPart;
  /** noisy sum of (x - centre)^2, in units of squareStep */
  sumSquares: NoisyPart;
  sumStep: Rational;
  squareStep: Rational;
  /** public clamp bounds of the values; the variance is clamped to [0, ((U-L)/2)^2] */
  lower: Rational;
  upper: Rational;
  confidence: number;
}

/**
 * Population variance v = Q/N - (S/N)^2 from three releases on centred values (docs/methods.md §8).
 * Conservative interval: a/3 per part (union bound) and the exact extremes of v over the box of
 * half-widths. v rises with Q; for fixed Q and |S| it is f(u) = Q u - S^2 u^2 in u = 1/N, concave,
 * so the maximum uses Q_hi, the |S| nearest 0 and u clamped around Q/(2 S^2), and the minimum uses
 * Q_lo, the largest |S| and an end of the u range.
 */
export function varianceInterval(args: VarianceIntervalArgs): IntervalResult {
  checkConfidence(args.confidence);
  checkBounds(args.lower, args.upper);
  const a = 1 - args.confidence;
  const conf = 1 - a / 3;
  const hN = halfWidth(args.count.law, conf);
  const hS = halfWidth(args.sum.law, conf);
  const hQ = halfWidth(args.sumSquares.law, conf);
  const coverage =
    (1 - tailProbability(args.count.law, hN)) * (1 - tailProbability(args.sum.law, hS)) * (1 - tailProbability(args.sumSquares.law, hQ));
  const half = args.upper.sub(args.lower).div(2n);
  const vmax = half.mul(half);
  const zero = Rational.ZERO;
  const N = args.count.noisy;
  const sVal = (s: bigint): Rational => args.sumStep.mul(s);
  const qVal = (q: bigint): Rational => args.squareStep.mul(q);
  const v = (q: Rational, s: Rational, u: Rational): Rational => q.mul(u).sub(s.mul(s).mul(u).mul(u));
  const estimate = N > 0n ? clampR(v(qVal(args.sumSquares.noisy), sVal(args.sum.noisy), Rational.of(1n, N)), zero, vmax) : null;
  const method = `corner method (docs/methods.md §8), union bound a/3 per part, count ±${hN}, sum ±${hS}, sum of squares ±${hQ}; noise only, excludes clamping and grid bias`;
  if (N - hN <= 0n) return { estimate, low: zero, high: vmax, method, noiseOnly: true, coverage };
  const uLo = Rational.of(1n, N + hN);
  const uHi = Rational.of(1n, N - hN);
  const sLo = sVal(args.sum.noisy - hS);
  const sHi = sVal(args.sum.noisy + hS);
  const qLo = qVal(args.sumSquares.noisy - hQ);
  const qHi = qVal(args.sumSquares.noisy + hQ);
  // maximum
  const sNear = sLo.sign() <= 0 && sHi.sign() >= 0 ? zero : sLo.abs().min(sHi.abs());
  let uStar: Rational;
  if (sNear.isZero()) uStar = qHi.sign() >= 0 ? uHi : uLo;
  else uStar = clampR(qHi.div(sNear.mul(sNear).mul(2n)), uLo, uHi);
  const high = v(qHi, sNear, uStar);
  // minimum
  const sFar = sLo.abs().max(sHi.abs());
  const low = v(qLo, sFar, uLo).min(v(qLo, sFar, uHi));
  return { estimate, low: clampR(low, zero, vmax), high: clampR(high, zero, vmax), method, noiseOnly: true, coverage };
}
