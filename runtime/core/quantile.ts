/**
 * Quantiles by the exponential mechanism (McSherry & Talwar 2007) on a public candidate grid,
 * sampled exactly with a dyadic base in the spirit of Ilvento (2020), docs/methods.md §9. Weights are
 * integers x^c * 2^(y (C - c)) proportional to beta^c with beta = x/2^y >= exp(-epsilon/(2 Delta')),
 * and the draw has the law of one UniformInt over their sum (docs/methods.md §9 step 3), realised by
 * rejection with exact Bernoulli(x/2^y) trials: no floating point touches the selection.
 */
import { BadInputError } from "../errors.js";
import { expNeg, ln } from "./bounds.js";
import { type NoiseLaw, checkLaw, drawNoise, fillNoise } from "./mechanisms.js";
import { Rational, bitLength, floorDiv, isqrt } from "./rational.js";
import { gaussianHalfWidth, laplaceHalfWidth } from "./tailbounds.js";
import type { Bits } from "./random.js";

export interface QuantileArgs {
  /** r(y_j) = #{rows < y_j} for each candidate j (strict <, docs/methods.md §9 cautions), non-decreasing */
  countsBelow: bigint[];
  /** number of rows (used only inside the mechanism) */
  n: bigint;
  /** target quantile in (0, 1) */
  p: Rational;
  epsilon: Rational;
  bits: Bits;
  /** public cap on the integer cost c' (docs/methods.md §9 step 4); default from epsilon, Delta' and m */
  costCap?: bigint;
  /** y of the dyadic base x/2^y (default 20) */
  baseBits?: number;
}

export interface QuantileResult {
  index: number;
  /** the rational epsilon the ledger charges */
  epsilonUsed: Rational;
  /** dyadic base beta = baseNum / 2^baseBits */
  baseNum: bigint;
  baseBits: number;
  /** privacy actually spent, 2 Delta' ln(1/beta) <= epsilon (binary64, for display) */
  epsilonEffective: number;
}

/** Integer costs c'_j = |b r_j - a n| for p = a/b, and Delta' = max(a, b - a) (docs/methods.md §9; [C9.1]). */
export function quantileCosts(countsBelow: bigint[], n: bigint, p: Rational): { costs: bigint[]; sensitivity: bigint } {
  if (!(p instanceof Rational) || p.sign() <= 0 || p.ge(Rational.ONE)) throw new BadInputError(`quantile must lie strictly between 0 and 1, got ${String(p)}`);
  const a = p.num;
  const b = p.den;
  const costs = countsBelow.map((r) => {
    const d = b * r - a * n;
    return d < 0n ? -d : d;
  });
  return { costs, sensitivity: a > b - a ? a : b - a };
}

/**
 * x = ceil(2^y exp(-epsilon/(2 Delta'))) from a rigorous upper bound of the exponential (64 bits
 * beyond 2^-y, bounds.ts), so beta = x/2^y >= exp(-epsilon/(2 Delta')) always ([C9.3a]).
 */
export function dyadicBase(epsilon: Rational, sensitivity: bigint, y: number): bigint {
  const upper = expNeg(epsilon.div(Rational.of(2n * sensitivity)), y + 64).hi;
  const x = -((-upper) >> 64n);
  const one = 1n << BigInt(y);
  return x > one ? one : x < 1n ? 1n : x;
}

/** Integer weights W_j = x^c_j * 2^(y (C - c_j)), C = max c_j ([C9.3c]). */
export function dyadicWeights(costs: bigint[], x: bigint, y: number): bigint[] {
  let cMax = 0n;
  for (const c of costs) if (c > cMax) cMax = c;
  const yb = BigInt(y);
  const cache = new Map<bigint, bigint>();
  return costs.map((c) => {
    let w = cache.get(c);
    if (w === undefined) {
      w = x ** c << (yb * (cMax - c));
      cache.set(c, w);
    }
    return w;
  });
}

/** Exponential-mechanism quantile over public candidates; returns the chosen candidate index. */
export function exponentialQuantile(args: QuantileArgs): QuantileResult {
  const { countsBelow, n, epsilon, bits } = args;
  if (!Array.isArray(countsBelow) || countsBelow.length === 0) throw new BadInputError("quantile needs at least one candidate");
  if (!(epsilon instanceof Rational) || epsilon.sign() <= 0) throw new BadInputError(`epsilon must be positive, got ${String(epsilon)}`);
  if (typeof n !== "bigint" || n < 0n) throw new BadInputError("row count must be a non-negative integer");
  for (let j = 0; j < countsBelow.length; j++) {
    const r = countsBelow[j];
    if (typeof r !== "bigint" || r < 0n || r > n || (j > 0 && r < countsBelow[j - 1])) {
      throw new BadInputError("counts below each candidate must be non-decreasing integers in [0, n]");
    }
  }
  const y = args.baseBits ?? 20;
  if (!Number.isInteger(y) || y < 1 || y > 64) throw new BadInputError(`base bits must be an integer 1..64, got ${y}`);
  const m = countsBelow.length;
  const { costs, sensitivity } = quantileCosts(countsBelow, n, args.p);
  // Default cap (public: depends on epsilon, Delta', m only; binary64 here only sizes a public cap
  // and the displayed epsilonEffective, bounded in time). Beyond (2 Delta'/eps)(ln m + 40)
  // a weight is below e^-40 of the best; a larger cap is allowed while the weights together stay
  // below ~2^22 bits (it only helps heavily tied data).
  const scale = (2 * Number(sensitivity)) / epsilon.toNumber();
  const byAccuracy = Math.ceil(scale * (Math.log(m) + 40));
  const bySize = Math.floor(2 ** 22 / (y * m));
  const cap = args.costCap ?? BigInt(Math.max(byAccuracy, bySize));
  if (typeof cap !== "bigint" || cap < 1n) throw new BadInputError("cost cap must be a positive integer");
  const capped = costs.map((c) => (c > cap ? cap : c));
  const x = dyadicBase(epsilon, sensitivity, y);
  // Dividing every weight by the same beta^cMin is a normalisation and leaves the law unchanged.
  let cMin = capped[0];
  for (const c of capped) if (c < cMin) cMin = c;
  // Rejection sampling with the law of the weights W_j (dyadicWeights), without forming them:
  // propose j uniformly, accept with probability beta^(c_j - cMin), drawn as c_j - cMin independent
  // Bernoulli(x / 2^y) trials that must all succeed. The output is j with probability proportional
  // to beta^(c_j - cMin), exactly as the single UniformInt over the summed weights. Forming the
  // weights costs about y (C - cMin) bits per candidate, which at small epsilon (large cap) took
  // minutes of bigint arithmetic; here each proposal needs at most about 1/(1 - beta) trials on
  // average, and at most m / sum_j beta^(c_j - cMin) <= m proposals are expected. Where those
  // trials would be many (beta near 1: a small epsilon per quantile, or a large Delta'), each
  // acceptance is instead one comparison with bounds on beta^(c_j - cMin) (drawByPowers).
  const one = 1n << BigInt(y);
  const index = drawByRejection(
    capped.map((c) => c - cMin),
    x,
    one,
    bits,
    bitLength(cap),
  );
  const beta = Number(x) / 2 ** y;
  return { index, epsilonUsed: epsilon, baseNum: x, baseBits: y, epsilonEffective: 2 * Number(sensitivity) * Math.log(1 / beta) };
}

