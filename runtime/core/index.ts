/**
 * Public surface of the privacy core. Everything else in hush imports from here; the modules behind it
 * are pure (no I/O) apart from reading the operating system's CSPRNG in random.ts.
 */
export { Rational, bitLength, isqrt } from "./rational.js";
export { type ByteSource, cryptoBytes, seededBytes, Bits } from "./random.js";
export { sampleBernoulliExp, sampleDiscreteLaplace, sampleDiscreteGaussian } from "./samplers.js";
export {
  type GridSpec,
  type Grid,
  MAX_GRID_UNITS,
  makeGrid,
  toGridUnits,
  fromGridUnits,
  sumSensitivity,
  centredSumSensitivity,
  decimalStepDigits,
  decimalText,
} from "./fixedpoint.js";
export {
  type PrivacyParam,
  type NoiseLaw,
  type NoisyRelease,
  calibrate,
  costOf,
  addNoise,
  drawNoise,
  releaseNoisy,
  checkLaw,
} from "./mechanisms.js";
export {
  type NoisyPart,
  type IntervalResult,
  type RatioIntervalArgs,
  type VarianceIntervalArgs,
  tailProbability,
  halfWidth,
  noiseVariance,
  ratioInterval,
  varianceInterval,
  SEARCH_CELLS,
  checkConfidence,
  DEFAULT_CONFIDENCE,
} from "./intervals.js";
export {
  type AccountingMode,
  rhoFromEpsilonDelta,
  epsilonFromRho,
  deltaFromRho,
  pureToRho,
  composeSequential,
  composeParallel,
  checkCost,
  bestEpsilon,
  pureEpsilonOfParts,
  type EpsilonRoute,
  type EpsilonStatement,
  type PartRecord,
} from "./accounting.js";
export {
  type Plan,
  type CostRange,
  type MeanPlan,
  type MeanPlanArgs,
  planForHalfWidth,
  halfWidthFor,
  meanPlanFor,
  planMeanForHalfWidth,
  supportedRange,
  laplaceReference,
  gaussianReference,
} from "./planning.js";
export { shortAt, shortIndexDown, shortIndexUp, shortSqrtDown } from "./shortdecimal.js";
export { firstPassing } from "./search.js";
export { laplaceHalfWidth, gaussianHalfWidth, missOf } from "./tailbounds.js";
export {
  type QuantileArgs,
  type QuantileResult,
  type QuantileInterval,
  type QuantileIntervalArgs,
  exponentialQuantile,
  quantileCosts,
  treeDepth,
  treeSensitivity,
  noisyTree,
  quantileInterval,
  rankCuts,
  unionCuts,
  type RankCuts,
  CALIBRATION_DRAWS,
} from "./quantile.js";
export {
  type Moments,
  type SimulationArgs,
  type SimulatedInterval,
  solveNormal,
  solveNormalInt,
  toFixed,
  floorDivInt,
  FIXED_BITS,
  rSquared,
  correlationSquare,
  simulationDraws,
  tailRank,
  simulateIntervals,
  toColumnUnits,
} from "./regression.js";
