/**
 * Quantiles by the exponential mechanism on the column's public grid (docs/methods.md §9, McSherry &
 * Talwar 2007; exact dyadic sampling in runtime/core, after Ilvento 2020).
 *
 * Ranks come from SQL: one GROUP BY over the kept rows gives the count of each grid value, and a
 * merge gives r(y_j) = #{x < y_j} for every candidate y_j. Missing values are left out.
 *
 * Sensitivity: for p = a/b the integer utility |b r(y) - a n| moves by at most max(a, b-a) when one
 * row is added or removed; a unit holds at most k rows, so by group privacy (docs/methods.md §1) the
 * mechanism runs at epsilon/k per row to be epsilon-DP per unit. Several p compose sequentially:
 * half the part's budget is split evenly among them.
 *
 * Value intervals (docs/methods.md §20): the other half buys one noisy dyadic tree over the same
 * buckets (runtime/core/quantile.ts noisyTree, quantileInterval); each quantile's low/high are the
 * values whose bucket could hold the true quantile at the release's confidence.
 */
import { CALIBRATION_DRAWS, Rational, treeDepth, treeSensitivity } from "../../core/index.js";
import type { ReleaseRow } from "../../protocol/messages.js";
import type { DataEngine, SchemaColumn } from "../engines/types.js";
import type { ColumnPolicy } from "../policy.js";
import { decimalOf } from "../sql.js";
import { type Allocator, type ExponentialSpec, exponentialRecord, mechanismRecord } from "./budget.js";
import { type Cpu, type Piece, type Source, fetchBuckets, rowsPerUnit } from "./common.js";
import type { QuantileRecipe } from "./finishers.js";

type NumericPolicy = Extract<ColumnPolicy, { type: "integer" | "number" }>;

/** Most candidates considered; a finer grid is thinned to every s-th grid point (public rule). */
export const MAX_CANDIDATES = 2001;

/** "p50", "p2.5", "p99.9" */
export function quantileStat(p: number): string {
  return `p${decimalOf(p).mul(Rational.of(100)).toDecimal(20)}`;
}

/** Candidate grid units: lower, lower + s, ..., and always the upper bound. */
export function candidates(c: NumericPolicy): bigint[] {
  const lo = c.grid.lowerUnits;
  const hi = c.grid.upperUnits;
  const span = hi - lo;
  const max = BigInt(MAX_CANDIDATES - 1);
  const stride = span <= max ? 1n : (span + max - 1n) / max;
  const out: bigint[] = [];
  for (let u = lo; u <= hi; u += stride) out.push(u);
  if (out[out.length - 1] !== hi) out.push(hi);
  return out;
}

