/**
 * Accuracy-first planning (docs/methods.md §11): from a requested half-width at a confidence to the
 * smallest privacy cost, and from a cost to the half-width it buys. Public inputs only: no data, no
 * spend. Rounding goes the accurate way (epsilon up, sigma^2 down), every search is an integer
 * bisection over short decimals (no binary64 step decides a cost), and every plan is confirmed with
 * the exact half-width of the law actually returned.
 */
import { BadInputError } from "../errors.js";
import { checkConfidence, halfWidth, normalQuantile } from "./intervals.js";
import { calibrate, costOf, type NoiseLaw, type PrivacyParam } from "./mechanisms.js";
import { PRIVACY_LIMITS } from "../protocol/limits.js";
import { Rational } from "./rational.js";
import { firstPassing } from "./search.js";
import { shortAt, shortIndexDown, shortIndexUp } from "./shortdecimal.js";

export interface Plan {
  law: NoiseLaw;
  param: PrivacyParam;
  /** half-width actually achieved, <= the requested one */
  halfWidthUnits: bigint;
}

function checkPlanInputs(sensitivity: bigint, h: bigint): void {
  if (typeof sensitivity !== "bigint" || sensitivity <= 0n) throw new BadInputError(`sensitivity must be a positive integer, got ${String(sensitivity)}`);
  if (typeof h !== "bigint" || h < 0n) throw new BadInputError(`requested half-width must be a non-negative integer of grid units, got ${String(h)}`);
}

/**
 * Continuous references for fast previews (docs/methods.md §3 and §11; the project never releases
 * continuous noise): the Laplace mechanism with b = Delta/epsilon has half-width b ln(1/a) and
 * variance 2 b^2, so epsilon = Delta ln(1/a)/H; the Gaussian has sigma = H / z_(1-a/2) and
 * rho = Delta^2/(2 sigma^2).
 */
export function laplaceReference(args: { sensitivity: number; a: number; halfWidth?: number; epsilon?: number }): {
  epsilon: number;
  halfWidth: number;
  variance: number;
} {
  const { sensitivity: d, a } = args;
  const epsilon = args.epsilon ?? (d * Math.log(1 / a)) / (args.halfWidth as number);
  const b = d / epsilon;
  return { epsilon, halfWidth: b * Math.log(1 / a), variance: 2 * b * b };
}

export function gaussianReference(args: { sensitivity: number; a: number; halfWidth: number }): { z: number; sigma: number; rho: number } {
  const z = normalQuantile(1 - args.a / 2);
  const sigma = args.halfWidth / z;
  return { z, sigma, rho: (args.sensitivity * args.sensitivity) / (2 * sigma * sigma) };
}

/** Range of a planned cost: epsilon for the discrete Laplace, rho for the discrete Gaussian. */
export interface CostRange {
  low: Rational;
  high: Rational;
}

/** The supported range of one ask's parameter (runtime/protocol/limits.ts). */
export function supportedRange(family: NoiseLaw["family"]): CostRange {
  return family === "discrete-laplace"
    ? { low: Rational.parse(PRIVACY_LIMITS.minEpsilon), high: Rational.parse(PRIVACY_LIMITS.maxEpsilon) }
    : { low: Rational.parse(PRIVACY_LIMITS.minRho), high: Rational.parse(PRIVACY_LIMITS.maxRho) };
}

/** Index of a binary64 guess among short decimals (a starting point only), or `fallback`. */
function guessIndex(x: number, fallback: bigint): bigint {
  if (!Number.isFinite(x) || !(x > 1e-80) || x > 1e300) return fallback;
  return shortIndexDown(Rational.fromNumberExact(x));
}

/**
 * Smallest cost whose noise has half-width <= halfWidthUnits at the confidence (docs/methods.md §11):
 * the smallest 6-significant-digit epsilon (discrete Laplace), or the largest 6-significant-digit
 * sigma^2 (discrete Gaussian, rho = Delta^2/(2 sigma^2)), found by integer bisection over the
 * ordered short decimals of the supported range, each step an exact half-width (intervals.ts).
 * About 25 half-widths at most; a binary64 closed-form guess picks where the search starts.
 */
export function planForHalfWidth(args: {
  family: NoiseLaw["family"];
  sensitivity: bigint;
  halfWidthUnits: bigint;
  confidence: number;
  range?: CostRange;
}): Plan {
  checkConfidence(args.confidence);
  checkPlanInputs(args.sensitivity, args.halfWidthUnits);
  const conf = args.confidence;
  const H = args.halfWidthUnits;
  const delta = args.sensitivity;
  const a = 1 - conf;
  const range = args.range ?? supportedRange(args.family);
  const done = (law: NoiseLaw): Plan => ({ law, param: costOf(law, delta), halfWidthUnits: halfWidth(law, conf) });
  if (args.family === "discrete-laplace") {
    const lo = shortIndexUp(range.low);
    const hi = shortIndexDown(range.high);
    const lawAt = (i: bigint): NoiseLaw => calibrate(delta, { epsilon: shortAt(i) });
    // continuous Laplace guess: epsilon = Delta ln(1/a) / (H + 1)
    const hint = guessIndex((Number(delta) * Math.log(1 / a)) / (Number(H) + 1), lo);
    const i = firstPassing((x) => halfWidth(lawAt(x), conf) <= H, lo, hi, hint);
    if (i === null) throw new BadInputError(`reaching this half-width needs more than the largest epsilon the curator supports (${range.high.toDecimal()})`);
    return done(lawAt(i));
  }
  if (args.family === "discrete-gaussian") {
    const d2 = Rational.of(delta * delta);
    const lo = shortIndexUp(d2.div(range.high.mul(2n)));
    const hi = shortIndexDown(d2.div(range.low.mul(2n)));
    const lawAt = (i: bigint): NoiseLaw => ({ family: "discrete-gaussian", sigma2: shortAt(i) });
    // continuous Gaussian guess: sigma = (H + 1/2) / z_(1 - a/2)
    const sigma = (Number(H) + 0.5) / normalQuantile(1 - a / 2);
    const hint = guessIndex(sigma * sigma, lo);
    // half-widths grow with sigma^2: the first index that misses, minus one
    const miss = firstPassing((x) => halfWidth(lawAt(x), conf) > H, lo, hi, hint);
    const i = miss === null ? hi : miss - 1n;
    if (i < lo) throw new BadInputError(`reaching this half-width needs more than the largest rho the curator supports (${range.high.toDecimal()})`);
    return done(lawAt(i));
  }
  throw new BadInputError(`unknown noise family ${JSON.stringify(args.family)}`);
}

