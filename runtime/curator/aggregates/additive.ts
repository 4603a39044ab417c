/**
 * Aggregates built from noisy exact sums, ungrouped or grouped by public keys: count, sum, mean,
 * variance and std. Every declared key is released (also keys absent from the data).
 *
 * Sensitivities, in grid units, under add/remove of one unit (docs/methods.md §7). Each unit keeps at
 * most k = maxRows rows in total (1 without a unit column), and each kept row falls in exactly one
 * group, so for the whole vector of groups:
 *   count:          L1 = L2 = k                      (a unit adds at most k to the cells, summed)
 *   sum:            L1 = L2 = k * M,  M = max(|L|,|U|)/g   (sumSensitivity)
 *   centred sum:    L1 = L2 = k * (U-L)/g  in half-units g/2, each row adding 2x - (L+U)/g
 *   centred squares:L1 = L2 = k * ((U-L)/g)^2 in quarter-units (g/2)^2  (docs/methods.md §8)
 * The L2 bound: a vector of non-negative per-cell changes summing to at most S has L2 norm <= S.
 * These are no larger than the L0 * Linf * M of docs/methods.md §7 with Linf = k, so bounding the
 * groups per unit (maxGroups) would not lower them: the total bound k is what is enforced.
 */
import { Rational, SEARCH_CELLS, sumSensitivity } from "../../core/index.js";
import type { GroupKey, Preview, ReleaseRow } from "../../protocol/messages.js";
import type { DataEngine, SchemaColumn } from "../engines/types.js";
import type { ColumnPolicy } from "../policy.js";
import { type Allocator, type NoisySpec, exactDecimal, halfWidthValue, mechanismRecord, sqrtRational } from "./budget.js";
import { type Cpu, type Piece, type Source, fetchCells, groupLabels, rowsPerUnit } from "./common.js";
import type { CellsRecipe, MeanRecipe, SpreadRecipe } from "./finishers.js";

type NumericPolicy = Extract<ColumnPolicy, { type: "integer" | "number" }>;
const HALF = Rational.of(1n, 2n);
const THIRD = Rational.of(1n, 3n);

function laws(specs: NoisySpec[]): string {
  return specs[0].law.family === "discrete-laplace" ? "discrete Laplace" : "discrete Gaussian";
}

function hw(spec: NoisySpec, stat: string, column: string | null, confidence: number): Preview["halfWidths"][number] {
  return { stat, column, halfWidth: exactDecimal(halfWidthValue(spec, confidence)) };
}

function groupedNote(keys: readonly GroupKey[], columns: string[], cells: number): string[] {
  if (keys.length === 0) return [];
  return [
    `All ${cells} declared key${cells === 1 ? "" : "s"} of ${columns.join(" x ")} are reported, including keys with no rows; rows with a missing ${columns.join(" or ")} are left out.`,
    `Each key's error bar has its own coverage (not simultaneous across keys).`,
  ];
}

/** Noisy count of kept rows per declared cell. */
export function countPiece(alloc: Allocator, src: Source, keys: readonly GroupKey[], fraction: Rational, stat = "count"): Piece {
  const { columns, labels, cells } = groupLabels(src, keys);
  const k = rowsPerUnit(src);
  // L1 = L2 = k for the whole count vector (see the file header).
  const spec = alloc.additive(keys.length === 0 ? "count" : `count by ${columns.join(", ")}`, BigInt(k), fraction, Rational.ONE);
  const conf = alloc.confidence;
  const h = halfWidthValue(spec, conf);
  const recipe: CellsRecipe = { labels, stat, column: null, law: spec.law, step: spec.step, h };
  return {
    mechanisms: [mechanismRecord(spec)],
    cost: spec.cost,
    halfWidths: [{ stat, column: null, halfWidth: exactDecimal(h) }],
    notes: groupedNote(keys, columns, cells),
    methods: [`count: released value ± the smallest half-width h with P(|${laws([spec])} noise| > h) <= ${round(1 - conf)} (exact tail)`],
    size: cells,
    steps: 1,
    async run(engine: DataEngine, cpu: Cpu): Promise<ReleaseRow[]> {
      const data = await fetchCells(engine, src, keys, [{ kind: "count" }]);
      return cpu.finish("cells", recipe, data);
    },
  };
}

