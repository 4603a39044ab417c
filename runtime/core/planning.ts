/**
 * Accuracy-first planning (methods.md §11): from a requested half-width at a confidence to the
 * smallest privacy cost, and from a cost to the half-width it buys. Public inputs only: no data, no
 * spend. Rounding goes the accurate way (epsilon up, sigma^2 down) and every plan is confirmed with
 * the exact tail of the law actually returned.
 */
import { BadInputError } from "../errors.js";
import { checkConfidence, halfWidth, normalQuantile } from "./intervals.js";
import { calibrate, costOf, type NoiseLaw, type PrivacyParam } from "./mechanisms.js";
import { Rational } from "./rational.js";
import { gaussianTail } from "./tails.js";

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
 * Discrete Laplace: the smallest epsilon with 2 q^(h+1)/(1+q) <= a, q = exp(-epsilon/Delta).
 * Solved in x = epsilon/Delta (the tail decreases in x) by bisection; [C11.2].
 */
export function minEpsilonLaplace(sensitivity: number, h: number, a: number): number {
  const tail = (x: number): number => (2 * Math.exp(-x * (h + 1))) / (1 + Math.exp(-x));
  let lo = 0;
  let hi = 1;
  while (tail(hi) > a) hi *= 2;
  for (let i = 0; i < 200; i++) {
    const mid = (lo + hi) / 2;
    if (tail(mid) > a) lo = mid;
    else hi = mid;
  }
  return sensitivity * hi;
}

/** Discrete Gaussian: the largest sigma with P(|X| > h) <= a (the tail increases in sigma); [C11.4a]. */
export function maxSigmaGaussian(h: number, a: number): number {
  const tail = (s: number): number => gaussianTail(s * s, h);
  let lo = 1e-3;
  if (tail(lo) > a) return 0;
  let hi = Math.max(1, h);
  while (tail(hi) <= a) hi *= 2;
  for (let i = 0; i < 100 && hi - lo > 1e-12 * hi; i++) {
    const mid = (lo + hi) / 2;
    if (tail(mid) <= a) lo = mid;
    else hi = mid;
  }
  return lo;
}

/**
 * Continuous references for fast previews (methods.md §3 and §11; the project never releases
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

/** Smallest cost whose noise has half-width <= halfWidthUnits at the confidence. */
export function planForHalfWidth(args: { family: NoiseLaw["family"]; sensitivity: bigint; halfWidthUnits: bigint; confidence: number }): Plan {
  checkConfidence(args.confidence);
  checkPlanInputs(args.sensitivity, args.halfWidthUnits);
  const a = 1 - args.confidence;
  const h = Number(args.halfWidthUnits);
  const delta = args.sensitivity;
  if (args.family === "discrete-laplace") {
    const epsMin = minEpsilonLaplace(Number(delta), h, a);
    let eps = Rational.fromNumberUp(epsMin * (1 + 1e-10), 6);
    for (let i = 0; i < 1000; i++) {
      const law = calibrate(delta, { epsilon: eps });
      const got = halfWidth(law, args.confidence);
      if (got <= args.halfWidthUnits) return { law, param: costOf(law, delta), halfWidthUnits: got };
      eps = Rational.fromNumberUp(eps.toNumber() * (1 + 1e-6), 6);
    }
    throw new BadInputError("could not plan a discrete Laplace cost for this half-width");
  }
  if (args.family === "discrete-gaussian") {
    const sigma = maxSigmaGaussian(h, a);
    if (!(sigma > 0)) throw new BadInputError(`half-width ${h} is too small to plan at confidence ${args.confidence}`);
    // sigma^2 = sigma_max^2 rounded down; Delta^2 enters only through rho = Delta^2/(2 sigma^2).
    let s2 = Rational.fromNumberDown(sigma * sigma * (1 - 1e-10), 6);
    for (let i = 0; i < 1000 && s2.sign() > 0; i++) {
      const law: NoiseLaw = { family: "discrete-gaussian", sigma2: s2 };
      const got = halfWidth(law, args.confidence);
      if (got <= args.halfWidthUnits) return { law, param: costOf(law, delta), halfWidthUnits: got };
      s2 = Rational.fromNumberDown(s2.toNumber() * (1 - 1e-6), 6);
    }
    throw new BadInputError("could not plan a discrete Gaussian cost for this half-width");
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
  /** public guess of the number of rows (never the true count; methods.md §11 cautions) */
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
 * Expected half-width of the corner mean interval (methods.md §8, §11 "Means"):
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

/** Smallest total cost (6 significant digits, rounded up) whose expected mean half-width is <= H. */
export function planMeanForHalfWidth(args: MeanPlanArgs & { halfWidth: Rational }): MeanPlan {
  if (!(args.halfWidth instanceof Rational) || args.halfWidth.sign() <= 0) throw new BadInputError("requested half-width must be a positive rational");
  const H = args.halfWidth.toNumber();
  const ok = (cost: Rational): boolean => {
    const w = meanPlanFor({ ...args, total: cost }).expectedHalfWidth;
    return w !== null && w <= H;
  };
  // bisection on ln(cost) over [1e-9, 1e9]; the half-width falls as the cost rises
  let lo = Math.log(1e-9);
  let hi = Math.log(1e9);
  if (!ok(Rational.fromNumberUp(Math.exp(hi), 6))) throw new BadInputError("no affordable cost reaches this half-width; check the expected row count");
  for (let i = 0; i < 80; i++) {
    const mid = (lo + hi) / 2;
    if (ok(Rational.fromNumberUp(Math.exp(mid), 6))) hi = mid;
    else lo = mid;
  }
  return meanPlanFor({ ...args, total: Rational.fromNumberUp(Math.exp(hi), 6) });
}