export function quantilePiece(alloc: Allocator, src: Source, col: SchemaColumn, ps: readonly number[], fraction: Rational): Piece {
  const c = col.policy as NumericPolicy;
  const k = rowsPerUnit(src);
  const cand = candidates(c);
  // Budget (docs/methods.md §20): half to the exponential mechanism (split evenly among the
  // quantiles), half to one noisy dyadic tree of bucket counts that gives every quantile of the
  // release its value interval. Exact rationals; sequential composition adds them back to `fraction`.
  const half = fraction.div(Rational.of(2n));
  const each = half.div(Rational.of(ps.length));
  const parts: { p: Rational; stat: string; spec: ExponentialSpec; sensitivity: bigint }[] = ps.map((p) => {
    const pr = decimalOf(p);
    const stat = quantileStat(p);
    const spec = alloc.exponential(`${stat} of ${c.name}`, each);
    const a = pr.num;
    const b = pr.den;
    // Utility |b r - a n|: per row max(a, b-a), per unit k times that.
    const sensitivity = BigInt(k) * (a > b - a ? a : b - a);
    return { p: pr, stat, spec, sensitivity };
  });
  // Tree sensitivity: k rows per unit, L + 1 levels (treeSensitivity, docs/methods.md §20).
  const levels = treeDepth(cand.length) + 1;
  const treeSpec = alloc.additive(`value intervals of ${c.name}`, treeSensitivity(cand.length, k, alloc.family), half, Rational.ONE);
  const conf = alloc.confidence;
  // The mechanism runs at epsilon/k per row so that it is epsilon-DP per unit (file header).
  const recipe: QuantileRecipe = {
    column: c.name,
    candidates: cand,
    step: c.grid.step,
    parts: parts.map((x) => ({ p: x.p, stat: x.stat, epsilon: x.spec.epsilon.div(Rational.of(k)) })),
    treeLaw: treeSpec.law,
    confidence: conf,
  };
  const share = (r: Rational): string => `${r.toString()} ${alloc.unit === "rho" ? "rho" : "epsilon"}`;
  const notes = [
    `Quantiles of ${c.name} use the exponential mechanism over ${cand.length} public candidates on its grid (step ${c.step}${cand.length < Number(c.grid.upperUnits - c.grid.lowerUnits) + 1 ? ", thinned" : ""}); values are clamped to [${c.lower}, ${c.upper}] and missing values left out.`,
    `Value interval: a noisy dyadic tree of counts over the same ${cand.length} buckets (${levels} levels, ${treeSpec.law.family} noise, sensitivity ${treeSpec.sensitivity} rows) bounds the rank of every bucket; the interval is every value whose bucket could hold the quantile, with probability at least ${conf} (docs/methods.md §20). Its cuts are calibrated from the known law of the tree's noise (${CALIBRATION_DRAWS} simulated draws per prefix shape, order statistics; no data involved), so it is valid but close; on smooth data it still covers somewhat more often than ${conf}, because neighbouring buckets have nearly the same rank. It covers the quantile of the clamped, gridded values (the least value with at least a share p of the rows at or below it); the released value is the exponential mechanism's draw, moved to the nearer end of the interval when it falls outside (post-processing).`,
    `Budget split: the exponential mechanism gets ${share(parts.reduce((s, x) => s.add(x.spec.cost), Rational.ZERO))}${ps.length > 1 ? ` (shared evenly by the ${ps.length} quantiles)` : ""}, the tree for the value intervals ${share(treeSpec.cost)}.`,
    `Rank guarantee of the exponential mechanism: with probability at least ${conf}, beyond the best candidate's own distance, ${parts
      .map((x) => `${x.stat} has rank within ${rankBound(x, cand.length, conf)} rows of its target`)
      .join("; ")}.`,
  ];
  if (ps.length > 1) notes.push(`The ${ps.length} quantiles share their budget evenly (sequential composition); the one tree serves all their intervals.`);
  return {
    mechanisms: [
      ...parts.map((x) => exponentialRecord(x.spec, x.sensitivity, c.grid.step.mul(cand.length > 1 ? cand[1] - cand[0] : 1n))),
      mechanismRecord(treeSpec),
    ],
    cost: parts.reduce((s, x) => s.add(x.spec.cost), treeSpec.cost),
    halfWidths: [],
    notes,
    methods: [
      "quantiles: value interval from a noisy dyadic tree of bucket counts; cuts calibrated by order statistics of simulated draws of the noise law (miss/2 per side), union bound of proven tail bounds only when the miss is below 2/(draws + 1) (docs/methods.md §20)",
    ],
    size: ps.length,
    steps: 1,
    async run(engine: DataEngine, cpu: Cpu): Promise<ReleaseRow[]> {
      // Bucket b(x) = number of candidates <= x, so r(y_j) = #{x < y_j} = #{b(x) <= j}. With
      // candidates lo + j s (j < m - 1) and hi last: the engine computes b (engines/types.ts).
      const stride = cand.length > 1 ? cand[1] - cand[0] : 1n;
      const m = BigInt(cand.length);
      const counts = await fetchBuckets(engine, src, col, { lowerUnits: c.grid.lowerUnits, upperUnits: c.grid.upperUnits, stride, count: m });
      return cpu.finish("quantile", recipe, counts);
    },
  };
}

/**
 * Rank error bound of the exponential mechanism (McSherry & Talwar 2007; docs/methods.md §9):
 * utility within (2 Delta/eps)(ln m + ln(1/a)) of the best with probability >= 1 - a, in units of
 * |b r - a n|, so a rank error of that divided by b. Public (no data), rounded up for display:
 * binary64 here is display-only post-processing and runs in constant time.
 */
function rankBound(x: { p: Rational; spec: ExponentialSpec; sensitivity: bigint }, m: number, conf: number): string {
  const eps = x.spec.epsilon.toNumber();
  const u = ((2 * Number(x.sensitivity)) / eps) * (Math.log(m) + Math.log(1 / (1 - conf)));
  return String(Math.ceil(u / Number(x.p.den)));
}
