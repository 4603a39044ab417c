/**
 * What every aggregate shares: the piece shape (prepared without data, run with data), and the
 * two requests they make of the data engine (engines/types.ts): exact sums per declared cell and
 * bucket counts on a column's grid. No SQL here: each engine builds its own.
 */
import type { RatioShape } from "./ratio-preview.js";
import type { Rational } from "../../core/index.js";
import { BadInputError } from "../../errors.js";
import { PLAN_LIMITS } from "../../protocol/limits.js";
import type { Condition, GroupKey, MechanismRecord, Preview, ReleaseRow } from "../../protocol/messages.js";
import type { CellTerm, DataEngine, DatasetSchema, SchemaColumn } from "../engines/types.js";
import { Params, compileGroup } from "../sql.js";
import type { Finishers } from "./finishers.js";

/** Where an aggregate's rows come from: a dataset (its public schema) and the plan's filter. */
export interface Source {
  t: DatasetSchema;
  where: Condition | undefined;
}

/** One part of a release: everything public is known at prepare time; `run` reads the data. */
export interface Piece {
  mechanisms: MechanismRecord[];
  cost: Rational;
  halfWidths: Preview["halfWidths"];
  notes: string[];
  /** Notes for a preview only (about what its half-widths are), not carried into releases. */
  previewNotes?: string[];
  /** Means, variances and std: what the expected error of the estimate itself needs (ratio-preview.ts). */
  ratioShape?: RatioShape;
  /** How the intervals of this piece are computed, in words. */
  methods: string[];
  /** Number of rows `run` returns, fixed by the plan and the policy (never by the data). */
  size: number;
  /** Rounds of SQL and CPU work `run` does (1, or one per part of a describe): public, for pacing. */
  steps: number;
  /** Reads the data (through the engine, which works on its own threads) and hands the CPU part to `cpu`. */
  run(engine: DataEngine, cpu: Cpu): Promise<ReleaseRow[]>;
}

/**
 * Where the CPU part of a release runs (finishers.ts): the curator's worker pool, so the message
 * loop never waits on noise or a quantile draw, or this thread with given bits (tests that need
 * reproducible noise).
 */
export interface Cpu {
  finish<K extends keyof Finishers>(name: K, recipe: Parameters<Finishers[K]>[0], data: Parameters<Finishers[K]>[1]): Promise<ReleaseRow[]>;
}

/** Rows per privacy unit after bounding (1 when each row is its own unit). */
export function rowsPerUnit(src: Source): number {
  return src.t.hasUnit ? src.t.dataset.unit.maxRows : 1;
}

/** Public key labels of each group key, and the declared number of cells (their product). */
export function groupLabels(src: Source, keys: readonly GroupKey[]): { columns: string[]; labels: string[][]; cells: number } {
  const ps = new Params();
  const specs = keys.map((k, i) => compileGroup(k, src.t, ps, `plan.groupBy[${i}]`));
  const cells = specs.reduce((n, s) => n * s.labels.length, 1);
  // Answerer.build refuses this first, from the key sizes alone; kept here (prepare time, before
  // any cell array or debit) so no piece can be built past the limit by another route.
  if (cells > PLAN_LIMITS.maxCells) {
    throw new BadInputError(`plan.groupBy: declares ${cells} cells, above the curator's limit of ${PLAN_LIMITS.maxCells} (maxCells)`);
  }
  return { columns: specs.map((s) => s.column), labels: specs.map((s) => s.labels), cells };
}

/** Every key tuple in row-major order (the last key varies fastest); [[]] with no keys. */
export function keyTuples(labels: readonly string[][]): string[][] {
  let out: string[][] = [[]];
  for (const l of labels) out = out.flatMap((prefix) => l.map((v) => [...prefix, v]));
  return out;
}

/**
 * Exact integers per declared cell (keyTuples order), one per term: what the engine computes over
 * the kept rows (engines/types.ts). Cells with no rows are zeros (every declared key is released,
 * so no output depends on which keys occur); rows whose key value is missing are left out.
 */
export function fetchCells(engine: DataEngine, src: Source, keys: readonly GroupKey[], terms: readonly CellTerm[]): Promise<bigint[][]> {
  return engine.cells({ dataset: src.t.dataset.name, where: src.where, keys, terms });
}

/**
 * Sorted (bucket, number of kept rows) pairs of a numeric column for the candidates
 * lower + j*stride (j < count - 1) and upper last (engines/types.ts BucketsRequest).
 */
export function fetchBuckets(
  engine: DataEngine,
  src: Source,
  col: SchemaColumn,
  grid: { lowerUnits: bigint; upperUnits: bigint; stride: bigint; count: bigint },
): Promise<[bigint, bigint][]> {
  return engine.buckets({ dataset: src.t.dataset.name, where: src.where, column: col.policy.name, ...grid });
}
