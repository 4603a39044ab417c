/**
 * Error bars. Half-widths come from rigorous upper bounds on the tails of the integer noise, in
 * exact integer arithmetic (tailbounds.ts; docs/methods.md §4–5: the smallest integer h with
 * P(|noise| > h) <= a, never smaller). Ratio estimates (means, variances) get noise-only intervals
 * by the pivot method of docs/methods.md §8 (ratiointervals.ts): they cover the DP noise, not
 * clamping bias, grid rounding or sampling error.
 */
import { BadInputError } from "../errors.js";
import { checkLaw, type NoiseLaw } from "./mechanisms.js";
import { Rational } from "./rational.js";
import { gaussianHalfWidth, laplaceHalfWidth, missOf } from "./tailbounds.js";
import { firstPassing } from "./search.js";
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

/** Confidence used when the caller does not choose one (the issue's default, 95%). */
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


// ---------------------------------------------------------------------------------------------
// Ratio intervals by pivots (docs/methods.md §8)
// ---------------------------------------------------------------------------------------------

/**
 * A law's tail h -> P(|noise| > h) in binary64, made once per law object: the tail sums below call
 * it millions of times, and converting the exact rational parameter on each call was most of a
 * variance interval's cost (about 200 ms of 240 ms). The Laplace form is tails.ts laplaceTail
 * with exp(-1/t) taken once: the same operations on the same values, so the same results.
 */
const lawTails = new WeakMap<NoiseLaw, (h: number) => number>();

function tailOf(law: NoiseLaw): (h: number) => number {
  let f = lawTails.get(law);
  if (f === undefined) {
    if (law.family === "discrete-laplace") {
      const t = law.scale.toNumber();
      const onePlusQ = 1 + Math.exp(-1 / t);
      f = (h) => (h < 0 ? 1 : Math.min(1, (2 * Math.exp(-(h + 1) / t)) / onePlusQ));
    } else {
      const sigma2 = law.sigma2.toNumber();
      f = (h) => gaussianTail(sigma2, h);
    }
    lawTails.set(law, f);
  }
  return f;
}

/** P(|noise| > x) for a real threshold x (the noise is an integer: P(|noise| > floor x)); 1 below 0. Binary64. */
function tailAt(law: NoiseLaw, x: number): number {
  if (!(x >= 0)) return 1;
  return tailOf(law)(Math.floor(x));
}

/**
 * The law of |Y| cut into at most `count` blocks of consecutive integers [j0, j1] with their
 * masses, up to J where P(|Y| > J) <= cut; `rest` is that remainder (counted as a sure miss).
 */
interface Blocks {
  ends: Float64Array;
  mass: Float64Array;
  rest: number;
}

const blockCache = new Map<string, Blocks>();

function blocksOf(law: NoiseLaw, cut: number, count: number): Blocks {
  const key = `${law.family}:${law.family === "discrete-laplace" ? law.scale : law.sigma2}:${cut}:${count}`;
  const hit = blockCache.get(key);
  if (hit !== undefined) return hit;
  const tail = (j: number): number => tailAt(law, j);
  // J: the least integer with P(|Y| > J) <= cut (a bounded search; the tail falls in J).
  const J = Number(firstPassing((j) => tail(Number(j)) <= cut, 0n, 1n << 60n, 0n) ?? 1n << 60n);
  const width = Math.max(1, Math.ceil((J + 1) / count));
  const n = Math.ceil((J + 1) / width);
  const ends = new Float64Array(n);
  const mass = new Float64Array(n);
  let before = 1; // P(|Y| > j0 - 1)
  for (let b = 0; b < n; b++) {
    const j1 = Math.min(J, b * width + width - 1);
    const after = tail(j1);
    ends[b] = j1;
    mass[b] = Math.max(0, before - after);
    before = after;
  }
  const out = { ends, mass, rest: tail(J) };
  if (blockCache.size >= RECENT_SIZE) blockCache.delete(blockCache.keys().next().value as string);
  blockCache.set(key, out);
  return out;
}

