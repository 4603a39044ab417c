/**
 * The messages that cross between the notebook side (runtime client) and the curator.
 *
 * This file holds the TypeScript shapes only; the strict runtime validation lives in
 * `schema.ts` beside it (zod). Exact quantities (privacy costs, released values) travel as
 * strings: a privacy parameter is an exact rational written as a decimal ("0.1", "1e-6") or a
 * fraction ("1/3"); a released value is an exact decimal string on its grid.
 */

export const PROTOCOL_VERSION = 1 as const;
/** Largest request frame the curator reads; larger frames are refused unread. */
export const MAX_FRAME_BYTES = 256 * 1024;

// ---------------------------------------------------------------------------------------------
// Query plans: the only thing a cell can ask of a dataset. Declarative, no code.
// ---------------------------------------------------------------------------------------------

/** A literal in a filter. Dates are ISO "YYYY-MM-DD" strings. */
export type Literal = string | number | boolean;

export type Condition =
  | { op: "eq" | "ne" | "lt" | "le" | "gt" | "ge"; column: string; value: Literal }
  | { op: "in"; column: string; values: Literal[] }
  | { op: "between"; column: string; low: Literal; high: Literal }
  | { op: "isNull"; column: string }
  | { op: "and" | "or"; of: Condition[] }
  | { op: "not"; of: Condition };

/** Group by a declared category column, or by equal-width bins of a numeric column over its declared range. */
export type GroupKey = { column: string } | { column: string; bins: number };

export type Measure =
  | { kind: "count" }
  | { kind: "sum"; column: string }
  | { kind: "mean"; column: string }
  | { kind: "variance"; column: string }
  | { kind: "std"; column: string }
  /** One or more quantiles, each p in (0, 1). */
  | { kind: "quantile"; column: string; p: number[] }
  /** Counts in `bins` equal-width bins over the column's declared range. */
  | { kind: "histogram"; column: string; bins: number }
  /** Counts for every pair of declared values of two category columns. */
  | { kind: "crosstab"; rows: string; cols: string }
  /**
   * A summary of every column; the budget is split evenly across the parts (stated in the release).
   * `clamped: true` adds the clamped shares of every numeric column as one more part.
   */
  | { kind: "describe"; clamped?: boolean }
  /**
   * How many values of each listed numeric column were clamped at its declared bounds: noisy counts
   * of rows whose raw value lay below the lower / above the upper bound, the noisy number of rows
   * with a value, and the two shares (docs/methods.md §21). Charged like any release.
   */
  | { kind: "clamped"; columns: string[] }
  /**
   * Linear regression of a numeric `response` on `predictors` (numeric columns; category and boolean
   * columns as indicators, one per declared value other than the reference level: the first declared
   * value, or false, unless `reference` names another). docs/methods.md §18.
   */
  | { kind: "regression"; response: string; predictors: string[]; reference?: { column: string; value: string }[] }
  /** Pearson correlations of every pair of two or more numeric columns. docs/methods.md §19. */
  | { kind: "correlation"; columns: string[] };

/** How much privacy to spend: a direct parameter, or a target half-width (accuracy first). */
export type PrivacyAsk =
  | { epsilon: string }
  | { rho: string }
  /**
   * Accuracy first. `atMost`: the most this ask may spend, an exact positive number in the
   * dataset's accounting unit (epsilon, or rho on zCDP datasets). Without it (and without the
   * dataset's policy default `accuracyFirst.atMost`) an ask is refused with its price, spending
   * nothing; with it, an ask that would cost more is refused the same way. It is not part of the
   * question: the plan's digest and the released plan leave it out, so a replay stays free.
   */
  | { within: number; confidence?: number; atMost?: string };

export interface QueryPlan {
  v: typeof PROTOCOL_VERSION;
  dataset: string;
  where?: Condition;
  groupBy?: GroupKey[];
  measure: Measure;
  privacy: PrivacyAsk;
  /** Confidence of the error bars, in (0, 1). Default 0.95. */
  confidence?: number;
}

// ---------------------------------------------------------------------------------------------
// Public schema and spend
// ---------------------------------------------------------------------------------------------

export type ColumnInfo =
  | { name: string; type: "integer" | "number"; lower: string; upper: string; step: string }
  | { name: string; type: "category"; values: string[] }
  | { name: string; type: "date"; lower: string; upper: string }
  | { name: string; type: "boolean" };

export type AccountingMode = "pure" | "zcdp";

