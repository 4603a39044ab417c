/**
 * Clamped shares (docs/methods.md §21): for each listed numeric column, how many kept rows had a
 * raw value below the declared lower bound or above the upper bound (values are clamped to the
 * range by the engine, which keeps a flag per row: engines/types.ts atLower, atUpper), how many rows have a value at all, and the
 * two shares. An analyst sees when a range is too narrow, and so how far clamping may bias the
 * other answers. It is a release like any other: charged, with its cost stated in the notes.
 *
 * Sensitivities under add/remove of one unit of at most k kept rows:
 *   (below, above): each row is in at most one of the two, so L1 = L2 = k for the pair;
 *   total (rows with a value): L1 = L2 = k.
 * Per column the budget is split evenly between the pair and the total; columns share the
 * release's budget evenly (sequential composition; the same rows feed every column).
 * Shares are post-processing: count / total by the corner method of §8 with bounds [0, 1].
 *
 * Rows: key [], column = the column, stats "below lower", "above upper", "values" (counts) and
 * "share below lower", "share above upper" (fractions).
 */
import { Rational } from "../../core/index.js";
import type { ReleaseRow } from "../../protocol/messages.js";
import type { CellTerm, DataEngine, SchemaColumn } from "../engines/types.js";
import type { ColumnPolicy } from "../policy.js";
import { type Allocator, exactDecimal, halfWidthValue, mechanismRecord } from "./budget.js";
import { type Cpu, type Piece, type Source, fetchCells, rowsPerUnit } from "./common.js";
import type { ClampedRecipe } from "./finishers.js";

type NumericPolicy = Extract<ColumnPolicy, { type: "integer" | "number" }>;

/** Rows released per column. */
export const CLAMPED_ROWS_PER_COLUMN = 5;

export function clampedPiece(alloc: Allocator, src: Source, cols: readonly SchemaColumn[], fraction: Rational): Piece {
  const k = BigInt(rowsPerUnit(src));
  const each = fraction.div(Rational.of(BigInt(cols.length)));
  const half = each.div(Rational.of(2n));
  const conf = alloc.confidence;
  const parts = cols.map((col) => {
    const c = col.policy as NumericPolicy;
    if (col.flag === undefined) throw new Error(`internal: column ${c.name} has no clamping flag`);
    // (below, above): a row is in at most one, so a unit moves the pair by at most k (L1 and L2).
    const pair = alloc.additive(`values of ${c.name} clamped below ${c.lower} / above ${c.upper}`, k, half, Rational.ONE);
    const total = alloc.additive(`rows with a value of ${c.name}`, k, half, Rational.ONE);
    return { col, c, flag: col.flag, pair, total };
  });
  const recipe: ClampedRecipe = {
    columns: parts.map((x) => ({ column: x.c.name, pairLaw: x.pair.law, totalLaw: x.total.law, hPair: halfWidthValue(x.pair, conf), hTotal: halfWidthValue(x.total, conf) })),
    confidence: conf,
  };
  const cost = parts.reduce((s, x) => s.add(x.pair.cost).add(x.total.cost), Rational.ZERO);
  const unit = alloc.unit === "rho" ? "ρ" : "ε";
  const notes = [
    `Clamped shares cost ${unit} ${cost.toString()} of your cap (a release of its own, charged like any other).`,
    ...parts.map(
      (x) =>
        `${x.c.name}: rows whose raw value lay below ${x.c.lower} or above ${x.c.upper} (clamped to the range before every other answer; a value exactly at a bound is not clamped), counted among the kept rows with a value; sensitivity ${k} for the pair of counts and ${k} for the total, each with half of the column's share of the budget.`,
    ),
    `A large share means the declared range is too narrow for the data: answers about that column are then biased towards its bounds, and no error bar includes that bias.`,
  ];
  if (cols.length > 1) notes.push(`The ${cols.length} columns share the budget evenly (sequential composition).`);
  return {
    mechanisms: parts.flatMap((x) => [mechanismRecord(x.pair), mechanismRecord(x.total)]),
    cost,
    halfWidths: parts.flatMap((x) => [
      { stat: "below lower", column: x.c.name, halfWidth: exactDecimal(halfWidthValue(x.pair, conf)) },
      { stat: "above upper", column: x.c.name, halfWidth: exactDecimal(halfWidthValue(x.pair, conf)) },
      { stat: "values", column: x.c.name, halfWidth: exactDecimal(halfWidthValue(x.total, conf)) },
    ]),
    notes,
    methods: [
      "clamped counts: released value ± the smallest half-width with the noise's exact tail at the stated confidence; shares: pivot method (docs/methods.md §8, §21) on count / total within [0, 1]",
    ],
    size: CLAMPED_ROWS_PER_COLUMN * cols.length,
    steps: 1,
    async run(engine: DataEngine, cpu: Cpu): Promise<ReleaseRow[]> {
      // One scan: per column, rows clamped below, rows clamped above, and rows with a value
      // (engines/types.ts atLower/atUpper/present). Every column is counted whatever the data.
      const terms: CellTerm[] = parts.flatMap((x) => [
        { kind: "atLower" as const, column: x.c.name },
        { kind: "atUpper" as const, column: x.c.name },
        { kind: "present" as const, column: x.c.name },
      ]);
      const [cells] = await fetchCells(engine, src, [], terms);
      return cpu.finish("clamped", recipe, cells);
    },
  };
}
