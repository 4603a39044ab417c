/**
 * A sealed dataset handle: its public schema and the analyst's spend, and the only ways to learn
 * anything about its rows — differentially private aggregates. There is deliberately no method that
 * returns rows. Handles are immutable: `where` and `by` return new handles, so one cell's filter
 * never leaks into another query.
 */
import { BadInputError } from "../errors.js";
import type { ColumnInfo, Condition, DatasetInfo, GroupKey, Measure, QueryPlan, SpendSummary } from "../protocol/messages.js";
import { PROTOCOL_VERSION } from "../protocol/messages.js";
import { PLAN_LIMITS } from "../protocol/limits.js";
import { parsePlan } from "../protocol/schema.js";
import { Aggregates, type PreviewOptions } from "./aggregates.js";
import { Answer } from "./answer.js";
import { BudgetReport } from "./budget.js";
import { type ApiContext, withBudgetNote } from "./context.js";
import { checkAgainstSchema, conditionText, type FilterInput, toCondition } from "./expr.js";
import { askingCell } from "./asking-cell.js";
import { type SpendOptions, privacyAsk } from "./privacy.js";
import { CostQuote } from "./quote.js";
import { INSPECT, aligned, groupText, planText, spendText } from "./text.js";

interface TableState {
  ctx: ApiContext;
  info: DatasetInfo;
  where: Condition | undefined;
  groupBy: readonly GroupKey[];
}

/** Kept outside the instances so the handle's own surface is only its documented methods. */
const states = new WeakMap<object, TableState>();

function state(t: object): TableState {
  const s = states.get(t);
  if (!s) throw new BadInputError("not a sealed dataset handle (use hush.open(name))");
  return s;
}

/** Measures that may be grouped, and measures that take an accuracy-first ask (as the curator enforces). */
const GROUPABLE = new Set<Measure["kind"]>(["count", "sum", "mean", "variance", "std"]);
const ACCURACY_FIRST = new Set<Measure["kind"]>(["count", "sum", "histogram", "crosstab"]);

function findColumn(info: DatasetInfo, name: string, what: string): ColumnInfo {
  const c = info.columns.find((x) => x.name === name);
  if (c) return c;
  if (name === info.unit.column) throw new BadInputError(`${what}: ${name} is the privacy unit column of ${info.name}, which cannot be queried`);
  throw new BadInputError(`${what}: no column ${JSON.stringify(name)} in ${info.name} (columns: ${info.columns.map((x) => x.name).join(", ")})`);
}

function numeric(info: DatasetInfo, name: string, what: string): void {
  const c = findColumn(info, name, what);
  if (c.type !== "integer" && c.type !== "number") throw new BadInputError(`${what}: ${name} is a ${c.type} column; ${what} needs a numeric column`);
}

function keyed(info: DatasetInfo, name: string, what: string): void {
  const c = findColumn(info, name, what);
  if (c.type !== "category" && c.type !== "boolean") throw new BadInputError(`${what}: ${name} is a ${c.type} column; crosstab needs category or boolean columns`);
}

/** The full query plan for a measure on a handle, checked against the public schema before sending. */
function makePlan(s: TableState, m: Measure, spend: SpendOptions, what: string): QueryPlan {
  const { info } = s;
  const { privacy, confidence } = privacyAsk(spend, what);
  switch (m.kind) {
    case "sum":
    case "mean":
    case "variance":
    case "std":
    case "quantile":
    case "histogram":
      numeric(info, m.column, what);
      break;
    case "clamped":
      for (const c of m.columns) numeric(info, c, what);
      break;
    case "crosstab":
      keyed(info, m.rows, what);
      keyed(info, m.cols, what);
      if (m.rows === m.cols) throw new BadInputError(`${what}: rows and cols must be two different columns`);
      break;
    case "regression":
      numeric(info, m.response, what);
      for (const p of m.predictors) {
        const c = findColumn(info, p, what);
        if (c.type === "date") throw new BadInputError(`${what}: ${p} is a date column; predictors are numeric, category or boolean columns`);
      }
      break;
    case "correlation":
      for (const c of m.columns) numeric(info, c, what);
      break;
    default:
      break;
  }
  if (s.groupBy.length > 0 && !GROUPABLE.has(m.kind)) {
    throw new BadInputError(`${what} cannot be grouped with .by(...); group count, sum, mean, variance or std (use the handle without .by for ${what})`);
  }
  if ("within" in privacy && !ACCURACY_FIRST.has(m.kind)) {
    throw new BadInputError(`${what}: { within } (accuracy first) applies to count, sum, histogram and crosstab; ask for ${what} with { epsilon } or { rho }`);
  }
  const plan: QueryPlan = {
    v: PROTOCOL_VERSION,
    dataset: info.name,
    ...(s.where ? { where: s.where } : {}),
    ...(s.groupBy.length ? { groupBy: s.groupBy.map((k) => ({ ...k })) } : {}),
    measure: m,
    privacy,
    confidence,
  };
  return parsePlan(plan);
}

