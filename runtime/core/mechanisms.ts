/**
 * Additive noise mechanisms as pure functions (docs/methods.md §4–5): an exact integer aggregate, its
 * integer sensitivity and a privacy parameter give a noisy integer and a description of the noise.
 * Pure epsilon uses the discrete Laplace with scale t = Delta/epsilon (Ghosh, Roughgarden &
 * Sundararajan 2009); zCDP rho uses the discrete Gaussian with sigma^2 = Delta^2/(2 rho) (Canonne,
 * Kamath & Steinke 2020). Every parameter is an exact rational, so the ledger charges exactly the
 * cost of the noise drawn.
 */
import { BadInputError } from "../errors.js";
import { Rational } from "./rational.js";
import type { Bits } from "./random.js";
import { fillDiscreteGaussian, fillDiscreteLaplace, sampleDiscreteGaussian, sampleDiscreteLaplace } from "./samplers.js";

export type PrivacyParam = { epsilon: Rational } | { rho: Rational };
export type NoiseLaw = { family: "discrete-laplace"; scale: Rational } | { family: "discrete-gaussian"; sigma2: Rational };

function checkSensitivity(sensitivity: bigint): void {
  if (typeof sensitivity !== "bigint" || sensitivity <= 0n) {
    throw new BadInputError(`sensitivity must be a positive integer (in grid units), got ${String(sensitivity)}`);
  }
}

function checkPositive(x: unknown, what: string): Rational {
  if (!(x instanceof Rational)) throw new BadInputError(`${what} must be an exact rational`);
  if (x.sign() <= 0) throw new BadInputError(`${what} must be positive, got ${x}`);
  return x;
}

/** Noise law for a sensitivity and a privacy parameter, in exact rationals. */
export function calibrate(sensitivity: bigint, param: PrivacyParam): NoiseLaw {
  checkSensitivity(sensitivity);
  if ("epsilon" in param) {
    const eps = checkPositive(param.epsilon, "epsilon");
    return { family: "discrete-laplace", scale: Rational.of(sensitivity).div(eps) };
  }
  if ("rho" in param) {
    const rho = checkPositive(param.rho, "rho");
    return { family: "discrete-gaussian", sigma2: Rational.of(sensitivity * sensitivity).div(rho.mul(2n)) };
  }
  throw new BadInputError("privacy parameter must give epsilon or rho");
}

/** The exact cost of a noise law at a sensitivity: epsilon = Delta/t, or rho = Delta^2/(2 sigma^2). */
export function costOf(law: NoiseLaw, sensitivity: bigint): PrivacyParam {
  checkSensitivity(sensitivity);
  checkLaw(law);
  if (law.family === "discrete-laplace") return { epsilon: Rational.of(sensitivity).div(law.scale) };
  return { rho: Rational.of(sensitivity * sensitivity).div(law.sigma2.mul(2n)) };
}

export function checkLaw(law: NoiseLaw): void {
  if (law === null || typeof law !== "object") throw new BadInputError("noise law must be an object");
  if (law.family === "discrete-laplace") checkPositive(law.scale, "discrete Laplace scale");
  else if (law.family === "discrete-gaussian") checkPositive(law.sigma2, "discrete Gaussian sigma^2");
  else throw new BadInputError(`unknown noise family ${JSON.stringify((law as { family: unknown }).family)}`);
}

/** value + one exact draw of the law's noise. */
export function addNoise(value: bigint, law: NoiseLaw, bits: Bits): bigint {
  if (typeof value !== "bigint") throw new BadInputError("the true aggregate must be an exact integer (bigint)");
  return value + drawNoise(law, bits);
}

/**
 * One exact draw of the law's noise. The number of sampler rounds depends on the value drawn, so
 * callers whose timing is observable should draw before touching the data (docs/methods.md §5 timing
 * caution) and add the noise afterwards.
 */
export function drawNoise(law: NoiseLaw, bits: Bits): bigint {
  if (law.family === "discrete-laplace") return sampleDiscreteLaplace(law.scale, bits);
  if (law.family === "discrete-gaussian") return sampleDiscreteGaussian(law.sigma2, bits);
  checkLaw(law);
  throw new BadInputError("unknown noise family");
}

/**
 * out.length draws of drawNoise, in order and bit for bit the same, as numbers; a draw the samplers'
 * number path cannot hold is NaN in `out` and its bigint is in the returned map, by index. For
 * loops that keep many draws (the quantile calibration).
 */
export function fillNoise(law: NoiseLaw, bits: Bits, out: Float64Array): Map<number, bigint> {
  if (law.family === "discrete-laplace") return fillDiscreteLaplace(law.scale, bits, out);
  if (law.family === "discrete-gaussian") return fillDiscreteGaussian(law.sigma2, bits, out);
  checkLaw(law);
  throw new BadInputError("unknown noise family");
}

export interface NoisyRelease {
  noisy: bigint;
  law: NoiseLaw;
  sensitivity: bigint;
  param: PrivacyParam;
}

/** The whole mechanism: calibrate, draw, and describe (family, scale, parameter). */
export function releaseNoisy(args: { value: bigint; sensitivity: bigint; param: PrivacyParam; bits: Bits }): NoisyRelease {
  const law = calibrate(args.sensitivity, args.param);
  return { noisy: addNoise(args.value, law, args.bits), law, sensitivity: args.sensitivity, param: costOf(law, args.sensitivity) };
}