/** One extra noise term c |Y| of a dominating sum; c >= 0 in binary64, already rounded up. */
interface Extra {
  law: NoiseLaw;
  c: number;
}

// Relative and absolute margins added to a binary64 tail sum before it is compared with a miss
// probability: they cover the rounding of at most a few thousand positive terms many times over.
const TAIL_REL = 1e-9;
const TAIL_ABS = 1e-15;
/** Blocks per extra term: the finest for one extra, coarser when two are nested. */
const BLOCKS_ONE = 1024;
const BLOCKS_TWO = 96;
/** Blocks of the outer extra (taken in absolute value) when two are nested. */
const BLOCKS_OUTER = 32;

/**
 * An upper bound on P(|X + s| > h) for the integer noise X, integer h >= 0 and a shift s >= 0,
 * that never decreases as s grows (docs/methods.md §8). X is symmetric with a pmf that falls away
 * from 0, so a window of a fixed number of integers holds less mass the further it sits from 0.
 * For s = 0 it is P(|X| > h); for j - 1 < s <= j (j >= 1) the event |X + s| <= h contains
 * X in [-(h + j - 1), h - j], a window of 2h integers centred at -(j - 1/2), which moves out as j grows.
 */
function shiftedTail(tx: (h: number) => number, h: number, s: number): number {
  // tx = tailOf(X); every argument below is a whole number (h, j integers), as tailAt would floor it.
  if (h < 0) return 1;
  if (s <= 0) return tx(h);
  const j = Math.ceil(s);
  const half = (k: number): number => tx(k) / 2; // P(X > k) for k >= 0
  const inside = h - j >= 0 ? 1 - half(h - j) - half(h + j - 1) : half(j - h - 1) - half(h + j - 1);
  return Math.min(1, Math.max(0, 1 - inside));
}

/**
 * An upper bound on P(|X + c1 Y1| + c2 |Y2| > h) for independent noises (c2 = 0: one extra), hence
 * on P(|X + c1 Y1 + c2 Y2| > h), that never decreases as c1 or c2 grows: Y2 is taken in absolute
 * value (the threshold falls by c2 |Y2|), Y1 through shiftedTail. Each Y is cut into blocks that
 * take their largest |Y|; the mass past the cut counts as a miss; a margin covers binary64 rounding.
 */
function pivotTail(h: number, x: NoiseLaw, e1: Extra, e2: Extra | null, cut: number): number {
  const two = e2 !== null && e2.c > 0;
  const b1 = e1.c > 0 ? blocksOf(e1.law, cut, two ? BLOCKS_TWO : BLOCKS_ONE) : null;
  const tx = tailOf(x);
  const inner = (thr: number): number => {
    if (thr < 0) return 1;
    const t = Math.floor(thr);
    if (b1 === null) return tailAt(x, t);
    let s = b1.rest;
    for (let b = 0; b < b1.ends.length; b++) s += b1.mass[b] * shiftedTail(tx, t, e1.c * b1.ends[b]);
    return Math.min(1, s);
  };
  let total: number;
  if (!two) total = inner(h);
  else {
    const b2 = blocksOf((e2 as Extra).law, cut, BLOCKS_OUTER);
    total = b2.rest;
    for (let b = 0; b < b2.ends.length; b++) {
      const t = h - (e2 as Extra).c * b2.ends[b];
      if (t < 0) {
        for (let r = b; r < b2.ends.length; r++) total += b2.mass[r];
        break;
      }
      total += b2.mass[b] * inner(t);
    }
  }
  return Math.min(1, total * (1 + TAIL_REL) + TAIL_ABS);
}