/**
 * A sensitive dataset, sealed: you can see its public schema and ask for noisy aggregates with error
 * bars, each debited from your privacy-loss cap. Build queries with `.where(...)` and `.by(...)`,
 * then call an aggregate: `await visits.where(col("age").ge(65)).by("district").mean("wait_minutes", { epsilon: 0.1 })`.
 * Use `.preview.<aggregate>(...)` to see the cost and expected error first, without spending.
 */
export class SealedTable extends Aggregates<Answer> {
  constructor(ctx: ApiContext, info: DatasetInfo, where?: Condition, groupBy: readonly GroupKey[] = []) {
    super();
    states.set(this, { ctx, info: Object.freeze(structuredClone(info)), where, groupBy: Object.freeze([...groupBy]) });
    Object.freeze(this);
  }

  /** Dataset name. */
  get name(): string {
    return state(this).info.name;
  }

  /** What the steward says the dataset is. */
  get description(): string {
    return state(this).info.description;
  }

  /** The public schema: column names, types, declared ranges and category values. */
  get columns(): ColumnInfo[] {
    return structuredClone(state(this).info.columns) as ColumnInfo[];
  }

  /** The privacy unit: whose contribution is bounded and protected (e.g. one patient). */
  get unit(): DatasetInfo["unit"] {
    return { ...state(this).info.unit };
  }

  /** The analyst's spend on this dataset (all sessions, against the cap), as last reported by the curator. */
  get spend(): SpendSummary {
    const s = state(this);
    return s.ctx.spend.latest(s.info.name) ?? s.info.spend;
  }

  /** This kernel session's spend on this dataset, exact, in the accounting unit. */
  get sessionSpent(): string {
    const s = state(this);
    return s.ctx.spend.sessionSpent(s.info.name);
  }

  /** The current filter, if any. */
  get filter(): Condition | undefined {
    return state(this).where;
  }

  /** The current group keys. */
  get groups(): GroupKey[] {
    return state(this).groupBy.map((k) => ({ ...k }));
  }

  /**
   * A new handle that keeps only rows passing the test (combined with AND with an existing filter).
   * Accepts `col("age").ge(65)`, a protocol condition, or `{ district: "Northgate", age: { ge: 65 } }`.
   */
  where(filter: FilterInput): SealedTable {
    const s = state(this);
    const c = toCondition(filter);
    checkAgainstSchema(c, s.info.columns, s.info.unit.column);
    const combined: Condition = s.where ? { op: "and", of: [s.where, c] } : c;
    return new SealedTable(s.ctx, s.info, combined, s.groupBy);
  }

  /**
   * A new handle grouped by a declared category (or boolean) column, or by equal-width bins of a
   * numeric column: `.by("district")`, `.by("age", { bins: 10 })`. Chain for several keys (up to 3).
   */
  by(column: string, opts?: { bins: number }): SealedTable {
    const s = state(this);
    if (typeof column !== "string") throw new BadInputError("by(column): name a column (a string)");
    const c = findColumn(s.info, column, "by");
    if (s.groupBy.some((k) => k.column === column)) throw new BadInputError(`by: already grouped by ${column}`);
    if (s.groupBy.length >= PLAN_LIMITS.maxGroupKeys) throw new BadInputError(`by: at most ${PLAN_LIMITS.maxGroupKeys} group keys`);
    const bins = opts?.bins;
    let key: GroupKey;
    if (c.type === "category" || c.type === "boolean") {
      if (bins !== undefined) throw new BadInputError(`by: ${column} is a ${c.type} column, grouped by its declared values; leave bins out`);
      key = { column };
    } else if (c.type === "date") {
      throw new BadInputError(`by: grouping by the date column ${column} is not supported (filter by date ranges instead)`);
    } else {
      if (bins === undefined) throw new BadInputError(`by: ${column} is numeric; say how many equal-width bins, e.g. .by("${column}", { bins: 10 })`);
      if (typeof bins !== "number" || !Number.isInteger(bins) || bins < 1 || bins > PLAN_LIMITS.maxBins) {
        throw new BadInputError(`by: bins must be a whole number from 1 to ${PLAN_LIMITS.maxBins}, got ${String(bins)}`);
      }
      key = { column, bins };
    }
    return new SealedTable(s.ctx, s.info, s.where, [...s.groupBy, key]);
  }

  /** The same aggregates, priced instead of run: cost and expected error, nothing spent. */
  get preview(): CostPreview {
    return new CostPreview(this);
  }

