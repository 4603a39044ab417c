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
import { Rational, addNoise, exponentialQuantile, missOf, noisyTree, quantileInterval, ratioInterval, varianceInterval } from "../../core/index.js";
import type { Bits, NoiseLaw } from "../../core/index.js";
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

/** The finishers by name: what a worker may be asked to run. */
export interface Finishers {
  cells: (r: CellsRecipe, data: bigint[][], bits: Bits) => ReleaseRow[];
  mean: (r: MeanRecipe, data: bigint[][], bits: Bits) => ReleaseRow[];
  spread: (r: SpreadRecipe, data: bigint[][], bits: Bits) => ReleaseRow[];
  quantile: (r: QuantileRecipe, data: [bigint, bigint][], bits: Bits) => ReleaseRow[];
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
    const x = varianceInterval({ sumSquares: q, sum: s, count: n, sumStep: r.half, squareStep: r.half.mul(r.half), lower: r.lower, upper: r.upper, confidence: r.confidence });
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
    const iv = quantileInterval({ tree, m: r.candidates.length, p: x.p, law: r.treeLaw, miss, bits });
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

export const FINISHERS: Finishers = { cells, mean, spread, quantile, clamped };

/** A Cpu that runs the finishers on this thread with the given bits (tests that need reproducible noise). */
export function onThisThread(bits: Bits): Cpu {
  return {
    finish: async (name, recipe, data) => (FINISHERS[name] as (r: unknown, d: unknown, b: Bits) => ReleaseRow[])(recipe, data, bits),
  };
}
