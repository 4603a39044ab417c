/**
 * What the curator supports, in one place: the range of every privacy parameter an ask may carry
 * and the limits on every size that grows with a plan. Shared by both sides (the cell API reads it
 * to refuse early); imports nothing. Asks outside these ranges are refused before any work and
 * spend nothing.
 *
 * Why these values. Every interval, planning and quantile computation runs in exact integer
 * arithmetic whose cost grows with the bit length of the noise scale, i.e. with log(1/epsilon) and
 * log(1/rho); the ranges keep that bounded with wide margins, while lying far outside honest use
 * (an epsilon of 1e-9 buys error bars a billion times the sensitivity; an epsilon above 10 is
 * hardly privacy at all). The slowest plans at these limits, measured through an Answerer on the test
 * fixture with test/curator/limits-probe.mjs (2 shared cores; answer-limits.test.ts runs such plans): a std over 10,000 cells
 * 0.2 s to preview and 2-3.6 s to ask; describe, 20 quantiles or a 1000-bin histogram at the
 * range ends under 0.1 s to preview and 0.8 s to ask.
 */

/** Ranges of the privacy parameters of one ask (exact decimal strings, compared exactly). */
export const PRIVACY_LIMITS = {
  /**
   * epsilon of one ask (pure datasets, or epsilon asks on zCDP datasets). The small end sets the
   * cost of the arithmetic; the large end only keeps numbers sane: a large epsilon shrinks the noise
   * and costs nothing to compute, and reading noise-free values at a huge epsilon is how tests and
   * stewards check the data path (it spends the cap like any other ask).
   */
  minEpsilon: "1e-9",
  maxEpsilon: "1e9",
  /** rho of one ask (zCDP datasets): near (1e-9)^2/2 and exactly (1e9)^2/2, the epsilon range in rho */
  minRho: "1e-18",
  maxRho: "5e17",
  /**
   * Confidence of error bars. Below 0.001 an error bar says nothing; above 1 - 1e-12 the tail
   * targets leave binary64 input precision (a confidence is a binary64 number).
   */
  minConfidence: "0.001",
  maxConfidence: "0.999999999999",
  /** `within` of an accuracy-first ask, in the released value's units (it must also be at least one step) */
  minWithin: "1e-12",
  maxWithin: "1e15",
  /** digits of each part (integer, fraction, numerator, denominator) of an exact number as sent */
  maxDigits: 30,
  /**
   * Fraction digits of a quantile probability (p = 0.001 ... 0.999, 0.025, 0.975): p = a/b sets the
   * quantile's sensitivity max(a, b - a), and the exponential mechanism's work grows with b. On the
   * fixture with a wide column, 20 quantiles at epsilon 1000 took 0.8 s with 3 digits, 7-9 s with 4.
   */
  maxProbabilityDigits: 3,
} as const;

/** Structural limits on a plan; far above what a person writes, low enough to keep every check cheap. */
export const PLAN_LIMITS = {
  maxDepth: 12,
  maxConditions: 200,
  maxInValues: 1000,
  /** IN-list values summed over the whole filter */
  maxInValuesTotal: 5000,
  maxStringLength: 200,
  maxGroupKeys: 3,
  maxBins: 1000,
  maxQuantiles: 20,
  /** Columns of one clamped-shares release (five released rows each, docs/methods.md §21). */
  maxClampedColumns: 50,
  /**
   * Declared cells of one release: the product of the key sizes (bins, category values, 2 for a
   * boolean, rows x columns of a crosstab; for describe, the rows of all its parts). Every declared
   * cell is released, so this bounds the work, the memory and the reply of one ask.
   */
  maxCells: 10000,
  /**
   * Design columns of a regression: the intercept, one per numeric predictor and one per
   * non-reference level of a category predictor. The released sums grow as the square (12 design
   * columns and the response: 91 noisy sums), and so do the simulation's work and each sum's noise.
   * Measured at the limit (12 numeric columns of 2^30 grid points, 5,000 rows, epsilon 1e-9 to
   * 1e9; 2 shared cores): 1.4-2.8 s at confidence 0.95 (2000 draws), 5-8.6 s at 0.99 (10,000
   * draws), under the default time limit of 30 s; correlation of 12 columns alike.
   */
  maxDesignColumns: 12,
  /** Columns of one correlation matrix (the same released sums as a regression of that width). */
  maxCorrelationColumns: 12,
} as const;

/**
 * Releases in one ledger reply, per population: the latest ones (below `before`, if given). An
 * analyst's history grows with every release, so without a page the reply, and the curator's work
 * to build it, would grow without bound (at 1e-9 per release a cap of 1 allows 10^9 releases).
 * About 1.5 KB per entry: a full page of one population is about 1.5 MB.
 */
export const LEDGER_PAGE = 1000;