export interface SpendSummary {
  analyst: string;
  dataset: string;
  /** The people the dataset is about. The amounts are the analyst's spend on this population, over
   * all of its datasets: they share one cap. */
  population: string;
  mode: AccountingMode;
  /** Exact rationals as strings. In zcdp mode `spentRho`/`capRho` hold the accounting unit, and
   * `spentEpsilon` is the best valid epsilon at `delta` (docs/methods.md §22): plain composition of
   * the pure epsilons when every release was pure, else the conversion of spentRho (rounded up);
   * `epsilonBy` says which. */
  spentEpsilon: string;
  capEpsilon: string;
  remainingEpsilon: string;
  spentRho?: string;
  capRho?: string;
  remainingRho?: string;
  delta?: string;
  /** zcdp mode: how spentEpsilon was obtained. */
  epsilonBy?: "plain composition" | "zCDP conversion";
  releases: number;
}

export interface DatasetInfo {
  name: string;
  description: string;
  columns: ColumnInfo[];
  /** The privacy unit, in words: "patient_id (at most 8 rows per unit)", or "each row". */
  unit: { column: string | null; maxRows: number; maxGroups: number };
  spend: SpendSummary;
}

// ---------------------------------------------------------------------------------------------
// Releases
// ---------------------------------------------------------------------------------------------

/** One released number. Everything here is public: key values come from the declared schema. */
export interface ReleaseRow {
  /** Group key values, in the order of `Release.groupColumns`; [] for an ungrouped release. */
  key: (string | null)[];
  /** Which statistic this row is: "count", "sum", "mean", "p50", "std", ... (describe has many). */
  stat: string;
  /** Column the statistic is about, if any. */
  column: string | null;
  /** Exact decimal string, or null when the estimate is unavailable (e.g. a mean whose noisy count is <= 0). */
  value: string | null;
  /** Error bar ends as decimal strings (noise only), or null when unavailable. */
  low: string | null;
  high: string | null;
}

export interface MechanismRecord {
  /** What the noise was added to: "count", "sum of wait_minutes", ... */
  target: string;
  family: "discrete-laplace" | "discrete-gaussian" | "exponential";
  /** Noise scale t (discrete Laplace) or variance sigma^2 (discrete Gaussian) in grid units, exact rational;
   * for the exponential mechanism the epsilon used. */
  scale: string;
  /** Sensitivity in grid units (L1 for Laplace, L2 for Gaussian), integer as string. */
  sensitivity: string;
  /** Grid step of the released value ("1" for counts). */
  step: string;
  /** Privacy cost of this part, exact rational, in the dataset's accounting unit. */
  cost: string;
}

export interface Receipt {
  format: "hush-receipt/1";
  analyst: string;
  dataset: string;
  /** The population the dataset is about; the chain and the running total are per (analyst, population). */
  population: string;
  /** 1-based, per (analyst, population); consecutive. */
  seq: number;
  /** sha256 hex of the canonical JSON of the plan. */
  digest: string;
  /** sha256 hex of the source of the notebook cell that first asked for this release
   * (runtime/protocol/cell-source.ts), as the notebook side sent it; absent when the ask came from
   * outside a notebook kernel (a script using the client). A replay returns the stored receipt, so
   * this names the code of the first ask. */
  cell?: string;
  unit: "epsilon" | "rho";
  /** Exact rationals in `unit`. */
  cost: string;
  total: string;
  cap: string;
  /** zCDP datasets only: the delta at which the cap was stated (exact decimal). */
  delta?: string;
  /** The released rows as signed: [key, stat, column, value, low, high]. */
  result: [(string | null)[], string, string | null, string | null, string | null, string | null][];
  /** Bounds and mechanisms, enough for a reviewer to recompute the sensitivity. */
  mechanisms: MechanismRecord[];
  issuedAt: string;
  /** sha256 hex of the canonical JSON of the previous receipt (with its sig); 64 zeros for seq 1. */
  prev: string;
  /** First 16 hex chars of sha256 of the curator public key (SPKI DER). */
  keyId: string;
  /** base64 Ed25519 signature over the canonical JSON of this receipt without `sig`. */
  sig: string;
}

/**
 * The curator's signed statement that the code with source digest `cell` asked again for the
 * release whose receipt hashes to `receipt` (runtime/protocol/reasked.ts). Sent only with a replay
 * asked from code other than the code its receipt names.
 */
export interface Reasked {
  format: "hush-reasked/1";
  /** sha256 hex of the canonical JSON of the release's receipt (with its sig). */
  receipt: string;
  /** The asking cell's source digest (runtime/protocol/cell-source.ts). */
  cell: string;
  keyId: string;
  /** base64 Ed25519 signature over the canonical JSON of this statement without `sig`. */
  sig: string;
}

