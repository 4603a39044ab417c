/**
 * Linear regression and correlation from noisy sufficient statistics (docs/methods.md §18, §19),
 * in exact integers and rationals. Pure: no I/O; randomness only through `Bits` (the CSPRNG in
 * production, a seeded source in tests).
 *
 * The curator releases the moment matrix G of a list of integer-coded "factors" (factor 0 is the
 * constant 1; the others are centred numeric columns, 0/1 indicators and the response), each entry
 * G[a][b] = sum over kept rows of z_a z_b plus exact discrete Laplace or Gaussian noise. Everything
 * below is post-processing of those noisy integers:
 *   - solveNormal: the noisy normal equations X'X beta = X'y by fraction-free (Bareiss) elimination,
 *     whose pivots are the leading principal minors, so positive definiteness is decided exactly
 *     (Sylvester's criterion) before any division;
 *   - rSquared, correlationSquare: R^2 and the signed square of a Pearson correlation, exactly;
 *   - simulateIntervals: error bars by parametric simulation: redraw the known noise laws around the
 *     released statistics, recompute, and take the percentile interval from order statistics.
 */
import { BadInputError } from "../errors.js";
import { type NoiseLaw, drawNoise } from "./mechanisms.js";
import type { Bits } from "./random.js";
import { Rational } from "./rational.js";

/** A symmetric integer matrix, given as a full square array (G[a][b] === G[b][a]). */
export type Moments = bigint[][];

/**
 * Solves A x = c for the design block of G: rows and columns `design`, right-hand side column
 * `response`. Returns null when A is not positive definite (some leading principal minor <= 0):
 * then the noisy normal equations have no least-squares meaning and no coefficient is reported.
 *
 * Bareiss: after step k the entry M[i][j] (i, j > k) is a (k+2)-order minor of [A | c], every
 * division is exact, and the pivot M[k][k] is the leading principal minor of order k + 1.
 */
export function solveNormal(g: Moments, design: readonly number[], response: number): Rational[] | null {
  const x = solveNormalInt(g, design, response);
  if (x === null) return null;
  return x.num.map((v) => Rational.of(v, x.det));
}

/**
 * The same solve in integers only: beta_i = num[i]/det with det = det(A) > 0 (the last Bareiss
 * pivot). Back substitution stays fraction-free: with N_i = det beta_i,
 * N_i = (det M[i][n] - sum_{j > i} M[i][j] N_j) / M[i][i], an exact division (Cramer's rule makes
 * every N_i an integer). Null when A is not positive definite.
 */
export function solveNormalInt(g: Moments, design: readonly number[], response: number): { num: bigint[]; det: bigint } | null {
  const n = design.length;
  if (n === 0) throw new BadInputError("regression needs at least one design column");
  const m: bigint[][] = design.map((i) => [...design.map((j) => g[i][j]), g[i][response]]);
  let prev = 1n;
  for (let k = 0; k < n; k++) {
    const p = m[k][k];
    if (p <= 0n) return null;
    for (let i = k + 1; i < n; i++) {
      const rowI = m[i];
      const f = rowI[k];
      for (let j = k + 1; j <= n; j++) rowI[j] = (rowI[j] * p - f * m[k][j]) / prev;
      rowI[k] = 0n;
    }
    prev = p;
  }
  const det = m[n - 1][n - 1];
  const num: bigint[] = new Array(n);
  for (let i = n - 1; i >= 0; i--) {
    let s = det * m[i][n];
    for (let j = i + 1; j < n; j++) s -= m[i][j] * num[j];
    num[i] = s / m[i][i];
  }
  return { num, det };
}

/**
 * R^2 of the fit with intercept (factor 0 in `design`): 1 - SSE/SST with SST = G[y][y] - G[0][y]^2/G[0][0]
 * and SSE = G[y][y] - sum_f beta_f G[f][y] (X'X beta = X'y makes the cross term vanish). Clamped to
 * [0, 1]; null when the noisy count or SST is not positive.
 */