/**
 * Most random trials a draw is padded to (2^23). Since draws past TRIAL_PATH_LIMIT (2^21) take the
 * power path, the trial path never reaches this cap; paddedTrials keeps it as a bound.
 */
export const MAX_PADDED_TRIALS = 2 ** 23;

/**
 * The public number of trials a draw is padded to: twice the bound m / (1 - beta) on the expected
 * number of proposals and trials of drawByRejection (each proposal ends at its first failed trial,
 * after 1/(1 - beta) trials on average, and at most m proposals are expected; see there), capped at
 * MAX_PADDED_TRIALS. Depends on the number of candidates and beta only, never on the data.
 */
export function paddedTrials(m: number, x: bigint, one: bigint): number {
  if (x >= one) return 0;
  // ceil(one / (one - x)) in exact integers; beta = x/one < 1.
  const perProposal = (one + (one - x) - 1n) / (one - x);
  const bound = 2n * BigInt(m) * (perProposal + 1n);
  return bound > BigInt(MAX_PADDED_TRIALS) ? MAX_PADDED_TRIALS : Number(bound);
}

/**
 * j with probability proportional to (x/one)^d_j, by uniform proposals and Bernoulli(x/one) trials
 * (the trial path), or, when its padding would pass TRIAL_PATH_LIMIT, by drawByPowers.
 *
 * How long the draw runs depends on the data (through d): with no rows every d_j is 0 and the first
 * proposal is accepted; with many rows near the target most proposals are rejected. So after the
 * draw, further trials are made and discarded until paddedTrials(m, x, one) trials have been made
 * in all: the time then follows public quantities (issue 9, data-independent timing). Discarded
 * trials are independent of the draw, so the law is unchanged. A draw that needs more than the
 * padding is not padded further: its time then shows through, to the reply ladder's slot
 * (workers/pacing.ts). That is not rare on the worst data: when one candidate alone takes the
 * weight, a proposal is accepted with probability about 1/m, and more than 2m proposals are needed
 * with probability about e^-2 (one draw in seven). The padding is at most TRIAL_PATH_LIMIT trials
 * (about 15 ms), so what shows is of that order. DEVELOPERS.md states this as what still leaks.
 */
function drawByRejection(d: bigint[], x: bigint, one: bigint, bits: Bits, exponentBits: number): number {
  const m = d.length;
  if (x >= one) return bits.uniformSmall(m); // beta = 1: every trial succeeds, the law is uniform
  if (!trialPath(m, x, one)) return drawByPowers(d, x, one, bits, exponentBits);
  const small = one <= 281474976710656n; // 2^48: the number path of Bits
  const xn = Number(x);
  const on = Number(one);
  // one = 2^y (y <= 32): UniformInt(2^y) is y fresh bits with no rejection, so bits(y) draws
  // exactly what uniformSmall(2^y) would, from the same bits, without its range checks.
  const y = bitLength(one - 1n);
  const trial =
    one === 1n << BigInt(y) && y >= 1 && y <= 32 ? () => bits.bits(y) < xn : small ? () => bits.uniformSmall(on) < xn : () => bits.bernoulli(x, one);
  // The exponents as numbers when they are safe integers (always, below the default cost cap):
  // a bigint counter would allocate on every trial. Same trials either way.
  const safe = d.every((c) => c <= 9007199254740991n);
  const dn = safe ? Float64Array.from(d, (c) => Number(c)) : null;
  let made = 0;
  for (;;) {
    const j = bits.uniformSmall(m);
    made++;
    let accepted = true;
    if (dn !== null) {
      for (let left = dn[j]; left > 0; left--) {
        made++;
        if (!trial()) {
          accepted = false;
          break;
        }
      }
    } else {
      for (let left = d[j]; left > 0n; left--) {
        made++;
        if (!trial()) {
          accepted = false;
          break;
        }
      }
    }
    if (accepted) {
      for (let pad = paddedTrials(m, x, one) - made; pad > 0; pad--) trial();
      return j;
    }
  }
}

