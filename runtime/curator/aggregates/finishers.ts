/**
 * The CPU part of every release, after the SQL: noise, intervals and the quantile draw. Each
 * finisher is a pure function of a recipe (settled from the plan and the policy, no data), the
 * exact integers the SQL returned, and a byte source. They run on the curator's worker threads
 * (workers/worker.ts), so they import only runtime/core and data-free helpers: never DuckDB, the
 * ledger or the service.
 *
 * Recipes and data cross the thread boundary by structured clone (workers/wire.ts keeps Rationals
 * exact); the formulas are the ones the pieces in additive.ts and quantile.ts document.
 */
import {
  Rational,
  SEARCH_CELLS,
  addNoise,
  correlationSquare,
  exponentialQuantile,
  rSquared,
  ratioInterval,
  FIXED_BITS,
  floorDivInt,
  isqrt,
  missOf,
  noisyTree,
  quantileInterval,
  simulateIntervals,
  solveNormal,
  solveNormalInt,
  toColumnUnits,
  varianceInterval,
} from "../../core/index.js";
import { Bits, type NoiseLaw } from "../../core/index.js";
import type { ReleaseRow } from "../../protocol/messages.js";
import { exactDecimal, sqrtRational } from "./budget.js";
import { type Cpu, keyTuples } from "./common.js";

/** One noisy integer per declared cell (count, sum; histogram and crosstab are counts). */
export interface CellsRecipe {
  labels: string[][];
  stat: string;
  column: string | null;
  law: NoiseLaw;
  /** Value of one unit of the noisy integer. */
  step: Rational;
  /** Half-width in value units (public, settled at prepare). */
  h: Rational;
}

/** Grid of a numeric column, as the mean and spread finishers need it. */
interface GridRecipe {
  labels: string[][];
  column: string;
  lowerUnits: bigint;
  upperUnits: bigint;
  lower: Rational;
  upper: Rational;
  centre: Rational;
  /** Half a grid step: the unit of centred sums. */
  half: Rational;
  confidence: number;
}

export interface MeanRecipe extends GridRecipe {
  countLaw: NoiseLaw;
  sumLaw: NoiseLaw;
}

export interface SpreadRecipe extends GridRecipe {
  stat: "variance" | "std";
  countLaw: NoiseLaw;
  sumLaw: NoiseLaw;
  squaresLaw: NoiseLaw;
}

export interface QuantileRecipe {
  column: string;
  /** Candidate grid units, ascending (public). */
  candidates: bigint[];
  step: Rational;
  parts: { p: Rational; stat: string; epsilon: Rational }[];
  /** Law of every node of the value-interval tree (docs/methods.md §20). */
  treeLaw: NoiseLaw;
  confidence: number;
}

/** Clamped shares (clamped.ts, docs/methods.md §21): per column a (below, above) pair law and a total law. */
export interface ClampedRecipe {
  columns: { column: string; pairLaw: NoiseLaw; totalLaw: NoiseLaw; hPair: Rational; hTotal: Rational }[];
  confidence: number;
}

/** One released entry G[a][b] of a moment matrix (regression.ts) and its noise law. */
export interface MomentEntry {
  a: number;
  b: number;
  law: NoiseLaw;
}

/** Regression or correlation from a noisy moment matrix (regression.ts, docs/methods.md §18, §19). */
export interface MomentsRecipe {
  kind: "regression" | "correlation";
  /** Number of factors (factor 0 the constant). */
  factors: number;
  /** The released entries, in the order of the SQL's integers. */
  entries: MomentEntry[];
  /** Entries equal to a released one (an indicator squared is the indicator's sum); the rest are 0. */
  alias: { a: number; b: number; from: number }[];
  confidence: number;
  /** 1 - confidence, exact. */
  miss: Rational;
  draws: number;
  /** Half-width of the noisy row count, in rows. */
  countH: Rational;
  /** Regression: the response column, its factor index, and the design terms (factor 0 first). */
  column: string | null;
  response: number;
  terms: { label: string; scale: Rational; shift: Rational }[];
  /** The response's code: y = responseScale z + responseShift. */
  responseScale: Rational;
  responseShift: Rational;
  /** Correlation: the pairs of factors. */
  pairs: { i: number; j: number; a: string; b: string }[];
}

