/**
 * Public surface of the privacy core. Everything else in hush imports from here; the modules behind it
 * are pure (no I/O) apart from reading the operating system's CSPRNG in random.ts.
 */
export { Rational } from "./rational.js";
export { type ByteSource, cryptoBytes, seededBytes, Bits } from "./random.js";
export { sampleBernoulliExp, sampleDiscreteLaplace, sampleDiscreteGaussian } from "./samplers.js";
export {
  type GridSpec,
  type Grid,
  makeGrid,
  toGridUnits,
  fromGridUnits,
  sumSensitivity,
  centredSumSensitivity,
} from "./fixedpoint.js";
export { type PrivacyParam, type NoiseLaw, calibrate, costOf, addNoise } from "./mechanisms.js";
export {
  type NoisyPart,
  type IntervalResult,
  type VarianceIntervalArgs,
  tailProbability,
  halfWidth,
  ratioInterval,
  varianceInterval,
  checkConfidence,
} from "./intervals.js";
export {
  type AccountingMode,
  rhoFromEpsilonDelta,
  epsilonFromRho,
  pureToRho,
  composeSequential,
  composeParallel,
  checkCost,
  BudgetAccount,
  Reservation,
} from "./accounting.js";
export { planForHalfWidth, halfWidthFor } from "./planning.js";
export { exponentialQuantile } from "./quantile.js";