/**
 * The trial path's most padded trials (2^21, about 15 ms here): past it, drawByPowers is faster.
 * Before it was added, a draw at a small epsilon per quantile made millions of trials per proposal
 * (a draw ran for minutes at epsilon 2e-6, and twenty quantiles at epsilon 0.5 hit the 30 s time
 * limit, refused and so free: a worker held for nothing).
 */
export const TRIAL_PATH_LIMIT = 2 ** 21;

/** Whether a draw takes the trial path: its public padding bound, uncapped, is at most TRIAL_PATH_LIMIT. */
export function trialPath(m: number, x: bigint, one: bigint): boolean {
  if (x >= one) return true;
  const perProposal = (one + (one - x) - 1n) / (one - x);
  return 2n * BigInt(m) * (perProposal + 1n) <= BigInt(TRIAL_PATH_LIMIT);
}

/** Bits of the fixed-point bounds on beta^e in drawByPowers (doubled if a comparison is undecided). */
const POWER_BITS = 128;

/** Exponent bits per window of powerBounds (a table of 2^WINDOW_BITS powers per window). */
const WINDOW_BITS = 4;

interface PowerTable {
  /** lo[w][j] <= 2^p beta^(j 16^w) <= hi[w][j], j < 16, for the windows w of the exponent */
  lo: bigint[][];
  hi: bigint[][];
}

/** Down and up rounded fixed-point products (p fraction bits) of bounds, by evenProduct. */
function mulDown(u: bigint, v: bigint, p: number): bigint {
  return evenProduct(u, v, p) >> BigInt(p);
}
function mulUp(u: bigint, v: bigint, p: number): bigint {
  const h = evenProduct(u, v, p);
  const pb = BigInt(p);
  return (h >> pb) + ((h & ((1n << pb) - 1n)) === 0n ? 0n : 1n);
}

/**
 * Bounds on beta^(j 16^w) = (x/one)^(j 16^w) for every window w of a k-bit exponent and digit
 * j < 16, in fixed point with `p` fraction bits, rounded down (lo) and up (hi) at every product.
 * Depends on beta, k and p only.
 */
function powerTable(x: bigint, one: bigint, k: number, p: number): PowerTable {
  const pb = BigInt(p);
  const unit = 1n << pb;
  // beta = x/one exactly in p bits (one = 2^y, y <= 64 < p).
  let baseLo = (x << pb) / one;
  let baseHi = baseLo;
  const table: PowerTable = { lo: [], hi: [] };
  const size = 1 << WINDOW_BITS;
  for (let w = 0; w * WINDOW_BITS < k; w++) {
    const lo = [unit, baseLo];
    const hi = [unit, baseHi];
    for (let j = 2; j < size; j++) {
      lo.push(mulDown(lo[j - 1], baseLo, p));
      hi.push(mulUp(hi[j - 1], baseHi, p));
    }
    table.lo.push(lo);
    table.hi.push(hi);
    baseLo = mulDown(lo[size - 1], baseLo, p);
    baseHi = mulUp(hi[size - 1], baseHi, p);
  }
  return table;
}

/**
 * u v exactly, with the one multiplication always on operands of p + 2 bits (u, v <= 2^p):
 * (u + B)(v + B) - B (u + v) - B^2 with B = 2^(p+1). BigInt multiplication is quicker on small
 * operands, and here u and v shrink with beta^e, so a plain product would take less time where
 * more rows sit near the target; this one takes the same time whatever the values.
 */
function evenProduct(u: bigint, v: bigint, p: number): bigint {
  const s = BigInt(p + 1);
  const b = 1n << s;
  return (u + b) * (v + b) - ((u + v) << s) - (b << s);
}

/**
 * Bounds lo <= 2^p beta^e <= hi for 0 <= e < 2^k: the product of the table's entries for the
 * base-16 digits of e, rounded down and up. Every window costs the same two multiplications of
 * the same size (evenProduct; a zero digit multiplies by 2^p, which changes nothing), so the work
 * does not follow e.
 */
function powerBounds(e: bigint, table: PowerTable, p: number): [bigint, bigint] {
  const unit = 1n << BigInt(p);
  let lo = unit;
  let hi = unit;
  for (let w = 0; w < table.lo.length; w++) {
    const digit = Number((e >> BigInt(w * WINDOW_BITS)) & BigInt((1 << WINDOW_BITS) - 1));
    lo = mulDown(lo, table.lo[w][digit], p);
    hi = mulUp(hi, table.hi[w][digit], p);
  }
  return [lo, hi];
}

/**
 * The same law as drawByRejection's trial path, for beta near 1: propose j uniformly and accept
 * with probability beta^(d_j), decided by comparing a uniform V in [0, 1), drawn POWER_BITS bits
 * at a time, with bounds lo <= 2^p beta^d_j <= hi: V < beta^d_j for sure when v + 1 <= lo (v the
 * integer of V's first p bits) and V >= beta^d_j for sure when v >= hi; otherwise (probability
 * about (hi - lo + 1)/2^p, under 2^-60 here) p doubles, V gets p more bits and the bounds are
 * recomputed. Accepting exactly when V < beta^d_j accepts with probability beta^d_j, so the
 * output is j with probability proportional to beta^(d_j), as the trials give; a proposal costs
 * one comparison instead of about 1/(1 - beta) trials.
 *
 * Time: the bounds of every candidate are computed first (m times `exponentBits`/4 window steps; the cap's
 * bit length is public), and the proposals are padded to 2m (the expected number is at most m),
 * so the work follows m and the cap, not the data (the multiplications are of one size whatever
 * the values, evenProduct: about 7.5 ms at m = 2001 with no rows, rows spread evenly, or one
 * candidate holding all the weight alike). A draw that needs more than 2m proposals shows, at
 * about a microsecond a proposal, as on the trial path.
 */