/** The finishers by name: what a worker may be asked to run. */
export interface Finishers {
  cells: (r: CellsRecipe, data: bigint[][], bits: Bits) => ReleaseRow[];
  mean: (r: MeanRecipe, data: bigint[][], bits: Bits) => ReleaseRow[];
  spread: (r: SpreadRecipe, data: bigint[][], bits: Bits) => ReleaseRow[];
  quantile: (r: QuantileRecipe, data: [bigint, bigint][], bits: Bits) => ReleaseRow[];
  moments: (r: MomentsRecipe, data: bigint[][], bits: Bits) => ReleaseRow[];
  clamped: (r: ClampedRecipe, data: bigint[], bits: Bits) => ReleaseRow[];
}
export type FinisherName = keyof Finishers;

/**
 * Centred sums from plain ones, in exact integers: with C2 = L/g + U/g (twice the centre, in grid
 * units) each row contributes d = 2x - C2 half-units, so sum d = 2 S - C2 N and
 * sum d^2 = 4 Q - 4 C2 S + C2^2 N. SQL only computes count, sum and sum of squares of grid units.
 */
function centred(r: GridRecipe, n: bigint, s: bigint, q = 0n): { d: bigint; d2: bigint } {
  const c2 = r.lowerUnits + r.upperUnits;
  return { d: 2n * s - c2 * n, d2: 4n * q - 4n * c2 * s + c2 * c2 * n };
}

function cells(r: CellsRecipe, data: bigint[][], bits: Bits): ReleaseRow[] {
  const tuples = keyTuples(r.labels);
  return data.map((v, i) => {
    const value = r.step.mul(addNoise(v[0], r.law, bits));
    return { key: tuples[i], stat: r.stat, column: r.column, value: exactDecimal(value), low: exactDecimal(value.sub(r.h)), high: exactDecimal(value.add(r.h)) };
  });
}

/** data rows: [count of values, sum of grid units]. */
function mean(r: MeanRecipe, data: bigint[][], bits: Bits): ReleaseRow[] {
  const tuples = keyTuples(r.labels);
  return data.map((v, i) => {
    const n = { noisy: addNoise(v[0], r.countLaw, bits), law: r.countLaw };
    const s = { noisy: addNoise(centred(r, v[0], v[1]).d, r.sumLaw, bits), law: r.sumLaw };
    const x = ratioInterval({ sum: s, count: n, sumStep: r.half, lower: r.lower, upper: r.upper, confidence: r.confidence, centre: r.centre });
    return {
      key: tuples[i],
      stat: "mean",
      column: r.column,
      value: x.estimate === null ? null : exactDecimal(x.estimate),
      low: exactDecimal(x.estimate === null ? r.lower : x.low),
      high: exactDecimal(x.estimate === null ? r.upper : x.high),
    };
  });
}

