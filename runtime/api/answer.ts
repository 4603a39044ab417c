/**
 * What an aggregate returns: the curator's signed release, with convenient numbers for further
 * (post-processing) work in the cell. Nothing here can reach the data; it only re-reads the release.
 */
import { BadInputError } from "../errors.js";
import type { MechanismRecord, Receipt, Release, ReleaseRow, SpendSummary } from "../protocol/messages.js";
import { aligned, costText, percent, planText, rowLabel, shownValue, uniformStat } from "./text.js";

/** One released number with its key, as numbers for computing and the exact strings as signed. */
export interface ResultRow {
  /** Group key values by column name, e.g. `{ district: "Northgate" }`; `{}` when ungrouped. */
  readonly key: Readonly<Record<string, string | null>>;
  /** Which statistic: "count", "mean", "p50", "std", ... */
  readonly stat: string;
  /** Column the statistic is about, or null (counts). */
  readonly column: string | null;
  /** The estimate, or null when unavailable (e.g. a mean whose noisy count is not positive). */
  readonly value: number | null;
  /** Error-bar ends (noise only), or null. */
  readonly low: number | null;
  readonly high: number | null;
  /** The row exactly as released and signed. */
  readonly exact: Readonly<ReleaseRow>;
  /** "23.5 ± 0.8": the estimate as shown everywhere. */
  readonly text: string;
}

const num = (s: string | null): number | null => (s === null ? null : Number(s));

function deepFreeze<T>(v: T): T {
  if (v !== null && typeof v === "object" && !Object.isFrozen(v)) {
    for (const x of Object.values(v)) deepFreeze(x);
    Object.freeze(v);
  }
  return v;
}

/** A differentially private result: value(s), error bars, cost and the signed receipt. */
export class Answer {
  /** The release as the curator sent it (frozen). */
  readonly release: Release;
  /** What was asked, in words: "mean wait_minutes by district where age ≥ 65". */
  readonly what: string;
  /** This kernel session's spend on the dataset after this release (exact, in the accounting unit). */
  readonly sessionSpent: string;

  constructor(release: Release, sessionSpent: string) {
    this.release = deepFreeze(structuredClone(release));
    this.what = planText(release.plan);
    this.sessionSpent = sessionSpent;
    Object.freeze(this);
  }

  /** Dataset the release is about. */
  get dataset(): string {
    return this.release.dataset;
  }

  /** True when the result is one number (no groups, one statistic). */
  get isScalar(): boolean {
    return this.release.rows.length === 1 && this.release.groupColumns.length === 0;
  }

  /** The estimate of a one-number result (null when unavailable); use `.rows` for grouped results. */
  get value(): number | null {
    return num(this.#scalarRow().value);
  }

  /** Error bar [low, high] of a one-number result (noise only), or null when there is none. */
  get interval(): [number, number] | null {
    const r = this.#scalarRow();
    return r.low === null || r.high === null ? null : [Number(r.low), Number(r.high)];
  }

  /** Every released number, with its key. */
  get rows(): ResultRow[] {
    const cols = this.release.groupColumns;
    return this.release.rows.map((r) =>
      Object.freeze({
        key: Object.freeze(Object.fromEntries(cols.map((c, i) => [c, r.key[i] ?? null]))),
        stat: r.stat,
        column: r.column,
        value: num(r.value),
        low: num(r.low),
        high: num(r.high),
        exact: r,
        text: shownValue(r),
      }),
    );
  }

  /** The row for one group, e.g. `.get("Northgate")` or `.get("female", "Northgate")` (in group order). */
  get(...key: (string | null)[]): ResultRow | undefined {
    return this.rows.find((r) => r.exact.key.length === key.length && r.exact.key.every((k, i) => k === key[i]));
  }

  /** Group columns of the result, in key order. */
  get groupColumns(): string[] {
    return [...this.release.groupColumns];
  }

  /** Cost debited, exact, in the dataset's accounting unit ("0" shown for a replay). */
  get cost(): string {
    return this.release.replay ? "0" : this.release.cost;
  }

  /** True when this exact query was answered before: the stored release came back at no new cost. */
  get replay(): boolean {
    return this.release.replay;
  }

  /** Confidence of the error bars. */
  get confidence(): number {
    return this.release.confidence;
  }

  /** The signed receipt (Ed25519) that a reviewer can check without the data. */
  get receipt(): Receipt {
    return this.release.receipt;
  }

  /** The analyst's spend on the dataset after this release. */
  get spend(): SpendSummary {
    return this.release.spend;
  }

  /** Cautions: bounding, clamping, budget split. */
  get notes(): string[] {
    return [...this.release.notes];
  }

  /** The noise added, per part: family, scale, sensitivity, cost. */
  get mechanisms(): MechanismRecord[] {
    return [...this.release.mechanisms];
  }

  /** One line for a single number; a small table for grouped results. */
  toString(): string {
    const r = this.release;
    const cost = costText({ cost: r.cost, replay: r.replay, sessionSpent: this.sessionSpent, spend: r.spend });
    if (this.isScalar) {
      const row = r.rows[0];
      // Quantiles carry a value interval (docs/methods.md §20); a row without one (an older receipt) says so.
      const bar = row.value !== null && (row.low === null || row.high === null) ? "no value interval, see notes" : percent(r.confidence);
      return `${this.what} = ${shownValue(row)} (${bar}) · ${cost}`;
    }
    const uniform = uniformStat(r.rows);
    const lines = aligned(r.rows.map((row) => [rowLabel(row, !uniform), shownValue(row)]));
    return [`${this.what} (${percent(r.confidence)}, noise-only error bars):`, ...lines, cost].join("\n");
  }

  toJSON(): Release {
    return this.release;
  }

  #scalarRow(): ReleaseRow {
    if (!this.isScalar) {
      throw new BadInputError(`this result has ${this.release.rows.length} numbers (${this.what}); read them from .rows or .get(key)`);
    }
    return this.release.rows[0];
  }
}