function drawByPowers(d: bigint[], x: bigint, one: bigint, bits: Bits, exponentBits: number): number {
  const m = d.length;
  const k = Math.max(1, exponentBits);
  for (const e of d) if (e < 0n || bitLength(e) > k) throw new Error("internal: a cost beyond the cap");
  const table = powerTable(x, one, k, POWER_BITS);
  const lo: bigint[] = [];
  const hi: bigint[] = [];
  for (const e of d) {
    const [l, h] = powerBounds(e, table, POWER_BITS);
    lo.push(l);
    hi.push(h);
  }
  const uniform = (nbits: number): bigint => {
    let v = 0n;
    for (let left = nbits; left > 0; left -= 32) v = (v << 32n) | BigInt(bits.bits(Math.min(32, left)));
    return v;
  };
  let chosen = -1;
  for (let made = 0; chosen < 0 || made < 2 * m; made++) {
    const j = bits.uniformSmall(m);
    const v = uniform(POWER_BITS);
    if (chosen >= 0) continue; // padding: the same draws, discarded
    if (v + 1n <= lo[j]) chosen = j;
    else if (v >= hi[j]) continue;
    else {
      // Undecided at POWER_BITS bits: refine this one comparison until it is decided.
      let vv = v;
      let pp = POWER_BITS;
      for (;;) {
        vv = (vv << BigInt(pp)) | uniform(pp);
        pp *= 2;
        const [l, h] = powerBounds(d[j], powerTable(x, one, k, pp), pp);
        if (vv + 1n <= l) {
          chosen = j;
          break;
        }
        if (vv >= h) break;
      }
    }
  }
  return chosen;
}

// ---------------------------------------------------------------------------------------------
// Quantile value intervals from a noisy dyadic tree of bucket counts (docs/methods.md §20).
// ---------------------------------------------------------------------------------------------

/**
 * Levels below the root of the dyadic tree over m buckets: the least L with 2^L >= m. The tree has
 * L + 1 levels in all (root included) and 2^(L+1) - 1 nodes, a number fixed by m alone.
 */
export function treeDepth(m: number): number {
  if (!Number.isInteger(m) || m < 1) throw new BadInputError(`a tree needs at least one bucket, got ${m}`);
  let L = 0;
  while (2 ** L < m) L++;
  return L;
}

/**
 * Sensitivity of the whole tree for a unit of up to k rows: every level partitions the rows, so one
 * unit moves each level by at most k in L1 (all its rows in one node, or spread), and the L + 1
 * levels together by k (L + 1) in L1. In L2 a level moves by at most k, so the tree by
 * k sqrt(L + 1); the discrete Gaussian is calibrated to an integer, k ceil(sqrt(L + 1)), which is
 * never smaller (docs/methods.md §20).
 */
export function treeSensitivity(m: number, k: number, family: NoiseLaw["family"]): bigint {
  if (!Number.isInteger(k) || k < 1) throw new BadInputError(`rows per unit must be a positive integer, got ${k}`);
  const levels = BigInt(treeDepth(m) + 1);
  if (family === "discrete-laplace") return BigInt(k) * levels;
  let r = isqrt(levels);
  if (r * r < levels) r += 1n;
  return BigInt(k) * r;
}

/**
 * The noisy tree: nodes[l][i] is the count of buckets [i 2^(L-l), (i+1) 2^(L-l)) (0-based) plus
 * one independent draw of `law`. `counts` has one entry per bucket (length m); buckets past m are
 * empty. Every node is drawn whatever the counts, so the number of draws depends on m only.
 */
export function noisyTree(counts: bigint[], law: NoiseLaw, bits: Bits): bigint[][] {
  const L = treeDepth(counts.length);
  const leaves: bigint[] = [];
  for (let i = 0; i < 2 ** L; i++) {
    const c = i < counts.length ? counts[i] : 0n;
    if (typeof c !== "bigint" || c < 0n) throw new BadInputError("bucket counts must be non-negative integers");
    leaves.push(c);
  }
  const exact: bigint[][] = [leaves];
  for (let l = L - 1; l >= 0; l--) {
    const below = exact[0];
    const level: bigint[] = [];
    for (let i = 0; i < below.length / 2; i++) level.push(below[2 * i] + below[2 * i + 1]);
    exact.unshift(level);
  }
  return exact.map((level) => level.map((c) => c + drawNoise(law, bits)));
}

export interface QuantileIntervalArgs {
  /** noisyTree's output over the m buckets */
  tree: bigint[][];
  /** number of buckets m (the candidates) */
  m: number;
  /** target quantile a/b in (0, 1) */
  p: Rational;
  /** the law every node was drawn from */
  law: NoiseLaw;
  /** miss probability in (0, 1), exact */
  miss: Rational;
  /**
   * Random bits for the calibration draws (rankCuts). Without them, or when the miss is too small
   * for CALIBRATION_DRAWS, the cuts come from the union bound of proven half-widths (unionCuts).
   */
  bits?: Bits;
}

export interface QuantileInterval {
  /** 1-based buckets: the true quantile's bucket i* lies in [lowBucket, highBucket] on the event of §20 */
  lowBucket: number;
  highBucket: number;
  /** how the cuts were set: "calibrated" (rankCuts) or "union bound" (unionCuts) */
  method: "calibrated" | "union bound";
}