/** data rows: [count of values, sum of grid units, sum of their squares]. */
function spread(r: SpreadRecipe, data: bigint[][], bits: Bits): ReleaseRow[] {
  const tuples = keyTuples(r.labels);
  const width = r.upper.sub(r.lower).mul(Rational.of(1n, 2n));
  const maxVar = width.mul(width);
  return data.map((v, i) => {
    const cs = centred(r, v[0], v[1], v[2]);
    const n = { noisy: addNoise(v[0], r.countLaw, bits), law: r.countLaw };
    const s = { noisy: addNoise(cs.d, r.sumLaw, bits), law: r.sumLaw };
    const q = { noisy: addNoise(cs.d2, r.squaresLaw, bits), law: r.squaresLaw };
    // The cell count is public: large releases take the union-bound quantile (intervals.ts SEARCH_CELLS).
    const search = data.length <= SEARCH_CELLS;
    const x = varianceInterval({ sumSquares: q, sum: s, count: n, sumStep: r.half, squareStep: r.half.mul(r.half), lower: r.lower, upper: r.upper, confidence: r.confidence, search });
    const est = x.estimate;
    const low = est === null ? Rational.ZERO : x.low;
    const high = est === null ? maxVar : x.high;
    if (r.stat === "variance") {
      return { key: tuples[i], stat: r.stat, column: r.column, value: est === null ? null : exactDecimal(est), low: exactDecimal(low), high: exactDecimal(high) };
    }
    return {
      key: tuples[i],
      stat: r.stat,
      column: r.column,
      value: est === null ? null : exactDecimal(sqrtRational(est, 12, "down")),
      low: exactDecimal(sqrtRational(low, 12, "down")),
      high: exactDecimal(sqrtRational(high, 12, "up")),
    };
  });
}

/**
 * data: sorted (bucket, rows) pairs, bucket b(x) = number of candidates <= x, so
 * r(y_j) = #{x < y_j} = #{b(x) <= j} (quantile.ts explains the buckets).
 */
/** Fresh CSPRNG bits for the quantile calibration only (rankCuts), one stream per thread. */
const calibrationBits = new Bits();

function quantile(r: QuantileRecipe, data: [bigint, bigint][], bits: Bits): ReleaseRow[] {
  const m = BigInt(r.candidates.length);
  const below: bigint[] = [];
  let i = 0;
  let acc = 0n;
  for (let j = 0n; j < m; j++) {
    while (i < data.length && data[i][0] <= j) acc += data[i++][1];
    below.push(acc);
  }
  let n = acc;
  while (i < data.length) n += data[i++][1];
  // Counts per bucket 1..m (index 0 = bucket 1), for the value-interval tree.
  const perBucket: bigint[] = Array.from({ length: r.candidates.length }, () => 0n);
  for (const [bucket, rows] of data) if (bucket >= 1n && bucket <= m) perBucket[Number(bucket) - 1] += rows;
  const tree = noisyTree(perBucket, r.treeLaw, bits);
  const miss = missOf(r.confidence);
  const last = r.candidates.length - 1;
  return r.parts.map((x) => {
    const drawn = exponentialQuantile({ countsBelow: below, n, p: x.p, epsilon: x.epsilon, bits });
    // Bucket i holds values in [candidates[i-1], candidates[i]); the last bucket holds the upper
    // bound only. Values are whole grid units, so the interval ends one unit below candidates[high].
    // The calibration (docs/methods.md §20) draws from its own CSPRNG stream, never from the
    // release's: its draws are cached per law, so taking them from `bits` would make what a release
    // draws next depend on which laws this thread has met before.
    const iv = quantileInterval({ tree, m: r.candidates.length, p: x.p, law: r.treeLaw, miss, bits: calibrationBits });
    const lowUnits = r.candidates[iv.lowBucket - 1];
    const highUnits = iv.highBucket <= last ? r.candidates[iv.highBucket] - 1n : r.candidates[last];
    // The draw is moved into the interval when it falls outside (post-processing of two private
    // outputs): when the interval holds the quantile, this never moves the value away from it.
    // It matters where the rank utility is flat across a gap (all candidates in the gap tie).
    const drawnUnits = r.candidates[drawn.index];
    const shown = drawnUnits < lowUnits ? lowUnits : drawnUnits > highUnits ? highUnits : drawnUnits;
    return {
      key: [],
      stat: x.stat,
      column: r.column,
      value: exactDecimal(r.step.mul(shown)),
      low: exactDecimal(r.step.mul(lowUnits)),
      high: exactDecimal(r.step.mul(highUnits)),
    };
  });
}

