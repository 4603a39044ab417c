/**
 * What this kernel session has released: one record per answered query, the session's spend per
 * dataset (exact, in the dataset's accounting unit), the latest spend summary the curator reported,
 * and the records since the end of the last cell (for the running privacy-loss line under a cell).
 *
 * The cap itself is per analyst and population (every dataset over the same people draws on one
 * account) and lives in the curator's ledger; this only tracks the
 * part spent by this kernel, which is what "session" means in every display.
 */
import { Rational } from "../core/index.js";
import type { Receipt, Release, SpendSummary } from "../protocol/messages.js";
import { spendAmounts } from "./text.js";

export interface QueryRecord {
  /** Receipt sequence number (per analyst and population). */
  seq: number;
  dataset: string;
  /** Short description of the query, e.g. "mean wait_minutes by district". */
  what: string;
  /** Cost debited by this query ("0" for a replay), exact, in `unit`. */
  cost: string;
  unit: Receipt["unit"];
  replay: boolean;
  /** Analyst's total on the dataset's population after this query, exact, in `unit`. */
  total: string;
  cap: string;
  issuedAt: string;
}

export class SessionSpend {
  private readonly records: QueryRecord[] = [];
  private readonly spent = new Map<string, Rational>();
  private readonly summaries = new Map<string, SpendSummary>();
  private readonly opened = new Set<string>();
  private sinceCell: QueryRecord[] = [];

  /** Notes a release; returns the session's spend on its dataset after it (exact string). */
  record(release: Release, what: string): { record: QueryRecord; sessionSpent: string } {
    const cost = release.replay ? "0" : release.cost;
    const before = this.spent.get(release.dataset) ?? Rational.ZERO;
    const after = release.replay ? before : before.add(Rational.parse(release.cost));
    this.spent.set(release.dataset, after);
    this.noteSpend(release.spend);
    const r = release.receipt;
    // A replay carries its original receipt; the analyst's total is the current one.
    const now = spendAmounts(release.spend);
    const record: QueryRecord = Object.freeze({
      seq: r.seq,
      dataset: release.dataset,
      what,
      cost,
      unit: r.unit,
      replay: release.replay,
      total: now.total,
      cap: now.cap,
      issuedAt: r.issuedAt,
    });
    this.records.push(record);
    this.sinceCell.push(record);
    return { record, sessionSpent: after.toString() };
  }

  /** Keeps the newest spend summary seen for a dataset (from a release, preview, open or refusal). */
  noteSpend(s: SpendSummary): void {
    this.summaries.set(s.dataset, s);
  }

  noteOpened(dataset: string): void {
    this.opened.add(dataset);
  }

  latest(dataset: string): SpendSummary | undefined {
    return this.summaries.get(dataset);
  }

  /** This session's spend on a dataset, exact, in the dataset's accounting unit. */
  sessionSpent(dataset: string): string {
    return (this.spent.get(dataset) ?? Rational.ZERO).toString();
  }

  /** Records of this session, oldest first; only those on `dataset` when given. */
  queries(dataset?: string): QueryRecord[] {
    return this.records.filter((r) => dataset === undefined || r.dataset === dataset);
  }

  /** Datasets opened or queried in this session, in first-seen order. */
  datasets(): string[] {
    return [...new Set([...this.opened, ...this.records.map((r) => r.dataset)])];
  }

  /** The records since the last call (a cell's releases), and starts a new cell. */
  takeCell(): QueryRecord[] {
    const out = this.sinceCell;
    this.sinceCell = [];
    return out;
  }
}