/**
 * Cuts for the two scans, one pair per kind of prefix (docs/methods.md §20): kind 0 is the empty
 * prefix G_0 = 0, kind l = 1..L a prefix made of l nodes below the root, kind L + 1 the root itself
 * (the prefix of all 2^L leaves). With D = b' G~ - a' n~ for p = a'/b':
 *   the low scan passes bucket i when D_i >= low[kind(i)],
 *   the high scan passes bucket i when D_(i-1) < high[kind(i-1)].
 */
export interface RankCuts {
  low: bigint[];
  high: bigint[];
  method: "calibrated" | "union bound";
}

/** Draws per kind of prefix in the calibration (rankCuts); public and fixed. */
export const CALIBRATION_DRAWS = 10_000;

const cutCache = new Map<string, RankCuts>();

/**
 * Calibrated cuts (docs/methods.md §20). The noise of D at a prefix of kind l is U = b' S - a' E,
 * S the sum of the prefix's nodes' noises (l independent draws; kind L + 1: S = E) and E the root's,
 * independent of S below the root. Its law is fixed by (law, l, p) alone, never by the data. N =
 * CALIBRATION_DRAWS independent samples of U are drawn for every kind (the kinds share the draws
 * as partial sums of one sequence, which leaves each kind's N samples independent of each other);
 * with k = floor((N + 1) miss / 2), high = the k-th largest sample and low = the k-th smallest.
 * For a fresh U independent of the samples, P(U > k-th largest) <= k / (N + 1) <= miss / 2
 * (order statistics: the k-th largest of N continuous samples leaves a tail of law Beta(k, N+1-k),
 * mean k/(N+1); ties of a discrete law only shrink it), and likewise below. The coverage argument
 * then needs U at two prefixes: a union bound over two one-sided events, each <= miss/2 on
 * average over the calibration. Returns null when k would be 0 (miss below 2/(N+1)).
 * Time: N (L + 1) draws (calibrationDraws, shared by every p and miss of the same law and L) and
 * two selections per kind (selectInPlace: the same k-th values a sort gives), fixed by m, the law,
 * p and miss, give or take the draws' own randomness (never the data).
 */
export function rankCuts(law: NoiseLaw, L: number, p: Rational, miss: Rational, bits: Bits): RankCuts | null {
  if (!Number.isInteger(L) || L < 0 || L > 30) throw new BadInputError(`tree depth must be an integer 0..30, got ${L}`);
  if (!(p instanceof Rational) || p.sign() <= 0 || p.ge(Rational.ONE)) throw new BadInputError(`quantile must lie strictly between 0 and 1, got ${String(p)}`);
  if (!(miss instanceof Rational) || miss.sign() <= 0 || miss.ge(Rational.ONE)) throw new BadInputError("miss probability must lie strictly between 0 and 1");
  checkLaw(law);
  const N = CALIBRATION_DRAWS;
  const k = (BigInt(N + 1) * miss.num) / (2n * miss.den);
  if (k < 1n) return null;
  const key = `${law.family}:${law.family === "discrete-laplace" ? law.scale : law.sigma2}:${L}:${p}:${miss}`;
  const hit = cutCache.get(key);
  if (hit !== undefined) return hit;
  const a = p.num;
  const b = p.den;
  const draws = calibrationDraws(law, L, bits);
  const kn = Number(k);
  const low: bigint[] = [];
  const high: bigint[] = [];
  const safe = BigInt(Number.MAX_SAFE_INTEGER);
  if (draws.rootF !== null && draws.sumsF !== null && b * (draws.maxSum + draws.maxRoot) <= safe) {
    // a' < b', so every U, and every product and sum forming it, is an integer of magnitude at most
    // b' (max|S| + max|E|) <= 2^53 - 1: binary64 holds them exactly, and the selection compares
    // exact integers. Selection gives the same k-th smallest and k-th largest values as a sort.
    const an = Number(a);
    const bn = Number(b);
    const rootF = draws.rootF;
    const u = new Float64Array(N);
    for (let l = 0; l <= L + 1; l++) {
      if (l === 0) for (let s = 0; s < N; s++) u[s] = -an * rootF[s];
      else if (l === L + 1) for (let s = 0; s < N; s++) u[s] = (bn - an) * rootF[s];
      else {
        const sl = draws.sumsF[l - 1];
        for (let s = 0; s < N; s++) u[s] = bn * sl[s] - an * rootF[s];
      }
      // k <= (N + 1)/2, so N - k > k - 1: after the first selection every entry before N - k is at
      // most u[N - k], and the k-th smallest is found among them.
      high.push(BigInt(selectInPlace(u, N - kn, 0, N - 1)));
      low.push(BigInt(selectInPlace(u, kn - 1, 0, N - kn - 1)));
    }
  } else {
    const { root, sums } = bigDraws(draws);
    // U for each kind: -a'E (empty prefix), b'S_l - a'E (l = 1..L), (b' - a')E (the root).
    const kindOf = (l: number, s: number): bigint => (l === 0 ? -a * root[s] : l === L + 1 ? (b - a) * root[s] : b * sums[l - 1][s] - a * root[s]);
    for (let l = 0; l <= L + 1; l++) {
      const xs: bigint[] = new Array<bigint>(N);
      for (let s = 0; s < N; s++) xs[s] = kindOf(l, s);
      xs.sort((x, y) => (x < y ? -1 : x > y ? 1 : 0));
      low.push(xs[kn - 1]);
      high.push(xs[N - kn]);
    }
  }
  const out: RankCuts = { low, high, method: "calibrated" };
  if (cutCache.size >= 32) cutCache.delete(cutCache.keys().next().value as string);
  cutCache.set(key, out);
  return out;
}