/** The better of the two ways of nesting two extras (each is a valid, monotone bound; so is their minimum). */
function sumTail(h: number, x: NoiseLaw, extras: readonly Extra[], cut: number): number {
  if (extras.length === 1) return pivotTail(h, x, extras[0], null, cut);
  return Math.min(pivotTail(h, x, extras[0], extras[1], cut), pivotTail(h, x, extras[1], extras[0], cut));
}

/** c as a binary64 number never below the rational (for thresholds h - c j, smaller is safer). */
function upNumber(c: Rational): number {
  const v = c.toNumber();
  return v === 0 ? 0 : v * (1 + 2 ** -40) + Number.MIN_VALUE;
}

/** Coefficients are rounded up to the grid 2^(i/16) (steps of 4.4%), so the cells of a release share quantiles. */
const GRID_STEPS = 16;

/** The least grid value 2^(i/16) >= c (binary64, checked), and its index; null past binary64's range. */
function snapUp(c: Rational): { value: number; index: number } | null {
  const v = upNumber(c);
  if (!Number.isFinite(v) || v <= 0) return null;
  let i = Math.ceil(GRID_STEPS * Math.log2(v));
  while (2 ** (i / GRID_STEPS) < v) i++;
  const value = 2 ** (i / GRID_STEPS);
  return Number.isFinite(value) ? { value, index: i } : null;
}

const quantileCache = new Map<string, { q: bigint; miss: number }>();
const QUANTILE_CACHE_SIZE = 4096;

function lawKey(law: NoiseLaw): string {
  return `${law.family}:${law.family === "discrete-laplace" ? law.scale : law.sigma2}`;
}

/**
 * q(c) = min(q_B(c'), q_U(c')) with c' each coefficient rounded up to the grid 2^(i/16): q_B is the least
 * integer with P(|X + sum_i c'_i Y_i| > q) <= a by the upper bound of sumTail, found by a bounded
 * integer search below q_U; q_U is the union-bound value h_X + sum ceil(c'_i h_Yi) at
 * a/(1 + #extras) each, proven (§13). Both are valid for every c <= c' and grow with c', and c'
 * grows with c, so q does. `unionOnly` returns q_U(c'), which is never below q(c): a cheap first
 * round. Results are cached by laws, grid indices and a (the cells of one release share laws).
 * Returns the half-width and the bound on its miss probability (display).
 */
export function dominatingQuantile(
  x: NoiseLaw,
  extras: { law: NoiseLaw; c: Rational }[],
  a: number,
  opts: { hint?: bigint; unionOnly?: boolean } = {},
): { q: bigint; miss: number } {
  const live = extras.filter((e) => e.c.sign() > 0);
  const share = 1 - a / (1 + live.length);
  const snapped = live.map((e) => snapUp(e.c));
  if (snapped.some((s) => s === null)) {
    // Beyond binary64: the union bound with the exact coefficients, no search.
    let u = halfWidth(x, share);
    for (const e of live) u += e.c.mul(halfWidth(e.law, share)).ceil();
    return { q: u, miss: a };
  }
  const grid = snapped as { value: number; index: number }[];
  const key = `${lawKey(x)}|${live.map((e, i) => `${lawKey(e.law)}@${grid[i].index}`).join("|")}|${a}|${opts.unionOnly === true}`;
  const hit = quantileCache.get(key);
  if (hit !== undefined) return hit;
  let union = halfWidth(x, share);
  for (const [i, e] of live.entries()) union += Rational.fromNumberExact(grid[i].value).mul(halfWidth(e.law, share)).ceil();
  const done = (r: { q: bigint; miss: number }): { q: bigint; miss: number } => {
    if (quantileCache.size >= QUANTILE_CACHE_SIZE) quantileCache.delete(quantileCache.keys().next().value as string);
    quantileCache.set(key, r);
    return r;
  };
  if (live.length === 0) return done({ q: union, miss: tailAt(x, Number(union)) });
  if (opts.unionOnly === true) return done({ q: union, miss: a });
  const ex = live.map((e, i) => ({ law: e.law, c: grid[i].value }));
  const cut = a * 1e-4;
  const ok = (h: bigint): boolean => sumTail(Number(h), x, ex, cut) <= a;
  let hint = opts.hint;
  if (hint === undefined) {
    // Normal approximation of the quantile: only where the search starts.
    const sd = Math.sqrt(noiseVariance(x) + ex.reduce((s, e) => s + e.c * e.c * noiseVariance(e.law), 0));
    const guess = sd * normalQuantile(1 - a / 2);
    hint = Number.isFinite(guess) && guess > 0 ? BigInt(Math.floor(guess)) : 0n;
  }
  const q = firstPassing(ok, 0n, union, hint) ?? union;
  return done({ q, miss: q === union ? a : sumTail(Number(q), x, ex, cut) });
}