export interface Release {
  dataset: string;
  digest: string;
  plan: QueryPlan;
  groupColumns: string[];
  rows: ReleaseRow[];
  confidence: number;
  /** How the error bars were computed, in words. */
  intervalMethod: string;
  /** Always true: the interval covers the privacy noise only, not clamping, rounding or row-dropping bias. */
  noiseOnly: true;
  mechanisms: MechanismRecord[];
  /** Cost of this release in the accounting unit, exact rational; "0" is never sent for a fresh release. */
  cost: string;
  /** Spend after this release. */
  spend: SpendSummary;
  /** True when this plan was answered before and the stored release is returned at no new cost. */
  replay: boolean;
  receipt: Receipt;
  /** On a replay asked from code other than the code `receipt.cell` names: the curator's statement that this code asked again. */
  reasked?: Reasked;
  /** Cautions worth showing: bounding, clamping, budget split. */
  notes: string[];
}

export interface Preview {
  dataset: string;
  digest: string;
  /** Cost this plan would debit, exact rational in the accounting unit. */
  cost: string;
  unit: "epsilon" | "rho";
  /** Expected half-width of each released number at the plan's confidence, as decimal strings per stat. */
  halfWidths: { stat: string; column: string | null; halfWidth: string }[];
  confidence: number;
  /** Would it fit under the cap right now? */
  affordable: boolean;
  /** True if this plan was already released: asking again costs nothing. */
  replay: boolean;
  spend: SpendSummary;
  notes: string[];
  /**
   * Means, variances and std: the expected error of the estimate itself (not of its parts), for a
   * count of values the analyst assumed (`assumeCount`) or the policy's public `sizeHint`; absent
   * when neither is given. Computed from the assumption and the policy alone, never the data.
   */
  ratioErrors?: RatioError[];
}

export interface RatioError {
  stat: "mean" | "variance" | "std";
  column: string;
  /** The count of values (per group) the figures assume, and who stated it. */
  assumedCount: number;
  assumedFrom: "analyst" | "policy";
  /** Half-width of the estimate's error bar, as the release would compute it, at the point `typicalAt` describes. */
  typical: string;
  typicalAt: string;
  /** The largest such half-width over a grid of values the estimate could take within the declared range. */
  widest: string;
}

export interface LedgerEntry {
  /** Per (analyst, population). */
  seq: number;
  dataset: string;
  population: string;
  digest: string;
  plan: QueryPlan;
  cost: string;
  total: string;
  issuedAt: string;
  receipt: Receipt;
}

// ---------------------------------------------------------------------------------------------
// Envelope
// ---------------------------------------------------------------------------------------------

export type RequestBody =
  | { op: "catalogue" }
  | { op: "open"; dataset: string }
  /** `cell`: the asking cell's source digest (runtime/protocol/cell-source.ts), signed into the receipt. */
  | { op: "ask"; plan: QueryPlan; cell?: string }
  /** `assumeCount`: the count of values per group the ratio estimates' expected errors assume (Preview.ratioErrors). */
  | { op: "preview"; plan: QueryPlan; assumeCount?: number }
  | { op: "spend"; dataset: string }
  /**
   * At most LEDGER_PAGE (limits.ts) releases per population, the latest with seq below `before`
   * (default: the latest of all).
   */
  | { op: "ledger"; dataset?: string; before?: number }
  /** The analyst's spend on every dataset they may use, from the ledger alone (no dataset opened, no data read). */
  | { op: "accounts" };

export interface Request {
  v: typeof PROTOCOL_VERSION;
  id: string;
  analyst: string;
  token: string;
  body: RequestBody;
}

export type ResponseBody =
  | { op: "catalogue"; datasets: { name: string; description: string }[]; publicKey: string }
  | { op: "open"; info: DatasetInfo }
  | { op: "ask"; release: Release }
  | { op: "preview"; preview: Preview }
  | { op: "spend"; spend: SpendSummary }
  /** `earlier`: releases (of the same dataset filter) below the page, left out; absent when none. */
  | { op: "ledger"; entries: LedgerEntry[]; earlier?: number }
  /** One summary per dataset the analyst may use, in policy order; datasets of one population show the same amounts. */
  | { op: "accounts"; accounts: SpendSummary[] };

/** Where a release's receipt travels in a notebook: `output.metadata[OUTPUT_METADATA_KEY]`. */
export const OUTPUT_METADATA_KEY = "hush" as const;
export interface OutputMetadata {
  receipt: Receipt;
  replay: boolean;
  dataset: string;
  /**
   * The release's plan (normalized), whose canonical digest the receipt signed. Not signed itself:
   * the audit checks it against `receipt.digest` and then knows the steward's words the views show
   * (filter values, column names), which it reads like group keys.
   */
  plan?: QueryPlan;
  /** Copied from the release: this cell's code asked again for a release first made by other code. */
  reasked?: Reasked;
}

export type Response =
  | { v: typeof PROTOCOL_VERSION; id: string; ok: true; body: ResponseBody }
  | {
      v: typeof PROTOCOL_VERSION;
      id: string;
      ok: false;
      error: { kind: import("../errors.js").HushErrorKind; message: string; spend?: SpendSummary };
    };