/** Half-width (grid units) that a cost buys at a confidence. */
export function halfWidthFor(args: { sensitivity: bigint; param: PrivacyParam; confidence: number }): bigint {
  checkConfidence(args.confidence);
  return halfWidth(calibrate(args.sensitivity, args.param), args.confidence);
}

export interface MeanPlanArgs {
  family: NoiseLaw["family"];
  /** sensitivity of the (centred) sum in its grid units */
  sumSensitivity: bigint;
  /** sensitivity of the count (rows per unit) */
  countSensitivity: bigint;
  /** value of one sum grid unit (g, or g/2 for a centred sum in half-units) */
  sumStep: Rational;
  confidence: number;
  /** public guess of the number of rows (never the true count; docs/methods.md §11 cautions) */
  expectedCount: number;
  /** public guess of |mean - centre| in value units (0 when centred at a good guess) */
  expectedOffset: number;
}

export interface MeanPlan {
  sum: { law: NoiseLaw; param: PrivacyParam };
  count: { law: NoiseLaw; param: PrivacyParam };
  /** total cost of the two releases (sequential composition) */
  total: PrivacyParam;
  /** expected corner half-width in value units, or null when N - h_N <= 0 (the interval is the whole range) */
  expectedHalfWidth: number | null;
}

function split(total: Rational, family: NoiseLaw["family"]): PrivacyParam {
  const half = total.div(2n);
  return family === "discrete-laplace" ? { epsilon: half } : { rho: half };
}

/**
 * Expected half-width of the corner mean interval (docs/methods.md §8, §11 "Means"):
 * (g h_S + |m - c| h_N) / (N - h_N), with a/2 per part and an equal budget split (§8 default).
 */
export function meanPlanFor(args: MeanPlanArgs & { total: Rational }): MeanPlan {
  checkConfidence(args.confidence);
  if (!(args.expectedCount > 0) || !Number.isFinite(args.expectedCount)) throw new BadInputError("expected row count must be a positive number");
  if (!(args.expectedOffset >= 0) || !Number.isFinite(args.expectedOffset)) throw new BadInputError("expected offset of the mean must be a non-negative number");
  if (args.family !== "discrete-laplace" && args.family !== "discrete-gaussian") throw new BadInputError(`unknown noise family ${JSON.stringify(args.family)}`);
  const part = split(args.total, args.family);
  const conf = 1 - (1 - args.confidence) / 2;
  const sumLaw = calibrate(args.sumSensitivity, part);
  const countLaw = calibrate(args.countSensitivity, part);
  const hS = Number(halfWidth(sumLaw, conf));
  const hN = Number(halfWidth(countLaw, conf));
  const denom = args.expectedCount - hN;
  const expectedHalfWidth = denom > 0 ? (args.sumStep.toNumber() * hS + args.expectedOffset * hN) / denom : null;
  const total: PrivacyParam = args.family === "discrete-laplace" ? { epsilon: args.total } : { rho: args.total };
  return { sum: { law: sumLaw, param: part }, count: { law: countLaw, param: part }, total, expectedHalfWidth };
}

/**
 * Smallest total cost (6 significant digits) in the supported range whose expected mean half-width
 * is <= H: integer bisection over the ordered short decimals. The expected half-width itself is a
 * binary64 figure from public guesses (expected count and offset), a planning aid, not a guarantee.
 */
export function planMeanForHalfWidth(args: MeanPlanArgs & { halfWidth: Rational; range?: CostRange }): MeanPlan {
  if (!(args.halfWidth instanceof Rational) || args.halfWidth.sign() <= 0) throw new BadInputError("requested half-width must be a positive rational");
  const H = args.halfWidth.toNumber();
  const range = args.range ?? supportedRange(args.family);
  const ok = (i: bigint): boolean => {
    const w = meanPlanFor({ ...args, total: shortAt(i) }).expectedHalfWidth;
    return w !== null && w <= H;
  };
  const i = firstPassing(ok, shortIndexUp(range.low), shortIndexDown(range.high));
  if (i === null) throw new BadInputError("no affordable cost reaches this half-width; check the expected row count");
  return meanPlanFor({ ...args, total: shortAt(i) });
}