/** data: per column [rows below lower, rows above upper, rows with a value], flattened. */
function clamped(r: ClampedRecipe, data: bigint[], bits: Bits): ReleaseRow[] {
  const out: ReleaseRow[] = [];
  r.columns.forEach((c, i) => {
    const below = addNoise(data[3 * i], c.pairLaw, bits);
    const above = addNoise(data[3 * i + 1], c.pairLaw, bits);
    const total = addNoise(data[3 * i + 2], c.totalLaw, bits);
    const count = (stat: string, v: bigint, h: Rational): ReleaseRow => {
      const x = Rational.of(v);
      return { key: [], stat, column: c.column, value: exactDecimal(x), low: exactDecimal(x.sub(h)), high: exactDecimal(x.add(h)) };
    };
    const share = (stat: string, v: bigint): ReleaseRow => {
      const x = ratioInterval({ sum: { noisy: v, law: c.pairLaw }, count: { noisy: total, law: c.totalLaw }, sumStep: Rational.ONE, lower: Rational.ZERO, upper: Rational.ONE, confidence: r.confidence });
      return { key: [], stat, column: c.column, value: x.estimate === null ? null : exactDecimal(x.estimate), low: exactDecimal(x.low), high: exactDecimal(x.high) };
    };
    out.push(count("below lower", below, c.hPair), count("above upper", above, c.hPair), count("values", total, c.hTotal));
    out.push(share("share below lower", below), share("share above upper", above));
  });
  return out;
}


/** The full symmetric moment matrix from the released entries (structural zeros and aliases filled in). */
function momentMatrix(r: MomentsRecipe, stats: readonly bigint[]): bigint[][] {
  const g: bigint[][] = Array.from({ length: r.factors }, () => new Array<bigint>(r.factors).fill(0n));
  r.entries.forEach((e, i) => {
    g[e.a][e.b] = stats[i];
    g[e.b][e.a] = stats[i];
  });
  for (const x of r.alias) {
    g[x.a][x.b] = stats[x.from];
    g[x.b][x.a] = stats[x.from];
  }
  return g;
}

function gcd(a: bigint, b: bigint): bigint {
  a = a < 0n ? -a : a;
  b = b < 0n ? -b : b;
  while (b !== 0n) [a, b] = [b, a % b];
  return a;
}

/** Integers P_i and one D > 0 with x_i = P_i / D. */
function commonDenominator(xs: readonly Rational[]): { nums: bigint[]; den: bigint } {
  const den = xs.reduce((d, x) => (d / gcd(d, x.den)) * x.den, 1n);
  return { nums: xs.map((x) => x.num * (den / x.den)), den };
}

/**
 * The regression's estimates from one vector of statistics, as floor(x 2^FIXED_BITS), in integers
 * only (the simulation's inner loop). With beta_f = N_f/det (solveNormalInt), constants
 * c_f = sy/scale_f, e_f = sy shift_f/scale_f over one denominator D:
 *   b_f = N_f c_f / det,  b_0 = (N_0 sy + oy det - sum_f N_f e_f) / det,
 *   R^2 = 1 - (SSE det) n / (det (SST n)),  SSE det = yy det - sum_f N_f G[f][y],  SST n = yy n - G[0][y]^2.
 */