/** Noisy clamped sum per declared cell. */
export function sumPiece(alloc: Allocator, src: Source, keys: readonly GroupKey[], col: SchemaColumn, fraction: Rational): Piece {
  const c = col.policy as NumericPolicy;
  const { columns, labels, cells } = groupLabels(src, keys);
  // L1 = L2 = k * max(|L|,|U|)/g in grid units (docs/methods.md §7 table, [C7.1]).
  const sens = sumSensitivity(c.grid, rowsPerUnit(src));
  const spec = alloc.additive(`sum of ${c.name}${keys.length ? ` by ${columns.join(", ")}` : ""}`, sens, fraction, c.grid.step);
  const conf = alloc.confidence;
  const h = halfWidthValue(spec, conf);
  const recipe: CellsRecipe = { labels, stat: "sum", column: c.name, law: spec.law, step: spec.step, h };
  return {
    mechanisms: [mechanismRecord(spec)],
    cost: spec.cost,
    halfWidths: [{ stat: "sum", column: c.name, halfWidth: exactDecimal(h) }],
    notes: groupedNote(keys, columns, cells),
    methods: [`sum: released value ± the smallest half-width h with P(|${laws([spec])} noise| > h) <= ${round(1 - conf)} (exact tail)`],
    size: cells,
    steps: 1,
    async run(engine: DataEngine, cpu: Cpu): Promise<ReleaseRow[]> {
      const data = await fetchCells(engine, src, keys, [{ kind: "sum", column: c.name }]);
      return cpu.finish("cells", recipe, data);
    },
  };
}

/** Mean per cell: noisy count of values and noisy centred sum, half the budget each; pivot interval (docs/methods.md §8). */
export function meanPiece(alloc: Allocator, src: Source, keys: readonly GroupKey[], col: SchemaColumn, fraction: Rational): Piece {
  const c = col.policy as NumericPolicy;
  const { columns, labels, cells } = groupLabels(src, keys);
  const k = BigInt(rowsPerUnit(src));
  const by = keys.length ? ` by ${columns.join(", ")}` : "";
  const half = c.grid.step.mul(HALF);
  // count of non-missing values: L1 = k; centred sum in half-units: L1 = k * (U-L)/g (file header).
  const count = alloc.additive(`count of ${c.name}${by} (for the mean)`, k, fraction.mul(HALF), Rational.ONE);
  const sum = alloc.additive(`centred sum of ${c.name}${by} (for the mean)`, k * (c.grid.upperUnits - c.grid.lowerUnits), fraction.mul(HALF), half);
  const conf = alloc.confidence;
  const lower = Rational.parse(c.lower);
  const upper = Rational.parse(c.upper);
  const centre = lower.add(upper).mul(HALF);
  const recipe: MeanRecipe = {
    labels, column: c.name, lowerUnits: c.grid.lowerUnits, upperUnits: c.grid.upperUnits, lower, upper, centre, half,
    confidence: conf, countLaw: count.law, sumLaw: sum.law,
  };
  return {
    mechanisms: [mechanismRecord(count), mechanismRecord(sum)],
    cost: count.cost.add(sum.cost),
    // In words and value units: the count in values, the sum in units of the column (its noise is
    // the same whatever centre the sum is taken about).
    halfWidths: [hw(count, "count (part of mean)", c.name, conf), hw(sum, `sum of ${c.name} (part of mean)`, c.name, conf)],
    ratioShape: { stat: "mean", column: c.name, lower, upper, centre, half, width: c.grid.upperUnits - c.grid.lowerUnits, confidence: conf, countLaw: count.law, sumLaw: sum.law },
    previewNotes: [
      `The mean's error bar depends on the noisy count of values, which is private, so it is given with the release. The half-widths shown are for the mean's two noisy parts: the count of ${c.name} values and the sum of ${c.name} (taken about ${exactDecimal(centre)}, in ${c.name}'s units).`,
    ],
    notes: [
      ...groupedNote(keys, columns, cells),
      `The mean of ${c.name} splits its budget evenly between a noisy count of values and a noisy sum centred at ${exactDecimal(centre)}.`,
      `A mean whose noisy count is not positive is reported as unavailable, with the declared range as its interval.`,
    ],
    methods: [`mean: pivot interval, the means m whose |noisy sum - m x noisy count| lies within the quantile of the joint noise law, within the declared range (docs/methods.md §8)`],
    size: cells,
    // Public size class for reply pacing (docs/methods.md §16): the pivot search costs up to about
    // 10 ms per cell when the noisy count is large and less when it is small, so the first reply
    // slot allows for it (one 50 ms step per 5 cells) and the reply time does not follow the count.
    steps: 1 + Math.ceil(cells / 5),
    async run(engine: DataEngine, cpu: Cpu): Promise<ReleaseRow[]> {
      const data = await fetchCells(engine, src, keys, [
        { kind: "present", column: c.name },
        { kind: "sum", column: c.name },
      ]);
      return cpu.finish("mean", recipe, data);
    },
  };
}