  /** The analyst's budget on this dataset: this session's spend and queries, the total against the cap. */
  async budget(): Promise<BudgetReport> {
    const s = state(this);
    const port = await s.ctx.port();
    const spend = await port.spend(s.info.name);
    s.ctx.spend.noteSpend(spend);
    return new BudgetReport(spend.analyst, [
      { dataset: s.info.name, spend, sessionSpent: s.ctx.spend.sessionSpent(s.info.name), queries: s.ctx.spend.queries(s.info.name) },
    ]);
  }

  protected override async measure(make: () => Measure, spend: SpendOptions, what: string): Promise<Answer> {
    const s = state(this);
    try {
      const plan = makePlan(s, make(), spend, what);
      // Read before any await: the cell this ask belongs to (runtime/api/asking-cell.ts).
      const cell = askingCell();
      const port = await s.ctx.port();
      const release = await port.ask(plan, cell);
      const { sessionSpent } = s.ctx.spend.record(release, planText(plan));
      return new Answer(release, sessionSpent);
    } catch (e: unknown) {
      throw withBudgetNote(e, s.ctx, s.info.name);
    }
  }

  /** console.log(table): one line naming the dataset, its unit, columns and the query so far (no data). */
  [INSPECT](): string {
    const s = state(this);
    const u = s.info.unit;
    const query = `${s.where ? ` where ${conditionText(s.where)}` : ""}${groupText(s.groupBy)}`;
    const cols = s.info.columns.map((c) => c.name).join(", ");
    return `SealedTable <${s.info.name}${query}: sealed, aggregates only · privacy unit ${u.column ?? "each row"} · columns ${cols}>`;
  }

  /** The schema, the spend, and the current filter and groups. */
  override toString(): string {
    const s = state(this);
    const info = s.info;
    const spend = this.spend;
    const u = info.unit;
    const unit = u.column === null ? "each row" : `${u.column} (at most ${u.maxRows} rows per unit)`;
    const lines = [
      `${info.name} — sealed dataset: aggregates only, each with privacy noise`,
      `  ${info.description}`,
      `  privacy unit: ${unit}`,
      `  spend (${spend.analyst}): ${spendText(spend)}`,
    ];
    if (s.where || s.groupBy.length) lines.push(`  query: ${s.where ? `where ${conditionText(s.where)}` : ""}${groupText(s.groupBy)}`.trimEnd());
    lines.push("  columns:", ...aligned(info.columns.map((c) => [c.name, columnText(c)]), "    "));
    return lines.join("\n");
  }
}

/** "integer 0 to 100 (step 1)", "category: Northgate, Riverside". */
export function columnText(c: ColumnInfo): string {
  switch (c.type) {
    case "integer":
    case "number":
      return `${c.type} ${c.lower} to ${c.upper} (step ${c.step})`;
    case "category":
      return `category: ${c.values.join(", ")}`;
    case "date":
      return `date ${c.lower} to ${c.upper}`;
    case "boolean":
      return "boolean";
  }
}

/** The aggregates of a handle, priced: `await visits.preview.mean("wait_minutes", { epsilon: 0.1 })`. Spends nothing. */
/** A preview's assumed count of values: a whole number from 1 to 1e15, or absent. */
function assumedCount(o: unknown, what: string): number | undefined {
  const n = o !== null && typeof o === "object" ? (o as { assumeCount?: unknown }).assumeCount : undefined;
  if (n === undefined) return undefined;
  if (typeof n !== "number" || !Number.isInteger(n) || n < 1 || n > 1e15) {
    throw new BadInputError(`${what}: assumeCount must be a whole number of values from 1 to 1e15 (an assumption for the expected error), got ${typeof n === "number" ? String(n) : typeof n}`);
  }
  return n;
}

export class CostPreview extends Aggregates<CostQuote, PreviewOptions> {
  readonly #table: SealedTable;

  constructor(table: SealedTable) {
    super();
    this.#table = table;
    Object.freeze(this);
  }

  [INSPECT](): string {
    return `CostPreview <prices asks on ${state(this.#table).info.name}; spends nothing>`;
  }

  protected override async measure(make: () => Measure, spend: PreviewOptions, what: string): Promise<CostQuote> {
    const s = state(this.#table);
    try {
      const plan = makePlan(s, make(), spend, what);
      const assumeCount = assumedCount(spend, what);
      const port = await s.ctx.port();
      const preview = assumeCount === undefined ? await port.preview(plan) : await port.preview(plan, assumeCount);
      s.ctx.spend.noteSpend(preview.spend);
      return new CostQuote(preview, planText(plan));
    } catch (e: unknown) {
      throw withBudgetNote(e, s.ctx, s.info.name);
    }
  }
}