function clampR(x: Rational, lo: Rational, hi: Rational): Rational {
  return x.lt(lo) ? lo : x.gt(hi) ? hi : x;
}

function checkBounds(lower: Rational, upper: Rational): void {
  if (!(lower instanceof Rational) || !(upper instanceof Rational) || !lower.lt(upper)) {
    throw new BadInputError("interval bounds must be exact rationals with lower < upper");
  }
}

/** Rounds of narrowing (each recomputes a quantile with the bound the last round gave). */
const ROUNDS = 3;

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
 * Mean interval by the pivot method (docs/methods.md §8). With m the true mean in sum units about
 * the centre, S~ - m N~ = e_S - m e_N exactly, whatever the true count. With q(b) from
 * dominatingQuantile (P(|e_S - m e_N| > q(b)) <= a for every |m| <= b, growing with b), every m
 * with |S~ - m N~| <= q(|m|) forms a confidence set of level 1 - a. Starting from b = the largest
 * |m| the range allows (first round: the union-bound value, never smaller), each round's interval
 * [(S~ - q)/N~, (S~ + q)/N~] within the range bounds |m| for the next. A noisy count <= 0 gives
 * the declared range, stated in the method.
 */
export function ratioInterval(args: RatioIntervalArgs): IntervalResult {
  checkConfidence(args.confidence);
  checkBounds(args.lower, args.upper);
  const a = 1 - args.confidence;
  const c = args.centre ?? Rational.ZERO;
  const g = args.sumStep;
  const S = args.sum.noisy;
  const N = args.count.noisy;
  const estimate = N > 0n ? clampR(c.add(g.mul(S).div(N)), args.lower, args.upper) : null;
  // The range in sum units about the centre.
  const mLo = args.lower.sub(c).div(g);
  const mHi = args.upper.sub(c).div(g);
  const toValue = (m: Rational): Rational => c.add(g.mul(m));
  // Everything below reads only the noisy parts and their public laws: its time tells nothing the
  // release does not (post-processing; reply pacing, docs/methods.md §16, hides it where it fits).
  if (N <= 0n) {
    const method = `pivot method (docs/methods.md §8): the noisy count is not positive, so the noise leaves the mean unbounded within the declared range, which is reported; noise only`;
    return { estimate, low: args.lower, high: args.upper, method, noiseOnly: true, coverage: 1 };
  }
  let lo = mLo;
  let hi = mHi;
  let q = 0n;
  let miss = a;
  let bound = Rational.ZERO;
  for (let round = 0; round < ROUNDS; round++) {
    const b = lo.abs().max(hi.abs());
    if (round > 0 && b.ge(bound)) break;
    bound = b;
    ({ q, miss } = dominatingQuantile(args.sum.law, [{ law: args.count.law, c: b }], a, { unionOnly: round === 0 }));
    const nlo = Rational.of(S - q, N).max(mLo);
    const nhi = Rational.of(S + q, N).min(mHi);
    if (nlo.gt(nhi)) {
      // No mean in the range fits: the noise was past its quantile. Report the nearer bound.
      lo = hi = nhi.lt(mLo) ? mLo : mHi;
      break;
    }
    lo = nlo;
    hi = nhi;
  }
  const method =
    `pivot method (docs/methods.md §8): the means m with |noisy sum - m x noisy count| within the ${round6(1 - a)} quantile of ` +
    `|sum noise - m x count noise| (±${q} sum units for |m| up to ${round6(bound.toNumber())}), within the declared range; noise only, excludes clamping and grid bias`;
  return { estimate, low: toValue(lo), high: toValue(hi), method, noiseOnly: true, coverage: 1 - miss };
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
  /**
   * false: every round takes the union-bound quantile (proven, no search): for releases of more
   * than SEARCH_CELLS cells, whose cells would otherwise cost a few ms each (the cell count is
   * public, so the choice says nothing about the data). Default true.
   */
  search?: boolean;
}