function regressionFixed(r: MomentsRecipe, design: number[], y: number): (stats: readonly bigint[]) => (bigint | null)[] {
  const terms = r.terms.slice(1);
  const consts = commonDenominator([
    r.responseScale,
    r.responseShift,
    ...terms.map((t) => r.responseScale.div(t.scale)),
    ...terms.map((t) => r.responseScale.mul(t.shift).div(t.scale)),
  ]);
  const D = consts.den;
  const SY = consts.nums[0];
  const OY = consts.nums[1];
  const C = consts.nums.slice(2, 2 + terms.length);
  const E = consts.nums.slice(2 + terms.length);
  const none = [...design.map(() => null), null];
  return (stats) => {
    const g = momentMatrix(r, stats);
    const x = solveNormalInt(g, design, y);
    if (x === null) return none;
    const { num: N, det } = x;
    const den = D * det;
    const out: (bigint | null)[] = [];
    let b0 = N[0] * SY + OY * det;
    for (let f = 1; f < N.length; f++) b0 -= N[f] * E[f - 1];
    out.push(floorDivInt(b0 << FIXED_BITS, den));
    for (let f = 1; f < N.length; f++) out.push(floorDivInt((N[f] * C[f - 1]) << FIXED_BITS, den));
    const n = g[0][0];
    const yy = g[y][y];
    const sstN = yy * n - g[0][y] * g[0][y];
    if (n <= 0n || sstN <= 0n) {
      out.push(null);
      return out;
    }
    let sseDet = yy * det;
    design.forEach((f, i) => {
      sseDet -= N[i] * g[f][y];
    });
    const whole = det * sstN;
    const one = 1n << FIXED_BITS;
    const r2 = floorDivInt((whole - sseDet * n) << FIXED_BITS, whole);
    out.push(r2 < 0n ? 0n : r2 > one ? one : r2);
    return out;
  };
}

/**
 * Correlations from one vector of statistics as floor-ish(r 2^FIXED_BITS) (isqrt of the exact
 * c^2 4^P/(v_i v_j); within one unit of the floor), null where a variance or the count is not positive.
 */
function correlationFixed(r: MomentsRecipe): (stats: readonly bigint[]) => (bigint | null)[] {
  const one = 1n << FIXED_BITS;
  return (stats) => {
    const g = momentMatrix(r, stats);
    const n = g[0][0];
    return r.pairs.map(({ i, j }) => {
      if (n <= 0n) return null;
      const vi = n * g[i][i] - g[0][i] * g[0][i];
      const vj = n * g[j][j] - g[0][j] * g[0][j];
      if (vi <= 0n || vj <= 0n) return null;
      const c = n * g[i][j] - g[0][i] * g[0][j];
      let mag = isqrt(((c * c) << (2n * FIXED_BITS)) / (vi * vj));
      if (mag > one) mag = one;
      return c < 0n ? -mag - 1n : mag;
    });
  };
}

/** Significant digits of regression and correlation figures; low ends are rounded down, high ends up. */
const FIGURE_DIGITS = 12;

/** A decimal with FIGURE_DIGITS significant digits (at most 40 fraction digits), rounded in direction dir. */
function figure(x: Rational, dir: "down" | "up" | "near"): string {
  const a = x.abs();
  if (a.isZero()) return "0";
  // digits of the integer part of |x| (0 when |x| < 1), then fraction digits to reach 12 significant.
  const whole = a.floor();
  let frac = whole > 0n ? FIGURE_DIGITS - whole.toString().length : FIGURE_DIGITS;
  if (whole === 0n) {
    let lead = 0;
    let t = a;
    while (t.lt(Rational.of(1n, 10n)) && lead < 40) {
      t = t.mul(10n);
      lead++;
    }
    frac += lead;
  }
  frac = Math.max(0, Math.min(40, frac));
  const scale = 10n ** BigInt(frac);
  const scaled = x.mul(scale);
  const n = dir === "down" ? scaled.floor() : dir === "up" ? scaled.ceil() : scaled.add(Rational.of(1n, 2n)).floor();
  return exactDecimal(Rational.of(n, scale));
}

/**
 * The mechanism of a regression or correlation: each released entry plus one exact draw of its own
 * noise law (the privacy-relevant step; everything after it is post-processing). data: one row.
 */
export function noisyMoments(r: MomentsRecipe, data: bigint[][], bits: Bits): bigint[] {
  if (data.length !== 1 || data[0].length !== r.entries.length) throw new Error("internal: one SQL integer per released entry");
  return r.entries.map((e, i) => addNoise(data[0][i], e.law, bits));
}

/**
 * Regression or correlation (regression.ts): add each entry's noise, compute the estimates exactly
 * from the noisy moment matrix, and their error bars by simulation (core/regression.ts).
 * data: one row, the released entries' true integers.
 */