export function rSquared(g: Moments, design: readonly number[], response: number, beta: readonly Rational[]): Rational | null {
  const n = g[0][0];
  if (n <= 0n) return null;
  const yy = Rational.of(g[response][response]);
  const sst = yy.sub(Rational.of(g[0][response] * g[0][response], n));
  if (sst.sign() <= 0) return null;
  let fit = Rational.ZERO;
  design.forEach((f, i) => {
    fit = fit.add(beta[i].mul(g[f][response]));
  });
  const sse = yy.sub(fit);
  const r2 = Rational.ONE.sub(sse.div(sst));
  return r2.max(Rational.ZERO).min(Rational.ONE);
}

/**
 * Signed square of the Pearson correlation of factors i and j (factor 0 the constant):
 * r = (n S_ij - S_i S_j) / sqrt((n S_ii - S_i^2)(n S_jj - S_j^2)); returns sign(r) r^2, clamped to
 * [-1, 1], or null when a variance or the count is not positive. sign(r) r^2 is increasing in r, so
 * order statistics can be taken on it and only the chosen ones square-rooted.
 */
export function correlationSquare(g: Moments, i: number, j: number): Rational | null {
  const n = g[0][0];
  if (n <= 0n) return null;
  const vi = n * g[i][i] - g[0][i] * g[0][i];
  const vj = n * g[j][j] - g[0][j] * g[0][j];
  if (vi <= 0n || vj <= 0n) return null;
  const c = n * g[i][j] - g[0][i] * g[0][j];
  const r2 = Rational.of(c * c, vi * vj);
  const signed = c < 0n ? r2.neg() : r2;
  return signed.max(Rational.ONE.neg()).min(Rational.ONE);
}

/**
 * Draws of the simulation for a confidence: enough that each tail holds at least 50 expected draws
 * (B a/2 >= 50), and at least 1000 (2000 at 95%). The curator offers confidences up to 0.99, so B <= 10000.
 */
export function simulationDraws(miss: Rational): number {
  if (miss.sign() <= 0 || miss.gt(Rational.ONE)) throw new BadInputError("the miss probability must lie in (0, 1]");
  const need = Rational.of(100n).div(miss).ceil();
  return Number(need < 1000n ? 1000n : need);
}

/** Rank (1-based) of the lower order statistic used for a tail of a/2 among B draws: max(1, floor(B a/2)). */
export function tailRank(draws: number, miss: Rational): number {
  const k = miss.mul(BigInt(draws)).div(2n).floor();
  return Number(k < 1n ? 1n : k);
}

/** Fraction bits of the fixed-point values the simulation orders (2^-128 is far below any figure shown). */
export const FIXED_BITS = 128n;

/** floor(x 2^FIXED_BITS) for a rational x. */
export function toFixed(x: Rational): bigint {
  const t = x.num << FIXED_BITS;
  const q = t / x.den;
  return q * x.den > t ? q - 1n : q;
}

/** floor(a/b) for bigints, b > 0. */
export function floorDivInt(a: bigint, b: bigint): bigint {
  const q = a / b;
  return q * b > a ? q - 1n : q;
}

export interface SimulationArgs {
  /** The released noisy statistics, in the order of `laws`. */
  released: readonly bigint[];
  /** The noise law each statistic was released with. */
  laws: readonly NoiseLaw[];
  /** The estimates from the released statistics, exact (null: unavailable). */
  centre: readonly (Rational | null)[];
  /**
   * The same estimates from one vector of statistics, as floor(estimate 2^FIXED_BITS) (null where
   * unavailable, e.g. the matrix is not positive definite). Must be deterministic.
   */
  estimate: (stats: readonly bigint[]) => (bigint | null)[];
  draws: number;
  /** a = 1 - confidence, exact. */
  miss: Rational;
  bits: Bits;
}