/** Cells of one variance or std release up to which the variance pivot's quantile is searched. */
export const SEARCH_CELLS = 64;

/** Share of the miss probability given to the mean's pivot in a variance interval (§8). */
const MEAN_SHARE = 0.05;

/**
 * Population variance v = Q/N - (S/N)^2 from three releases on centred values, by two pivots
 * (docs/methods.md §8), in sum units m (mean) and square units:
 *   S~ - m N~ = e_S - m e_N                                   (mean pivot, miss a/20)
 *   Q~ - 2 m S~ + (m^2 - v) N~ = e_Q - 2 m e_S + (m^2 - v) e_N  (variance pivot, miss 19a/20)
 * (the second is exact for the true m and v: Q = N (v + m^2), S = N m). Each quantile comes from
 * dominatingQuantile with bounds on the coefficients, and grows with them. On both events
 * m lies in the mean interval I and v = v~ + (m - m~)^2 +- q/N~ with v~ = Q~/N~ - (S~/N~)^2,
 * m~ = S~/N~, so v lies in [v~ + min_I (m - m~)^2 - q/N~, v~ + max_I (m - m~)^2 + q/N~],
 * within [0, ((U - L)/2)^2]; rounds narrow the coefficient bounds as for the mean.
 */
export function varianceInterval(args: VarianceIntervalArgs): IntervalResult {
  checkConfidence(args.confidence);
  checkBounds(args.lower, args.upper);
  const a = 1 - args.confidence;
  const half = args.upper.sub(args.lower).div(2n);
  const vmaxValue = half.mul(half);
  const zero = Rational.ZERO;
  const N = args.count.noisy;
  const S = args.sum.noisy;
  const Q = args.sumSquares.noisy;
  // Work in sum units (m) and square units; the values' range is symmetric about the centre.
  const sq = args.squareStep;
  const g = args.sumStep;
  // m and v in one unit system: m in sum units, v in square units; (m g)^2 = m^2 g^2 = m^2 (g^2/sq) sq.
  const k = g.mul(g).div(sq); // square units per (sum unit)^2
  const mMax = half.div(g);
  const vMax = vmaxValue.div(sq);
  const estimate = N > 0n ? clampR(sq.mul(Rational.of(Q, N).sub(k.mul(Rational.of(S, N)).mul(Rational.of(S, N)))), zero, vmaxValue) : null;
  // As in ratioInterval: only the noisy parts and public laws are read from here on.
  if (N <= 0n) {
    const method = `pivot method (docs/methods.md §8): the noisy count is not positive, so the noise leaves the variance unbounded within [0, ((U - L)/2)^2], which is reported; noise only`;
    return { estimate, low: zero, high: vmaxValue, method, noiseOnly: true, coverage: 1 };
  }
  // Mean interval in sum units, as ratioInterval does, at miss a/20.
  const aMean = a * MEAN_SHARE;
  const aVar = a - aMean;
  let mlo = mMax.neg();
  let mhi = mMax;
  let mb = Rational.ZERO;
  let missMean = aMean;
  for (let round = 0; round < ROUNDS; round++) {
    const b = mlo.abs().max(mhi.abs());
    if (round > 0 && b.ge(mb)) break;
    mb = b;
    const r = dominatingQuantile(args.sum.law, [{ law: args.count.law, c: b }], aMean, { unionOnly: round === 0 });
    missMean = r.miss;
    const nlo = Rational.of(S - r.q, N).max(mMax.neg());
    const nhi = Rational.of(S + r.q, N).min(mMax);
    if (nlo.gt(nhi)) {
      mlo = mhi = nhi.lt(mMax.neg()) ? mMax.neg() : mMax;
      break;
    }
    mlo = nlo;
    mhi = nhi;
  }
  const mTilde = Rational.of(S, N);
  const vTilde = Rational.of(Q, N).sub(k.mul(mTilde).mul(mTilde));
  // (m - m~)^2 over I, in square units
  const dLo = mlo.sub(mTilde);
  const dHi = mhi.sub(mTilde);
  const dMin = dLo.sign() <= 0 && dHi.sign() >= 0 ? zero : dLo.abs().min(dHi.abs());
  const dMax = dLo.abs().max(dHi.abs());
  const shiftMin = k.mul(dMin).mul(dMin);
  const shiftMax = k.mul(dMax).mul(dMax);
  const m2Max = k.mul(mlo.abs().max(mhi.abs())).mul(mlo.abs().max(mhi.abs()));
  const mAbsMin = mlo.sign() <= 0 && mhi.sign() >= 0 ? zero : mlo.abs().min(mhi.abs());
  const m2Min = k.mul(mAbsMin).mul(mAbsMin);
  let vlo = zero;
  let vhi = vMax;
  let q = 0n;
  let missVar = aVar;
  let cS = zero;
  let cN = zero;
  for (let round = 0; round < ROUNDS; round++) {
    // Coefficients of the variance pivot in integer noise units: e_Q (square units), 2 m e_S with
    // m e_S in sum units times g/sq... expressed in square units: 2 m g^2/sq = 2 k m per unit of e_S;
    // (m^2 - v) e_N in square units.
    const ncS = k.mul(2n).mul(mlo.abs().max(mhi.abs()));
    const ncN = m2Max.sub(vlo).max(vhi.sub(m2Min)).max(zero);
    if (round > 0 && ncS.ge(cS) && ncN.ge(cN)) break;
    cS = ncS;
    cN = ncN;
    const r = dominatingQuantile(args.sumSquares.law, [
      { law: args.sum.law, c: cS },
      { law: args.count.law, c: cN },
    ], aVar, { unionOnly: round === 0 || args.search === false, ...(round > 1 ? { hint: q } : {}) });
    q = r.q;
    missVar = r.miss;
    const nlo = vTilde.add(shiftMin).sub(Rational.of(q, N)).max(zero);
    const nhi = vTilde.add(shiftMax).add(Rational.of(q, N)).min(vMax);
    if (nlo.gt(nhi)) {
      vlo = vhi = nhi.lt(zero) ? zero : vMax;
      break;
    }
    vlo = nlo;
    vhi = nhi;
  }
  const method =
    `pivot method (docs/methods.md §8): the variances v with |noisy Q - 2m noisy S + (m^2 - v) noisy N| within the quantile of ` +
    `|Q noise - 2m S noise + (m^2 - v) count noise| (±${q}${args.search === false ? " by the union bound" : ""}, with |2m| up to ${round6(cS.toNumber())} and |m^2 - v| up to ${round6(cN.toNumber())}) at miss ${round6(aVar)}, for m in the mean's interval at miss ${round6(aMean)}; noise only, excludes clamping and grid bias`;
  return { estimate, low: sq.mul(vlo), high: sq.mul(vhi), method, noiseOnly: true, coverage: 1 - missMean - missVar };
}

function round6(x: number): string {
  return String(Number(x.toPrecision(6)));
}