function moments(r: MomentsRecipe, data: bigint[][], bits: Bits): ReleaseRow[] {
  const released = noisyMoments(r, data, bits);
  const laws = r.entries.map((e) => e.law);
  const n = released[0];
  const countRow = (key: (string | null)[]): ReleaseRow => ({
    key,
    stat: "count",
    column: null,
    value: String(n),
    low: exactDecimal(Rational.of(n).sub(r.countH)),
    high: exactDecimal(Rational.of(n).add(r.countH)),
  });
  const sim = { released, laws, draws: r.draws, miss: r.miss, bits };
  if (r.kind === "regression") {
    const design = r.terms.map((_, i) => i);
    const y = r.terms.length;
    const exact = (stats: readonly bigint[]): (Rational | null)[] => {
      const g = momentMatrix(r, stats);
      const beta = solveNormal(g, design, y);
      if (beta === null) return [...design.map(() => null), null];
      const coef = toColumnUnits(
        beta,
        r.terms.slice(1).map((t) => t.scale),
        r.terms.slice(1).map((t) => t.shift),
        r.responseScale,
        r.responseShift,
      );
      return [...coef, rSquared(g, design, y, beta)];
    };
    const out = simulateIntervals({ ...sim, centre: exact(released), estimate: regressionFixed(r, design, y) });
    const rows: ReleaseRow[] = r.terms.map((t, i) => ({
      key: [t.label],
      stat: "coefficient",
      column: r.column,
      value: out[i].value === null ? null : figure(out[i].value!, "near"),
      low: out[i].low === null ? null : figure(out[i].low!, "down"),
      high: out[i].high === null ? null : figure(out[i].high!, "up"),
    }));
    const r2 = out[r.terms.length];
    const clamp = (x: Rational | null) => (x === null ? null : x.max(Rational.ZERO).min(Rational.ONE));
    rows.push({
      key: ["(fit)"],
      stat: "r2",
      column: r.column,
      value: r2.value === null ? null : figure(r2.value, "near"),
      low: r2.low === null ? null : figure(clamp(r2.low)!, "down"),
      high: r2.high === null ? null : figure(clamp(r2.high)!, "up"),
    });
    rows.push(countRow(["(rows)"]));
    return rows;
  }
  // r = sign(s) sqrt(|s|) from the exact signed square s, to 15 fraction digits (toward 0).
  const corr = (s: Rational | null): Rational | null => {
    if (s === null) return null;
    const mag = sqrtRational(s.abs(), 15, "down");
    return s.sign() < 0 ? mag.neg() : mag;
  };
  const g0 = momentMatrix(r, released);
  const out = simulateIntervals({ ...sim, centre: r.pairs.map((p) => corr(correlationSquare(g0, p.i, p.j))), estimate: correlationFixed(r) });
  const within = (x: Rational) => x.max(Rational.ONE.neg()).min(Rational.ONE);
  const rows: ReleaseRow[] = r.pairs.map((p, i) => {
    const o = out[i];
    return {
      key: [p.a, p.b],
      stat: "correlation",
      column: null,
      value: o.value === null ? null : figure(o.value, "near"),
      // A side left unbounded by unavailable draws is the end of the range [-1, 1].
      low: o.value === null ? null : o.low === null ? "-1" : figure(within(o.low), "down"),
      high: o.value === null ? null : o.high === null ? "1" : figure(within(o.high), "up"),
    };
  });
  rows.push(countRow(["(rows)", "(rows)"]));
  return rows;
}

export const FINISHERS: Finishers = { cells, mean, spread, quantile, moments, clamped };

/** A Cpu that runs the finishers on this thread with the given bits (tests that need reproducible noise). */
export function onThisThread(bits: Bits): Cpu {
  return {
    finish: async (name, recipe, data) => (FINISHERS[name] as (r: unknown, d: unknown, b: Bits) => ReleaseRow[])(recipe, data, bits),
  };
}