/**
 * The k-th smallest entry (0-based) of a[lo..hi], by quickselect in place (Hoare partitions around
 * a median of three); afterwards every entry of a[lo..k) is at most a[k] and every entry of
 * (k..hi] at least a[k]. Falls back to a sort of the remaining range after 2 log2(n) + 8 rounds,
 * so the time is at most that of a sort. Exact on integers held in binary64.
 */
export function selectInPlace(a: Float64Array, k: number, lo: number, hi: number): number {
  if (!(lo <= k && k <= hi && 0 <= lo && hi < a.length)) throw new BadInputError("selection index out of range");
  let rounds = 2 * (32 - Math.clz32(hi - lo + 1)) + 8;
  while (hi > lo) {
    if (rounds-- === 0) {
      a.subarray(lo, hi + 1).sort();
      return a[k];
    }
    const mid = (lo + hi) >>> 1;
    const x = a[lo];
    const y = a[mid];
    const z = a[hi];
    const pivot = x < y ? (y < z ? y : x < z ? z : x) : x < z ? x : y < z ? z : y;
    let i = lo;
    let j = hi;
    while (i <= j) {
      while (a[i] < pivot) i++;
      while (a[j] > pivot) j--;
      if (i <= j) {
        const t = a[i];
        a[i] = a[j];
        a[j] = t;
        i++;
        j--;
      }
    }
    // Now a[lo..j] <= pivot, a[i..hi] >= pivot and a(j..i) == pivot.
    if (k <= j) hi = j;
    else if (k >= i) lo = i;
    else return a[k];
  }
  return a[k];
}

export interface CalibrationDraws {
  /** the draws as binary64 (every one, and every partial sum, of magnitude at most 2^53 - 1), or null */
  rootF: Float64Array | null;
  sumsF: Float64Array[] | null;
  /** the draws as bigints when some did not fit binary64 exactly, else null (bigDraws forms them) */
  root: bigint[] | null;
  sums: bigint[][] | null;
  /** largest |E| and |S_l| drawn */
  maxRoot: bigint;
  maxSum: bigint;
}

/** The draws as bigints, formed from the binary64 copy (exact) when they were kept that way. Exported for tests. */
export function bigDraws(d: CalibrationDraws): { root: bigint[]; sums: bigint[][] } {
  if (d.root !== null && d.sums !== null) return { root: d.root, sums: d.sums };
  return { root: Array.from(d.rootF!, (x) => BigInt(x)), sums: d.sumsF!.map((xs) => Array.from(xs, (x) => BigInt(x))) };
}

const drawCache = new Map<string, CalibrationDraws>();

/**
 * The calibration's draws for (law, L): N root draws E and, for l = 1..L, the partial sums S_l of
 * one further sequence of L draws per sample. They depend on the law and L only (never on p, the
 * miss or the data), so the quantiles of a release, which share one tree, share them too.
 * The draws are kept as binary64 integers (fillNoise: the same draws, without a bigint per
 * draw) while every draw and partial sum is of magnitude at most 2^53 - 1; the first one that is
 * not moves every value drawn so far, exactly, and the rest to bigints.
 */
function calibrationDraws(law: NoiseLaw, L: number, bits: Bits): CalibrationDraws {
  const key = `${law.family}:${law.family === "discrete-laplace" ? law.scale : law.sigma2}:${L}`;
  const hit = drawCache.get(key);
  if (hit !== undefined) return hit;
  const N = CALIBRATION_DRAWS;
  const values = new Float64Array(N * (L + 1));
  const big = fillNoise(law, bits, values);
  const out = drawCalibration(values, big, N, L);
  if (drawCache.size >= 2) drawCache.delete(drawCache.keys().next().value as string);
  drawCache.set(key, out);
  return out;
}

/**
 * N samples of (E, S_1..S_L) from N (L + 1) draws in order (E first, then the L draws of S, per
 * sample; fillNoise: a draw past the number path is NaN in `values` and a bigint in `big`), kept
 * as binary64 while every draw and partial sum is an integer of magnitude at most 2^53 - 1; from
 * the first one that is not, every value so far is moved (exactly) to bigints and the rest is kept
 * in bigints. Exported for tests.
 */
export function drawCalibration(values: Float64Array, big: ReadonlyMap<number, bigint>, N: number, L: number): CalibrationDraws {
  if (values.length !== N * (L + 1)) throw new BadInputError("calibration needs N (L + 1) draws");
  let at = 0;
  const next = (): number | bigint => {
    const v = values[at];
    const i = at++;
    return v === v ? v : big.get(i)!;
  };
  const SAFE = Number.MAX_SAFE_INTEGER;
  const rootF = new Float64Array(N);
  const sumsF: Float64Array[] = Array.from({ length: L }, () => new Float64Array(N));
  let root: bigint[] | null = null;
  let sums: bigint[][] | null = null;
  // From here on every value is a bigint; entries not drawn yet are 0 and overwritten later.
  const toBig = (): void => {
    root = Array.from(rootF, (x) => BigInt(x));
    sums = sumsF.map((xs) => Array.from(xs, (x) => BigInt(x)));
  };
  for (let s = 0; s < N; s++) {
    const e = next();
    if (root === null && typeof e === "number" && e <= SAFE && e >= -SAFE) rootF[s] = e;
    else {
      if (root === null) toBig();
      root![s] = typeof e === "bigint" ? e : BigInt(e);
    }
    let sum = 0;
    let sumB = 0n;
    for (let l = 0; l < L; l++) {
      const d = next();
      if (sums === null) {
        if (typeof d === "number" && d <= SAFE && d >= -SAFE) {
          const t = sum + d; // exact when |t| <= 2^53 - 1; a true sum past that rounds past it too
          if (t <= SAFE && t >= -SAFE) {
            sum = t;
            sumsF[l][s] = t;
            continue;
          }
        }
        toBig();
        sumB = BigInt(sum);
      }
      sumB += typeof d === "bigint" ? d : BigInt(d);
      sums![l][s] = sumB;
    }
  }
  if (root === null || sums === null) {
    let mr = 0;
    let ms = 0;
    for (let s = 0; s < N; s++) mr = Math.max(mr, Math.abs(rootF[s]));
    for (const xs of sumsF) for (let s = 0; s < N; s++) ms = Math.max(ms, Math.abs(xs[s]));
    return { rootF, sumsF, root: null, sums: null, maxRoot: BigInt(mr), maxSum: BigInt(ms) };
  }
  const rb: bigint[] = root;
  const sb: bigint[][] = sums;
  const abs = (x: bigint): bigint => (x < 0n ? -x : x);
  let maxRoot = 0n;
  let maxSum = 0n;
  for (const e of rb) if (abs(e) > maxRoot) maxRoot = abs(e);
  for (const xs of sb) for (const x of xs) if (abs(x) > maxSum) maxSum = abs(x);
  return { rootF: null, sumsF: null, root: rb, sums: sb, maxRoot, maxSum };
}