export interface SimulatedInterval {
  /** Estimate from the released statistics (null: unavailable). */
  value: Rational | null;
  /** Ends of the percentile interval; null when a side is unbounded (too many unavailable draws). */
  low: Rational | null;
  high: Rational | null;
}

/**
 * Error bars by parametric simulation (docs/methods.md §18): B times, add a fresh draw of each
 * statistic's own noise law to the released statistic, recompute every estimate; with q_lo and q_hi
 * the k-th smallest and k-th largest of the B recomputed values (k = floor(B a/2)), report the
 * percentile interval [q_lo, q_hi]. (The basic interval [2 v - q_hi, 2 v - q_lo] over-covered on
 * the penguins at epsilon 20: 91-93% at a nominal 90%, against 90.6-91.4% for the percentile
 * interval, test/curator/regression-coverage.test.ts.) A draw whose estimate
 * is unavailable counts as beyond both ends, so such draws can only widen the interval (or leave a
 * side unbounded). The noise draws are exact (CSPRNG); the recomputed values are ordered as
 * fixed-point integers at 2^-128, and each end is moved outward by one such unit.
 */
export function simulateIntervals(args: SimulationArgs): SimulatedInterval[] {
  const { released, laws, centre, estimate, draws, miss, bits } = args;
  if (released.length !== laws.length) throw new BadInputError("one noise law per released statistic");
  if (!Number.isSafeInteger(draws) || draws < 1 || draws > 100000) throw new BadInputError("draws must be a whole number from 1 to 100000");
  const k = tailRank(draws, miss);
  const samples: bigint[][] = centre.map(() => []);
  const failed: number[] = centre.map(() => 0);
  const stats = released.slice();
  for (let b = 0; b < draws; b++) {
    for (let i = 0; i < released.length; i++) stats[i] = released[i] + drawNoise(laws[i], bits);
    const est = estimate(stats);
    for (let s = 0; s < centre.length; s++) {
      const e = est[s];
      if (e === null) failed[s]++;
      else samples[s].push(e);
    }
  }
  const unit = Rational.of(1n, 1n << FIXED_BITS);
  return centre.map((v, s) => {
    if (v === null) return { value: null, low: null, high: null };
    const f = failed[s];
    const sorted = samples[s].sort((x, y) => (x < y ? -1 : x > y ? 1 : 0));
    // Unavailable draws sit below the smallest (for q_lo) and above the largest (for q_hi).
    const qLo = k <= f ? null : sorted[k - f - 1];
    const qHi = k <= f ? null : sorted[sorted.length - 1 - (k - f - 1)];
    // q_lo is at least its floor and q_hi at most its floor + 1 unit: the ends move outward.
    return {
      value: v,
      low: qLo === null ? null : unit.mul(qLo),
      high: qHi === null ? null : unit.mul(qHi + 1n),
    };
  });
}

/**
 * Coefficients in the columns' own units from coefficients of the integer codes. Each factor f
 * (other than the constant) codes its variable as x_f = scale_f z_f + shift_f, the response as
 * y = sy z_y + oy; a coded fit z_y = beta_0 + sum beta_f z_f is the fit
 * y = b_0 + sum b_f x_f with b_f = beta_f sy / scale_f and b_0 = beta_0 sy + oy - sum b_f shift_f.
 * `beta[0]` is the intercept; `scale`, `shift` are given for beta[1..].
 */
export function toColumnUnits(
  beta: readonly Rational[],
  scale: readonly Rational[],
  shift: readonly Rational[],
  sy: Rational,
  oy: Rational,
): Rational[] {
  const out: Rational[] = [Rational.ZERO];
  let b0 = beta[0].mul(sy).add(oy);
  for (let f = 1; f < beta.length; f++) {
    const b = beta[f].mul(sy).div(scale[f - 1]);
    out.push(b);
    b0 = b0.sub(b.mul(shift[f - 1]));
  }
  out[0] = b0;
  return out;
}
