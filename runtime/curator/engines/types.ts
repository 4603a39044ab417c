/**
 * The engine boundary: what the answering code (answer.ts, aggregates/) asks of a data engine.
 *
 * No SQL crosses this boundary. An aggregate says WHAT it needs (exact integer sums per declared
 * cell, or bucket counts on a column's grid) in terms of the plan's public names (dataset, filter,
 * group keys, columns); each engine turns that into its own dialect's parameterised SQL and runs
 * every row-level step itself:
 *
 *   - typing each value by the declared schema (a value that does not fit is missing),
 *   - clamping numbers to the declared range and rounding them to the grid (grid units, BIGINT),
 *   - per-unit bounding: a privacy unit contributes at most maxRows rows, chosen independently of
 *     the values (a random order of the unit's rows, fixed when the engine opens),
 *   - filtering with data-independent work: a filter becomes a flag over every row, never a smaller
 *     scan, so the SQL's work does not follow how many rows match (issue 9),
 *   - grouping by the declared keys (category values, booleans, equal-width bins).
 *
 * Only aggregates leave an engine. Results are exact integers (bigint) in grid units, so the noise,
 * the ledger and the signing stay in the curator whatever engine holds the data.
 *
 * Implementations: engines/duckdb/ (DuckDB in memory, files in place, a prepared DuckDB file) and
 * engines/postgres/ (a PostgreSQL table or view, one server or hash-partitioned shards). The SQL
 * that both dialects share (conditions, group keys, bins, the bounded-rows shape) is in
 * engines/sql.ts with a small Dialect hook. engines/open.ts picks the implementation for each
 * dataset from its policy `source`.
 */
import type { Condition, GroupKey } from "../../protocol/messages.js";
import type { DatasetPolicy, LoadedPolicy } from "../policy.js";

/**
 * One exact integer per declared cell. Columns are the plan's public column names (numeric ones
 * for every term but count/present); values are in the column's grid units after clamping.
 */
export type CellTerm =
  /** Kept rows in the cell. */
  | { kind: "count" }
  /** Kept rows whose value of `column` is not missing. */
  | { kind: "present"; column: string }
  /** Sum of the column's grid units over kept rows (missing values add nothing). */
  | { kind: "sum"; column: string }
  /** Sum of squared grid units. */
  | { kind: "sumSquares"; column: string }
  /** Sum of a*b in grid units over kept rows where both are present. */
  | { kind: "sumProduct"; a: string; b: string }
  /**
   * Kept rows whose raw value was clamped at the declared bound: below the lower bound (atLower)
   * or above the upper bound (atUpper). A value exactly at a bound is not clamped.
   */
  | { kind: "atLower" | "atUpper"; column: string }
  /**
   * Sum of the product of two integer codes over kept rows on which every column of `complete` is
   * present: the moments of a regression or correlation (docs/methods.md §18, §19).
   */
  | { kind: "moment"; a: MomentCode; b: MomentCode; complete: readonly string[] };

/**
 * An integer code of a row, for `moment` terms. `one`: 1. `centred`: 2u - twiceCentre, u the
 * numeric column's grid units (so the code is centred on the middle of the declared range when
 * twiceCentre = lowerUnits + upperUnits). `level`: 1 when the category column holds its declared
 * value number `index` (0-based), else 0. `truth`: 1 when the boolean column equals `value`, else 0.
 * Every constant here is an integer the curator computed from the policy, never text from a plan.
 */
export type MomentCode =
  | { kind: "one" }
  | { kind: "centred"; column: string; twiceCentre: bigint }
  | { kind: "level"; column: string; index: number }
  | { kind: "truth"; column: string; value: boolean };

export interface CellsRequest {
  dataset: string;
  /** The plan's filter (already validated against the schema at prepare time). */
  where?: Condition;
  /** Group keys as in the plan; their declared cells are enumerated in row-major order. */
  keys: readonly GroupKey[];
  terms: readonly CellTerm[];
}

/**
 * Candidate buckets on a numeric column's grid: candidates are y_j = lowerUnits + j*stride for
 * j < count - 1, and upperUnits last. A kept value x falls in bucket b(x) = #{ j : y_j <= x }
 * (0..count), so r(y_j) = #{x < y_j} = #{b(x) <= j}.
 */
