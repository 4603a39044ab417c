/**
 * The TypeScript declaration of the `hush` global, given to the kernel's language service so that
 * completion and hover docs work on `hush.` and on every object it returns. It mirrors the classes
 * of runtime/api (test/api/declarations.test.ts checks every public member is declared here and
 * that the text type-checks). Types live in the `HushApi` namespace so they never clash with names
 * a notebook defines.
 */
export const HUSH_DECLARATIONS = String.raw`
declare namespace HushApi {
  /** A literal in a filter: a declared category value, a number, a date "YYYY-MM-DD" or a boolean. */
  type Literal = string | number | boolean;

  /** Spend a fixed ε (pure DP). Strings are taken exactly ("0.1", "1e-3", "1/3"). */
  interface EpsilonSpend {
    epsilon: number | string;
    /** Confidence of the error bar, in (0, 1); default 0.95. */
    confidence?: number;
  }
  /** Spend a fixed ρ (zero-concentrated DP). */
  interface RhoSpend {
    rho: number | string;
    /** Confidence of the error bar, in (0, 1); default 0.95. */
    confidence?: number;
  }
  /** Accuracy first: spend what makes the error bar this narrow (count, sum, histogram, crosstab). */
  interface AccuracySpend {
    /** Wanted half-width, in the units of the result. */
    within: number;
    /** Confidence the half-width is stated at; default 0.95. */
    confidence?: number;
  }
  /** How much privacy to spend: { epsilon }, { rho } or { within, confidence? }. */
  type SpendOptions = EpsilonSpend | RhoSpend | AccuracySpend;
  /** A histogram's bins (1 to 1000, equal width over the declared range) and spend. */
  type HistogramOptions = SpendOptions & { bins: number };

  type Condition =
    | { op: "eq" | "ne" | "lt" | "le" | "gt" | "ge"; column: string; value: Literal }
    | { op: "in"; column: string; values: Literal[] }
    | { op: "between"; column: string; low: Literal; high: Literal }
    | { op: "isNull"; column: string }
    | { op: "and" | "or"; of: Condition[] }
    | { op: "not"; of: Condition };
  /** Tests for one column in the object shorthand, e.g. { ge: 65, lt: 80 }. */
  interface ColumnTest {
    eq?: Literal; ne?: Literal; lt?: Literal; le?: Literal; gt?: Literal; ge?: Literal;
    in?: Literal[]; between?: [Literal, Literal]; isNull?: true;
  }
  /** { district: "Northgate", age: { ge: 65 }, sex: ["female", "male"], insured: null } — all must hold. */
  type FilterObject = Record<string, Literal | Literal[] | null | ColumnTest>;
  /** What .where(...) takes. */
  type FilterInput = Filter | Condition | FilterObject;

  /** A test on public columns; immutable. */
  interface Filter {
    readonly condition: Condition;
    /** Both this and every other test hold. */
    and(...others: FilterInput[]): Filter;
    /** This or any other test holds. */
    or(...others: FilterInput[]): Filter;
    /** The opposite test. */
    not(): Filter;
    toJSON(): Condition;
    toString(): string;
  }
  /** A public column to filter on: hush.col("age").ge(65). */
  interface Column {
    readonly name: string;
    eq(value: Literal): Filter;
    ne(value: Literal): Filter;
    /** Less than (numeric and date columns). */
    lt(value: Literal): Filter;
    le(value: Literal): Filter;
    gt(value: Literal): Filter;
    ge(value: Literal): Filter;
    /** One of the listed values. */
    isIn(values: Literal[]): Filter;
    /** Between two values, both included (numeric and date columns). */
    between(low: Literal, high: Literal): Filter;
    /** The value is missing. */
    isNull(): Filter;
    /** The value is present. */
    notNull(): Filter;
  }

  type ColumnInfo =
    | { name: string; type: "integer" | "number"; lower: string; upper: string; step: string }
    | { name: string; type: "category"; values: string[] }
    | { name: string; type: "date"; lower: string; upper: string }
    | { name: string; type: "boolean" };
  type GroupKey = { column: string } | { column: string; bins: number };

  /** The analyst's spend on a dataset. Exact values are strings. */
  interface SpendSummary {
    analyst: string; dataset: string; mode: "pure" | "zcdp";
    spentEpsilon: string; capEpsilon: string; remainingEpsilon: string;
    spentRho?: string; capRho?: string; remainingRho?: string; delta?: string;
    releases: number;
  }
  /** One released number exactly as signed. */
  interface ReleaseRow { key: (string | null)[]; stat: string; column: string | null; value: string | null; low: string | null; high: string | null }
  interface MechanismRecord { target: string; family: "discrete-laplace" | "discrete-gaussian" | "exponential"; scale: string; sensitivity: string; step: string; cost: string }
  /** The curator's Ed25519-signed receipt of a release. */
  interface Receipt {
    format: "hush-receipt/1"; analyst: string; dataset: string; seq: number; digest: string;
    unit: "epsilon" | "rho"; cost: string; total: string; cap: string; delta?: string;
    result: [(string | null)[], string, string | null, string | null, string | null, string | null][];
    mechanisms: MechanismRecord[]; issuedAt: string; prev: string; keyId: string; sig: string;
  }
  interface QueryPlan {
    v: 1; dataset: string; where?: Condition; groupBy?: GroupKey[];
    measure: { kind: string; [k: string]: unknown };
    privacy: { epsilon: string } | { rho: string } | { within: number; confidence?: number };
    confidence?: number;
  }
  interface Release {
    dataset: string; digest: string; plan: QueryPlan; groupColumns: string[]; rows: ReleaseRow[];
    confidence: number; intervalMethod: string; noiseOnly: true; mechanisms: MechanismRecord[];
    cost: string; spend: SpendSummary; replay: boolean; receipt: Receipt; notes: string[];
  }
  interface Preview {
    dataset: string; digest: string; cost: string; unit: "epsilon" | "rho";
    halfWidths: { stat: string; column: string | null; halfWidth: string }[];
    confidence: number; affordable: boolean; replay: boolean; spend: SpendSummary; notes: string[];
  }
  interface LedgerEntry { seq: number; dataset: string; digest: string; plan: QueryPlan; cost: string; total: string; issuedAt: string; receipt: Receipt }

  /** One released number with its key. */
  interface ResultRow {
    /** Group key values by column, e.g. { district: "Northgate" }. */
    readonly key: Readonly<Record<string, string | null>>;
    readonly stat: string;
    readonly column: string | null;
    /** The estimate, or null when unavailable. */
    readonly value: number | null;
    /** Error-bar ends (noise only), or null. */
    readonly low: number | null;
    readonly high: number | null;
    /** The row exactly as signed. */
    readonly exact: Readonly<ReleaseRow>;
    /** "23.5 ± 0.8" */
    readonly text: string;
  }

  /** A differentially private result: value(s), noise-only error bars, cost, signed receipt. */
  interface Answer {
    readonly release: Release;
    /** What was asked, in words. */
    readonly what: string;
    /** This kernel session's spend on the dataset after this release. */
    readonly sessionSpent: string;
    readonly dataset: string;
    /** True for a single number (no groups). */
    readonly isScalar: boolean;
    /** The estimate of a one-number result (null when unavailable). Throws for grouped results: use rows. */
    readonly value: number | null;
    /** [low, high] of a one-number result, or null. */
    readonly interval: [number, number] | null;
    /** Every released number with its key. */
    readonly rows: ResultRow[];
    readonly groupColumns: string[];
    /** Cost debited, exact ("0" for a replay). */
    readonly cost: string;
    /** True when this query was answered before: stored release, no new cost. */
    readonly replay: boolean;
    readonly confidence: number;
    readonly receipt: Receipt;
    readonly spend: SpendSummary;
    readonly notes: string[];
    readonly mechanisms: MechanismRecord[];
    /** The row of one group, keys in group order: .get("Northgate"). */
    get(...key: (string | null)[]): ResultRow | undefined;
    toString(): string;
    toJSON(): Release;
  }

  interface ExpectedError { stat: string; column: string | null; halfWidth: number; exact: string }
  /** Cost and expected error of a query that has not been run; nothing spent. */
  interface CostQuote {
    readonly preview: Preview;
    readonly what: string;
    readonly cost: string;
    readonly unit: "epsilon" | "rho";
    readonly expectedErrors: ExpectedError[];
    /** Would it fit under the cap now? */
    readonly affordable: boolean;
    /** Already released: running it again costs nothing. */
    readonly replay: boolean;
    readonly spend: SpendSummary;
    readonly confidence: number;
    readonly notes: string[];
    toString(): string;
  }

  /** The aggregates a sealed dataset answers. Each takes how much privacy to spend. */
  interface Aggregates<R> {
    /** Number of rows, per group when grouped with .by(...). */
    count(spend: SpendOptions): Promise<R>;
    /** Sum of a numeric column (clamped to its declared range). */
    sum(column: string, spend: SpendOptions): Promise<R>;
    /** Mean of a numeric column. */
    mean(column: string, spend: SpendOptions): Promise<R>;
    variance(column: string, spend: SpendOptions): Promise<R>;
    std(column: string, spend: SpendOptions): Promise<R>;
    /** One quantile, p in (0, 1), with a value interval at the spend's confidence. */
    quantile(column: string, p: number, spend: SpendOptions): Promise<R>;
    /** Several quantiles; the budget is split evenly. */
    quantiles(column: string, ps: number[], spend: SpendOptions): Promise<R>;
    median(column: string, spend: SpendOptions): Promise<R>;
    /** Counts in equal-width bins: histogram("age", { bins: 10, epsilon: 0.2 }). */
    histogram(column: string, opts: HistogramOptions): Promise<R>;
    /** Counts for every pair of declared values of two category columns. */
    crosstab(rows: string, cols: string, spend: SpendOptions): Promise<R>;
    /** Summary of every column, budget split evenly; { clampedShares: true } adds the clamped shares. */
    describe(spend: SpendOptions & { clampedShares?: boolean }): Promise<R>;
    /** How many values of numeric columns lay beyond their declared bounds (a release of its own). */
    clampedShares(columns: string | string[], spend: SpendOptions): Promise<R>;
  }

  /** A sealed dataset: public schema, your spend, and noisy aggregates only. No method returns rows. */
  interface SealedTable extends Aggregates<Answer> {
    readonly name: string;
    readonly description: string;
    /** The public schema. */
    readonly columns: ColumnInfo[];
    /** The privacy unit (e.g. one patient) and its bounds. */
    readonly unit: { column: string | null; maxRows: number; maxGroups: number };
    /** Your spend on this dataset (all sessions) against the cap. */
    readonly spend: SpendSummary;
    /** This kernel session's spend on this dataset. */
    readonly sessionSpent: string;
    readonly filter: Condition | undefined;
    readonly groups: GroupKey[];
    /** A new handle keeping rows that pass the test: .where(hush.col("age").ge(65)) or .where({ district: "Northgate" }). */
    where(filter: FilterInput): SealedTable;
    /** A new handle grouped by a category column, or numeric bins: .by("district"), .by("age", { bins: 10 }). */
    by(column: string, opts?: { bins: number }): SealedTable;
    /** The same aggregates priced, not run: await t.preview.mean("wait_minutes", { epsilon: 0.1 }). */
    readonly preview: Aggregates<CostQuote>;
    /** Your budget on this dataset. */
    budget(): Promise<BudgetReport>;
    toString(): string;
  }

  interface QueryRecord { seq: number; dataset: string; what: string; cost: string; unit: "epsilon" | "rho"; replay: boolean; total: string; cap: string; issuedAt: string }
  interface DatasetBudget { readonly dataset: string; readonly spend: SpendSummary; readonly sessionSpent: string; readonly queries: readonly QueryRecord[] }
  /** This session's spend and what remains under each cap. */
  interface BudgetReport {
    readonly analyst: string;
    readonly datasets: readonly DatasetBudget[];
    of(dataset: string): DatasetBudget | undefined;
    toString(): string;
  }
  /** Every release the curator recorded for you, with receipts. */
  interface LedgerView {
    readonly entries: readonly LedgerEntry[];
    toString(): string;
  }

  /** The cell API. */
  interface Hush {
    /** Opens a dataset as a sealed handle: const visits = await hush.open("visits"). */
    open(name: string): Promise<SealedTable>;
    /** The datasets you may open. */
    datasets(): Promise<{ name: string; description: string }[]>;
    /** This session's spend per dataset, and your totals against the caps. */
    budget(dataset?: string): Promise<BudgetReport>;
    /** Your ledger of releases (all sessions). */
    ledger(dataset?: string): Promise<LedgerView>;
    /** Starts a filter: hush.col("age").ge(65). */
    col(name: string): Column;
    toString(): string;
  }
}

/** Sealed datasets and privacy-budgeted aggregates. Start with: const visits = await hush.open("visits"). */
declare const hush: HushApi.Hush;
`;