/** Variance or std per cell: noisy count, centred sum and centred sum of squares, a third each (docs/methods.md §8). */
export function spreadPiece(
  alloc: Allocator,
  src: Source,
  keys: readonly GroupKey[],
  col: SchemaColumn,
  fraction: Rational,
  stat: "variance" | "std",
): Piece {
  const c = col.policy as NumericPolicy;
  const { columns, labels, cells } = groupLabels(src, keys);
  const k = BigInt(rowsPerUnit(src));
  const by = keys.length ? ` by ${columns.join(", ")}` : "";
  const half = c.grid.step.mul(HALF);
  const width = c.grid.upperUnits - c.grid.lowerUnits;
  const part = fraction.mul(THIRD);
  // count: k; centred sum (half-units): k (U-L)/g; centred squares (quarter-units): k ((U-L)/g)^2.
  const count = alloc.additive(`count of ${c.name}${by} (for the ${stat})`, k, part, Rational.ONE);
  const sum = alloc.additive(`centred sum of ${c.name}${by} (for the ${stat})`, k * width, part, half);
  const squares = alloc.additive(`centred sum of squares of ${c.name}${by} (for the ${stat})`, k * width * width, part, half.mul(half));
  const conf = alloc.confidence;
  const lower = Rational.parse(c.lower);
  const upper = Rational.parse(c.upper);
  const centre = lower.add(upper).mul(HALF);
  const recipe: SpreadRecipe = {
    labels, column: c.name, lowerUnits: c.grid.lowerUnits, upperUnits: c.grid.upperUnits, lower, upper, centre, half,
    confidence: conf, stat, countLaw: count.law, sumLaw: sum.law, squaresLaw: squares.law,
  };
  return {
    mechanisms: [mechanismRecord(count), mechanismRecord(sum), mechanismRecord(squares)],
    cost: count.cost.add(sum.cost).add(squares.cost),
    halfWidths: [
      hw(count, `count (part of ${stat})`, c.name, conf),
      hw(sum, `sum of ${c.name} (part of ${stat})`, c.name, conf),
      hw(squares, `sum of squares of ${c.name} (part of ${stat}; squared units)`, c.name, conf),
    ],
    ratioShape: { stat, column: c.name, lower, upper, centre, half, width, confidence: conf, countLaw: count.law, sumLaw: sum.law, squaresLaw: squares.law },
    previewNotes: [
      `The ${stat}'s error bar depends on the noisy count of values, which is private, so it is given with the release. The half-widths shown are for its three noisy parts: the count of ${c.name} values, the sum of ${c.name} and the sum of its squares (both taken about ${exactDecimal(centre)}; the sum in ${c.name}'s units, the squares in squared units).`,
    ],
    notes: [
      ...groupedNote(keys, columns, cells),
      `The ${stat} of ${c.name} splits its budget in three equal parts: a noisy count, a noisy centred sum and a noisy centred sum of squares (centre ${exactDecimal(centre)}).`,
      `A ${stat} whose noisy count is not positive is reported as unavailable, with every value the range allows as its interval; a small noisy count gives a wide interval, never a narrow wrong one.`,
    ],
    methods: [`${stat}: pivot interval from the joint noise law of the three noisy parts, Q - 2mS + (m^2 - v)N, with the mean m in its own pivot interval (docs/methods.md §8)${cells > SEARCH_CELLS ? `; with ${cells} cells (more than ${SEARCH_CELLS}) its quantile is the union bound, wider but quick` : ""}${stat === "std" ? ", square-rooted" : ""}`],
    size: cells,
    // Public size class for reply pacing (docs/methods.md §16): the variance pivot's search costs
    // about 15 to 25 ms per cell with a large noisy count (one core of the bench machine; several
    // times that when the cores are shared) and far less with a small one, so the first slot allows
    // 16 steps per cell; above SEARCH_CELLS the quantile is the quick union bound. The cell count is
    // public, so the size class reveals nothing.
    steps: cells > SEARCH_CELLS ? 1 + Math.ceil(cells / 500) : 16 * cells,
    async run(engine: DataEngine, cpu: Cpu): Promise<ReleaseRow[]> {
      const data = await fetchCells(engine, src, keys, [
        { kind: "present", column: c.name },
        { kind: "sum", column: c.name },
        { kind: "sumSquares", column: c.name },
      ]);
      return cpu.finish("spread", recipe, data);
    },
  };
}

function round(x: number): string {
  return String(Number(x.toPrecision(6)));
}