/**
 * Cuts from proven half-widths (the method before calibration; kept for misses too small to
 * calibrate and for callers without random bits): h_l = sumHalfWidth(law, l, miss/3) for a prefix
 * of l nodes (the root counts as one), h_n the root's, and the cuts -(b' h_l + a' h_n) and
 * b' h_l + a' h_n: the union bound over the noises of the two prefixes and the total, miss/3 each.
 */
export function unionCuts(law: NoiseLaw, L: number, p: Rational, miss: Rational): RankCuts {
  const third = miss.div(Rational.of(3n));
  const a = p.num;
  const b = p.den;
  const hn = sumHalfWidth(law, 1, third);
  const low: bigint[] = [];
  const high: bigint[] = [];
  for (let l = 0; l <= L + 1; l++) {
    const hl = l === 0 ? 0n : sumHalfWidth(law, l === L + 1 ? 1 : l, third);
    low.push(-(b * hl + a * hn));
    high.push(b * hl + a * hn);
  }
  return { low, high, method: "union bound" };
}

/**
 * Bucket range that holds the true p-quantile's bucket with probability >= 1 - miss
 * (docs/methods.md §20). G_i = rows in buckets 1..i, n = G_m; the quantile's bucket is the least
 * i* with G_i* >= p n, so G_(i*-1) < p n <= G_i*, i.e. T_1 = b' G_i* - a' n >= 0 and
 * T_0 = b' G_(i*-1) - a' n <= -1 for p = a'/b'. With noisy prefixes G~_i (sums of tree nodes), the
 * noisy root n~ and D_i = b' G~_i - a' n~ = T + U_i:
 *   low  = least i with D_i >= low[kind(i)],
 *   high = greatest i with D_(i-1) < high[kind(i-1)] (at least 1).
 * If U_i* >= low[kind(i*)] then D_i* >= T_1 + low >= low, so low <= i*; if U_(i*-1) <= high then
 * D_(i*-1) <= high - 1, so high >= i*. i* is fixed by the data, not by the noise, so coverage is at
 * least 1 - P(U_i* < low) - P(U_(i*-1) > high) >= 1 - miss (rankCuts or unionCuts). Both scans
 * visit every bucket, whatever the counts. Only integers and rationals.
 */
export function quantileInterval(args: QuantileIntervalArgs): QuantileInterval {
  const { tree, m, p, law, miss, bits } = args;
  if (!(p instanceof Rational) || p.sign() <= 0 || p.ge(Rational.ONE)) throw new BadInputError(`quantile must lie strictly between 0 and 1, got ${String(p)}`);
  if (!(miss instanceof Rational) || miss.sign() <= 0 || miss.ge(Rational.ONE)) throw new BadInputError("miss probability must lie strictly between 0 and 1");
  const L = treeDepth(m);
  if (!Array.isArray(tree) || tree.length !== L + 1 || tree.some((lv, l) => !Array.isArray(lv) || lv.length !== 2 ** l)) {
    throw new BadInputError("tree does not match the number of buckets");
  }
  const cuts = (bits === undefined ? null : rankCuts(law, L, p, miss, bits)) ?? unionCuts(law, L, p, miss);
  // The prefix [0, i) is the prefix [0, i - low) plus the one node [i - low, i), low = 2^z the
  // lowest set bit of i: that node is at level L - z, index i/low - 1 (the root for i = 2^L). So a
  // prefix is a sum of popcount(i) nodes, built here in one pass; its kind is that count, or
  // L + 1 for the root.
  const prefix: bigint[] = [0n];
  const kind: number[] = [0];
  for (let i = 1; i <= m; i++) {
    let z = 0;
    while (((i >>> z) & 1) === 0) z++;
    const rest = i & (i - 1);
    prefix.push(prefix[rest] + tree[L - z][(i >>> z) - 1]);
    kind.push(z === L ? L + 1 : kind[rest] + 1);
  }
  const a = p.num;
  const b = p.den;
  const an = a * tree[0][0];
  let low = 0;
  let high = 1;
  for (let i = 1; i <= m; i++) {
    const lowOk = b * prefix[i] - an >= cuts.low[kind[i]];
    if (lowOk && low === 0) low = i;
    if (b * prefix[i - 1] - an < cuts.high[kind[i - 1]]) high = i;
  }
  // Off the event of §20 the scans can disagree; the whole range is then returned (never narrower).
  if (low === 0 || low > high) {
    low = 1;
    high = m;
  }
  return { lowBucket: low, highBucket: high, method: cuts.method };
}

