/**
 * Quantiles by the exponential mechanism (McSherry & Talwar 2007) on a public candidate grid,
 * sampled exactly with a dyadic base in the spirit of Ilvento (2020), docs/methods.md §9. Weights are
 * integers x^c * 2^(y (C - c)) proportional to beta^c with beta = x/2^y >= exp(-epsilon/(2 Delta')),
 * and the draw has the law of one UniformInt over their sum (docs/methods.md §9 step 3), realised by
 * rejection with exact Bernoulli(x/2^y) trials: no floating point touches the selection.
 */
import { BadInputError } from "../errors.js";
import { expNeg } from "./bounds.js";
import { Rational } from "./rational.js";
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
  // average, and at most m / sum_j beta^(c_j - cMin) <= m proposals are expected.
  const one = 1n << BigInt(y);
  const index = drawByRejection(
    capped.map((c) => c - cMin),
    x,
    one,
    bits,
  );
  const beta = Number(x) / 2 ** y;
  return { index, epsilonUsed: epsilon, baseNum: x, baseBits: y, epsilonEffective: 2 * Number(sensitivity) * Math.log(1 / beta) };
}

/**
 * Most random trials a draw is padded to (2^23, about half a second on a loaded 2-core machine):
 * beyond it the draw's time may show, in the coarse reply slots of workers/pacing.ts.
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
 * j with probability proportional to (x/one)^d_j, by uniform proposals and Bernoulli(x/one) trials.
 *
 * How long the draw runs depends on the data (through d): with no rows every d_j is 0 and the first
 * proposal is accepted; with many rows near the target most proposals are rejected. So after the
 * draw, further trials are made and discarded until paddedTrials(m, x, one) trials have been made
 * in all: the time then follows public quantities (issue 9, data-independent timing). Discarded
 * trials are independent of the draw, so the law is unchanged. A draw that needs more than the
 * padding or more than MAX_PADDED_TRIALS is not padded further: its time then shows through, to
 * the reply ladder's slot (workers/pacing.ts). That is not rare on the worst data: when one
 * candidate alone takes the weight, a proposal is accepted with probability about 1/m, and more
 * than 2m proposals are needed with probability about e^-2 (one draw in seven); at small epsilon
 * the cap is reached first. DEVELOPERS.md states this as what still leaks.
 */
function drawByRejection(d: bigint[], x: bigint, one: bigint, bits: Bits): number {
  const m = d.length;
  if (x >= one) return bits.uniformSmall(m); // beta = 1: every trial succeeds, the law is uniform
  const small = one <= 281474976710656n; // 2^48: the number path of Bits
  const xn = Number(x);
  const on = Number(one);
  const trial = small ? () => bits.uniformSmall(on) < xn : () => bits.bernoulli(x, one);
  let made = 0;
  for (;;) {
    const j = bits.uniformSmall(m);
    made++;
    let left = d[j];
    let accepted = true;
    while (left > 0n) {
      made++;
      if (!trial()) {
        accepted = false;
        break;
      }
      left--;
    }
    if (accepted) {
      for (let pad = paddedTrials(m, x, one) - made; pad > 0; pad--) trial();
      return j;
    }
  }
}
