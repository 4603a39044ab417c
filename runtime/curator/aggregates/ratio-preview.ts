/**
 * The expected error of a ratio estimate itself (mean, variance, std), for a preview (docs/methods.md §24).
 *
 * A mean's error bar depends on its noisy count, which is private, so a preview cannot state it
 * without an assumption. Here the assumption is explicit and public: a count of values per group,
 * stated by the analyst (`assumeCount`) or by the steward's policy (`sizeHint`). For that count, the
 * figures are the half-widths the release would compute (the same pivot method, docs/methods.md
 * §8, with the same laws and confidence) if its noisy parts landed on the values the assumption
 * gives them: the noise-free count and sums of data with the stated mean and spread. They are
 * typical widths, not bounds: a release's own error bar uses its noisy parts and can differ. No
 * data is read; the inputs are the plan, the policy and the assumption.
 *
 * Points: the mean at the range's midpoint (typical) and at eight more points out to an end of the
 * range (the widest is reported; the interval widens as |mean - midpoint| grows until the
 * range clamps it). Variance and std: six points, the mean at the midpoint or half-way to an end
 * and the spread from nothing to the most the range allows; typical is the mean at the midpoint
 * with a standard deviation of half the half-range. The work is a fixed number of exact interval
 * computations, whatever the assumed count (tens to a few hundred milliseconds of CPU at the
 * extreme parameters), so a preview runs them on the worker pool, never on the curator's loop.
 */
import { type NoiseLaw, Rational, ratioInterval, varianceInterval } from "../../core/index.js";
import type { RatioError } from "../../protocol/messages.js";
import { exactDecimal, sqrtRational } from "./budget.js";

export interface RatioShape {
  stat: "mean" | "variance" | "std";
  column: string;
  lower: Rational;
  upper: Rational;
  centre: Rational;
  /** Half a grid step: the unit of the centred sum. */
  half: Rational;
  /** Declared range in grid steps (upper - lower), i.e. the half-range in half-steps. */
  width: bigint;
  confidence: number;
  countLaw: NoiseLaw;
  sumLaw: NoiseLaw;
  squaresLaw?: NoiseLaw;
}

const EIGHTHS = [0n, 1n, 2n, 3n, 4n, 5n, 6n, 7n, 8n];

function roundDiv(a: bigint, b: bigint): bigint {
  return (2n * a + b) / (2n * b);
}

function nearest(r: Rational): bigint {
  return r.add(Rational.of(1n, 2n)).floor();
}

/** Half the length of [low, high]. */
function halfLength(low: Rational, high: Rational): Rational {
  return high.sub(low).div(2n);
}

function meanHalfWidth(s: RatioShape, n: bigint, offsetEighths: bigint): Rational {
  // The centred sum of n values whose mean sits offsetEighths/8 of the half-range above the midpoint, in half-steps.
  const sum = roundDiv(n * s.width * offsetEighths, 8n);
  const r = ratioInterval({
    sum: { noisy: sum, law: s.sumLaw },
    count: { noisy: n, law: s.countLaw },
    sumStep: s.half,
    lower: s.lower,
    upper: s.upper,
    confidence: s.confidence,
    centre: s.centre,
  });
  return halfLength(r.low, r.high);
}

/** meanEighths: the mean's offset from the midpoint in eighths of the half-range; spread: the variance as a fraction of what the range allows at that mean. */
function spreadHalfWidth(s: RatioShape, n: bigint, meanEighths: bigint, spread: Rational): Rational {
  const w = s.width; // half-range in half-steps
  const m = Rational.of(w * meanEighths, 8n); // mean offset, half-steps
  const room = Rational.of(w * w).sub(m.mul(m)); // largest variance at that mean, half-steps squared
  const variance = room.mul(spread);
  const sum = nearest(m.mul(n));
  const squares = nearest(variance.add(m.mul(m)).mul(n));
  const r = varianceInterval({
    count: { noisy: n, law: s.countLaw },
    sum: { noisy: sum, law: s.sumLaw },
    sumSquares: { noisy: squares, law: s.squaresLaw! },
    sumStep: s.half,
    squareStep: s.half.mul(s.half),
    lower: s.lower,
    upper: s.upper,
    confidence: s.confidence,
  });
  if (s.stat === "variance") return halfLength(r.low, r.high);
  return halfLength(sqrtRational(r.low, 12, "down"), sqrtRational(r.high, 12, "up"));
}

/** The largest half-width the estimate's interval can have: the whole declared range (its square for the variance). */
export function wholeRange(s: RatioShape): Rational {
  const half = s.upper.sub(s.lower).div(2n);
  if (s.stat === "mean") return half;
  return s.stat === "variance" ? half.mul(half).div(2n) : half.div(2n);
}

/** The expected error of the estimate for `count` values per group (see the file header). */
export function ratioError(s: RatioShape, count: number, from: RatioError["assumedFrom"]): RatioError {
  const n = BigInt(count);
  let typical: Rational;
  let widest: Rational;
  let typicalAt: string;
  if (s.stat === "mean") {
    const all = EIGHTHS.map((e) => meanHalfWidth(s, n, e));
    typical = all[0];
    widest = all.reduce((a, b) => (b.gt(a) ? b : a));
    typicalAt = `${count} values, mean at the midpoint ${exactDecimal(s.centre)} of the declared range`;
  } else {
    // Six points (each interval computes its three half-widths again, on the curator's loop):
    // the mean at the midpoint with no spread, a quarter, half or all the spread the range allows,
    // and half-way to an end with none or all. Typical: the midpoint and a quarter of the variance
    // the range allows, i.e. a standard deviation of half the half-range.
    const quarter = Rational.of(1n, 4n);
    typical = spreadHalfWidth(s, n, 0n, quarter);
    const all = [
      typical,
      ...[Rational.ZERO, Rational.of(1n, 2n), Rational.ONE].map((f) => spreadHalfWidth(s, n, 0n, f)),
      ...[Rational.ZERO, Rational.ONE].map((f) => spreadHalfWidth(s, n, 4n, f)),
    ];
    widest = all.reduce((a, b) => (b.gt(a) ? b : a));
    typicalAt = `${count} values, mean at the midpoint ${exactDecimal(s.centre)}, standard deviation ${exactDecimal(s.upper.sub(s.lower).div(4n))} (half the half-range)`;
  }
  return { stat: s.stat, column: s.column, assumedCount: count, assumedFrom: from, typical: exactDecimal(typical), typicalAt, widest: exactDecimal(widest) };
}

/** What a worker needs to compute ratioError (workers/pool.ts `ratioError`). */
export interface RatioJob {
  shape: RatioShape;
  count: number;
  from: RatioError["assumedFrom"];
}

/** ratioError on a worker thread: its exact interval searches take tens to hundreds of milliseconds. */
export function runRatioJob(job: RatioJob): RatioError {
  return ratioError(job.shape, job.count, job.from);
}