export interface BucketsRequest {
  dataset: string;
  where?: Condition;
  column: string;
  lowerUnits: bigint;
  upperUnits: bigint;
  stride: bigint;
  count: bigint;
}

/** Steward-only facts about a dataset at start. Never sent to analysts. */
export interface LoadReport {
  /** Rows loaded (null when the engine does not count rows at start, e.g. files in place). */
  rows: number | null;
  /** Rows left out at load (0 in place: values that do not fit are missing at query time). */
  rejected: number;
  reasons: Record<string, number>;
}

export interface DataEngine {
  /** Whether this engine answers for the dataset (it opened it). */
  hasDataset(dataset: string): boolean;
  loadReport(dataset: string): LoadReport;
  /**
   * One vector of exact integers per declared cell (keyTuples order: the last key varies fastest),
   * terms in request order. Cells with no kept rows are zeros; rows whose group value is missing
   * are left out. Refuses (throws) without revealing any data value.
   */
  cells(req: CellsRequest): Promise<bigint[][]>;
  /** Sorted [bucket, kept rows] pairs; rows with a missing value are left out; a bucket with no kept rows may be 0 or absent. */
  buckets(req: BucketsRequest): Promise<[bigint, bigint][]>;
  close(): Promise<void>;
}

export interface OpenOptions {
  /** Datasets to open (default: those of the policy this engine kind serves). */
  datasets?: readonly DatasetPolicy[];
  /** No progress lines on stderr. */
  quiet?: boolean;
  /** Random bits for the per-unit order (tests); default: the CSPRNG. */
  bits?: import("../../core/index.js").Bits;
  /**
   * Where an engine may keep what it works out at start for the next start (DuckDB in place: the
   * per-unit order); default: the folder `in-place` beside the ledger; null: nothing kept.
   */
  cacheDir?: string | null;
}

/** Opens one engine over the given datasets (all of one source kind family). */
export type EngineOpener = (policy: LoadedPolicy, opts: OpenOptions & { datasets: readonly DatasetPolicy[] }) => Promise<DataEngine>;

// ---- shared by the SQL engines (engines/sql.ts, engines/shapes.ts) ------------------------------

/** A value bound to a `$n` placeholder. */
export type SqlParam =
  | { type: "bigint"; value: bigint }
  | { type: "integer"; value: number }
  | { type: "varchar"; value: string }
  | { type: "boolean"; value: boolean };

/**
 * A declared column as the SQL engines store or present it: `ident` is its positional internal
 * name ("c3" for the fourth declared column), so no name from a plan or the policy reaches SQL.
 * Every SQL engine presents a dataset as a relation with these columns:
 *   c<i>  numeric: BIGINT grid units clamp(round(x / step)); category: the index of the value in
 *         the declared list; date: DATE; boolean: BOOLEAN. NULL when missing.
 *   k<i>  numeric only: -1 when the raw value was below the lower bound, 1 above the upper bound,
 *         0 otherwise (NULL when missing): the clamping flags for atLower/atUpper.
 * plus the per-unit bounding columns named by the engine's Bounding (shapes.ts).
 */
export interface SchemaColumn {
  policy: import("../policy.js").ColumnPolicy;
  /** Position in the declared schema. */
  index: number;
  /** Quoted internal identifier, e.g. "c3". */
  ident: string;
  /** Quoted clamping-flag identifier (numeric columns), e.g. "k3". */
  flag: string;
}

/** A dataset's public schema: declared columns by name (the unit column is not among them). */
export interface DatasetSchema {
  dataset: DatasetPolicy;
  columns: Map<string, SchemaColumn>;
  hasUnit: boolean;
}

/** The schema of a dataset: positional identifiers in declaration order. */
export function schemaOf(d: DatasetPolicy): DatasetSchema {
  const columns = new Map<string, SchemaColumn>();
  d.columns.forEach((c, i) => columns.set(c.name, { policy: c, index: i, ident: `"c${i}"`, flag: `"k${i}"` }));
  return { dataset: d, columns, hasUnit: d.unit.column !== null };
}