/** Fractions theta of 1/t at which the Laplace Chernoff bound is tried (public; any theta is valid). */
const CHERNOFF_THETAS = [Rational.of(1n, 3n), Rational.of(1n, 2n), Rational.of(2n, 3n), Rational.of(4n, 5n)];
const sumCache = new Map<string, bigint>();
const logCache = new Map<string, (bigint | null)[]>();

/**
 * For each theta of CHERNOFF_THETAS, an upper bound on 2^128 ln M(theta/t) (M the moment
 * generating function of the discrete Laplace at scale t, sumHalfWidth), or null when the bound
 * cannot be formed at this precision. Depends on t only, so it is kept for the recent scales.
 */
function chernoffLogs(t: Rational): (bigint | null)[] {
  const key = t.toString();
  const hit = logCache.get(key);
  if (hit !== undefined) return hit;
  const P = 128;
  const Pt = P + bitLength(t.ceil());
  const oneP = 1n << BigInt(Pt);
  const q = expNeg(Rational.ONE.div(t), Pt);
  const out = CHERNOFF_THETAS.map((theta) => {
    const eA = expNeg(Rational.ONE.sub(theta).div(t), Pt).hi; // >= q e^lambda
    const eB = expNeg(Rational.ONE.add(theta).div(t), Pt).hi; // >= q e^-lambda
    const den = (oneP - eA) * (oneP - eB);
    if (den <= 0n || oneP - q.lo <= 0n) return null;
    return ln(Rational.of((oneP - q.lo) * (oneP - q.lo), den), P).hi; // >= 2^P ln M
  });
  if (logCache.size >= 64) logCache.delete(logCache.keys().next().value as string);
  logCache.set(key, out);
  return out;
}

/**
 * An integer h with P(|Y_1 + ... + Y_l| > h) <= a for l independent draws of `law`, proven in
 * integers (bounds.ts rounds every step outward), docs/methods.md §20. l = 1: the exact least h
 * (tailbounds.ts). l >= 2: the least of these valid bounds (the union bound only for tiny noise,
 * scale or sigma^2 below 1, the only case where it can win),
 *   - union: l h_1(a / l), since |S| > l h_1 needs some |Y_i| > h_1;
 *   - discrete Laplace, Chernoff: E e^(lambda Y) = (1 - q)^2 / ((1 - q e^lambda)(1 - q e^-lambda))
 *     for q = e^(-1/t), |lambda| < 1/t; with lambda = theta/t, P(S >= s) <= M^l e^(-theta s/t), so
 *     h + 1 >= t (l ln M + ln(2/a)) / theta suffices (theta from a fixed public list);
 *   - discrete Gaussian, sub-Gaussian: E e^(lambda X) <= e^(lambda^2 sigma^2/2) (Canonne, Kamath,
 *     Steinke 2020), so P(|S| >= s) <= 2 e^(-s^2/(2 l sigma^2)) and (h + 1)^2 >= 2 l sigma^2 ln(2/a)
 *     suffices.
 */
export function sumHalfWidth(law: NoiseLaw, l: number, a: Rational): bigint {
  if (!Number.isInteger(l) || l < 1) throw new BadInputError(`number of draws must be a positive integer, got ${l}`);
  if (!(a instanceof Rational) || a.sign() <= 0) throw new BadInputError("miss probability must be positive");
  if (a.ge(Rational.ONE)) return 0n;
  const one = (x: Rational): bigint => (law.family === "discrete-laplace" ? laplaceHalfWidth(law.scale, x) : gaussianHalfWidth(law.sigma2, x));
  const key = `${law.family}:${law.family === "discrete-laplace" ? law.scale : law.sigma2}:${l}:${a}`;
  const hit = sumCache.get(key);
  if (hit !== undefined) return hit;
  const L = BigInt(l);
  // The union bound needs one exact half-width per l; it only wins over the moment bounds when
  // the noise is tiny (scale or sigma^2 below 1, where h is 0 or 1), so it is formed only there.
  const tiny = law.family === "discrete-laplace" ? law.scale.lt(Rational.ONE) : law.sigma2.lt(Rational.ONE);
  let best = -1n;
  if (tiny || l === 1) best = L * one(a.div(Rational.of(L)));
  if (l === 1) {
    sumCache.set(key, best);
    return best;
  }
  const P = 128;
  const scaleP = 1n << BigInt(P);
  const ln2a = ln(Rational.of(2n).div(a), P).hi; // >= 2^P ln(2/a)
  const keep = (h: bigint): void => {
    const x = h < 0n ? 0n : h;
    if (best < 0n || x < best) best = x;
  };
  if (law.family === "discrete-laplace") {
    const t = law.scale;
    for (const [i, lnM] of chernoffLogs(t).entries()) {
      if (lnM === null) continue;
      const theta = CHERNOFF_THETAS[i];
      // h + 1 = ceil(t (l lnM + ln2a) / (theta 2^P))
      const num = t.num * (L * lnM + ln2a) * theta.den;
      const dd = t.den * scaleP * theta.num;
      keep(-floorDiv(-num, dd) - 1n);
    }
    if (best < 0n) best = L * one(a.div(Rational.of(L)));
  } else {
    const s2 = law.sigma2;
    // (h + 1)^2 >= v = ceil(2 l sigma^2 ln(2/a))
    const v = -floorDiv(-(2n * L * s2.num * ln2a), s2.den * scaleP);
    let r = isqrt(v);
    if (r * r < v) r += 1n;
    keep(r - 1n);
  }
  if (sumCache.size >= 256) sumCache.delete(sumCache.keys().next().value as string);
  sumCache.set(key, best);
  return best;
}
