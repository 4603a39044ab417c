/**
 * The durable spend ledger: one SQLite row per release (better-sqlite3, WAL, synchronous=FULL).
 * Spend, seq and the receipt hash chain are per (analyst, population): the datasets of one
 * population (policy.ts, populations.ts) draw on one account.
 *
 * The ledger, not any in-memory counter, is the source of truth for spend: two curator processes
 * may share one ledger file (two notebooks each starting an embedded curator on the same policy),
 * so the replay lookup, the cap check and the insert happen in one BEGIN IMMEDIATE transaction,
 * which holds SQLite's write lock from the first read. Amounts are exact rationals stored as text.
 */
import Database from "better-sqlite3";
import { chmodSync, existsSync, mkdirSync } from "node:fs";
import { dirname } from "node:path";
import { Rational } from "../core/index.js";
import { PolicyError } from "../errors.js";
import type { QueryPlan, Receipt, Release } from "../protocol/messages.js";
import { GENESIS_PREV, receiptHash } from "../protocol/receipts.js";

/** 2: spend keyed by (analyst, population). Version 1 keyed it by dataset name and is refused. */
const SCHEMA_VERSION = "2";

export interface LedgerRow {
  analyst: string;
  population: string;
  dataset: string;
  /** Per (analyst, population). */
  seq: number;
  digest: string;
  plan: QueryPlan;
  /** Exact rationals in the population's accounting unit; `total` is the population's running total. */
  cost: string;
  total: string;
  /** The release as first sent (its `replay` is false, its `spend` the spend right after it). */
  release: Release;
  receipt: Receipt;
  issuedAt: string;
}

/** What a new row is built from: the chain position the transaction found. */
export interface DebitContext {
  seq: number;
  prev: string;
  /** Running total after this release. */
  total: Rational;
  issuedAt: string;
}

export type DebitOutcome =
  | { kind: "new"; row: LedgerRow }
  | { kind: "replay"; row: LedgerRow }
  | { kind: "over-cap"; spent: Rational; releases: number };

interface RawRow {
  analyst: string;
  population: string;
  dataset: string;
  seq: number;
  digest: string;
  plan: string;
  cost: string;
  total: string;
  release: string;
  receipt: string;
  issued_at: string;
}

function fromRaw(r: RawRow): LedgerRow {
  return {
    analyst: r.analyst,
    population: r.population,
    dataset: r.dataset,
    seq: r.seq,
    digest: r.digest,
    plan: JSON.parse(r.plan) as QueryPlan,
    cost: r.cost,
    total: r.total,
    release: JSON.parse(r.release) as Release,
    receipt: JSON.parse(r.receipt) as Receipt,
    issuedAt: r.issued_at,
  };
}

export class Ledger {
  private constructor(private readonly db: Database.Database) {}

  static open(path: string): Ledger {
    const fresh = !existsSync(path);
    if (fresh) mkdirSync(dirname(path), { recursive: true, mode: 0o700 });
    let db: Database.Database;
    try {
      db = new Database(path);
    } catch (e: unknown) {
      throw new PolicyError(`ledger ${path} cannot be opened`, { cause: e });
    }
    if (fresh) chmodSync(path, 0o600);
    db.pragma("journal_mode = WAL");
    // FULL: a committed release survives power loss, so a released answer is never un-debited.
    db.pragma("synchronous = FULL");
    // Another curator process on the same file may hold the write lock for one short transaction.
    db.pragma("busy_timeout = 10000");
    db.exec("CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL)");
    // Checked before anything else is created, so a ledger of another layout is never read as this one.
    const version = db.prepare("SELECT value FROM meta WHERE key = 'schema'").get() as { value: string } | undefined;
    const hasReleases = db.prepare("SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'releases'").get() !== undefined;
    if ((version === undefined && hasReleases) || (version !== undefined && version.value !== SCHEMA_VERSION)) {
      db.close();
      throw new PolicyError(
        `ledger ${path} has layout version ${version?.value ?? "unknown"}; this curator reads version ${SCHEMA_VERSION} ` +
          `(spend per analyst and population). It is not read, so no spend is miscounted: keep it for the record ` +
          `and point curator.ledger in the policy at a new file`,
      );
    }
    db.exec(`
      CREATE TABLE IF NOT EXISTS releases (
        analyst TEXT NOT NULL,
        population TEXT NOT NULL,
        dataset TEXT NOT NULL,
        seq INTEGER NOT NULL,
        digest TEXT NOT NULL,
        plan TEXT NOT NULL,
        cost TEXT NOT NULL,
        total TEXT NOT NULL,
        release TEXT NOT NULL,
        receipt TEXT NOT NULL,
        receipt_hash TEXT NOT NULL,
        issued_at TEXT NOT NULL,
        PRIMARY KEY (analyst, population, seq),
        UNIQUE (analyst, population, digest)
      );
    `);
    if (version === undefined) db.prepare("INSERT OR IGNORE INTO meta (key, value) VALUES ('schema', ?)").run(SCHEMA_VERSION);
    return new Ledger(db);
  }

  close(): void {
    if (this.db.open) this.db.close();
  }

  private last(analyst: string, population: string): { seq: number; total: string; receipt_hash: string } | undefined {
    return this.db
      .prepare("SELECT seq, total, receipt_hash FROM releases WHERE analyst = ? AND population = ? ORDER BY seq DESC LIMIT 1")
      .get(analyst, population) as { seq: number; total: string; receipt_hash: string } | undefined;
  }

  /** Spend so far for one analyst on one population (all its datasets), in its accounting unit. */
  spent(analyst: string, population: string): { spent: Rational; releases: number } {
    const last = this.last(analyst, population);
    return last === undefined ? { spent: Rational.ZERO, releases: 0 } : { spent: Rational.parse(last.total), releases: last.seq };
  }

  /** The release of this plan to this analyst, if any (the digest covers the dataset name). */
  find(analyst: string, population: string, digest: string): LedgerRow | null {
    const r = this.db
      .prepare("SELECT * FROM releases WHERE analyst = ? AND population = ? AND digest = ?")
      .get(analyst, population, digest) as RawRow | undefined;
    return r === undefined ? null : fromRaw(r);
  }

  /**
   * The mechanisms of one account's receipts with seq in (after, upTo], by seq (the spend
   * summary's pure-epsilon tally), one row at a time: a first tally after a restart reads the whole
   * history, and must not hold it in memory at once (10^6 receipts are over a gigabyte of JSON).
   * Only the mechanisms are taken out of each receipt (SQLite's json_extract).
   */
  *mechanismsBetween(analyst: string, population: string, after: number, upTo: number): Generator<Receipt["mechanisms"]> {
    const rows = this.db
      .prepare("SELECT json_extract(receipt, '$.mechanisms') AS m FROM releases WHERE analyst = ? AND population = ? AND seq > ? AND seq <= ? ORDER BY seq")
      .iterate(analyst, population, after, upTo) as IterableIterator<{ m: string }>;
    for (const r of rows) yield JSON.parse(r.m) as Receipt["mechanisms"];
  }

  /**
   * One page of an analyst's rows (optionally one dataset): in each population the `limit` latest
   * with seq below `before`, by population then seq, and how many rows below them were left out.
   * Index range scans on (analyst, population, seq): the work follows the page, not the history.
   * An account's seqs are 1, 2, 3, ... (debit), so without a dataset the rows left out number the
   * page's first seq minus one; with one, they are counted (only when the page is full).
   */
  page(analyst: string, dataset: string | undefined, before: number, limit: number): { rows: LedgerRow[]; earlier: number } {
    const populations = (this.db.prepare("SELECT DISTINCT population FROM releases WHERE analyst = ? ORDER BY population").all(analyst) as { population: string }[]).map((r) => r.population);
    const filter = dataset === undefined ? "" : " AND dataset = ?";
    const take = this.db.prepare(`SELECT * FROM releases WHERE analyst = ? AND population = ?${filter} AND seq < ? ORDER BY seq DESC LIMIT ?`);
    const below = this.db.prepare(`SELECT count(*) AS n FROM releases WHERE analyst = ? AND population = ?${filter} AND seq < ?`);
    const rows: LedgerRow[] = [];
    let earlier = 0;
    for (const population of populations) {
      const args = dataset === undefined ? [analyst, population] : [analyst, population, dataset];
      const got = (take.all(...args, before, limit) as RawRow[]).map(fromRaw).reverse();
      if (got.length === limit) earlier += dataset === undefined ? got[0].seq - 1 : (below.get(...args, got[0].seq) as { n: number }).n;
      rows.push(...got);
    }
    return { rows, earlier };
  }

  /** All rows of one analyst (optionally one dataset), by population then seq. */
  entries(analyst: string, dataset?: string): LedgerRow[] {
    const rows =
      dataset === undefined
        ? this.db.prepare("SELECT * FROM releases WHERE analyst = ? ORDER BY population, seq").all(analyst)
        : this.db.prepare("SELECT * FROM releases WHERE analyst = ? AND dataset = ? ORDER BY population, seq").all(analyst, dataset);
    return (rows as RawRow[]).map(fromRaw);
  }

  /**
   * Check-and-debit in one BEGIN IMMEDIATE transaction: if the same plan was already released to
   * this analyst, return that row (no spend); if `cost` would take the population's total past `cap`, debit
   * nothing; otherwise build the row (signing happens inside `build`) and commit it. The caller
   * sends the answer only after this returns, so a sent answer is always on disk.
   */
  debit(args: {
    analyst: string;
    population: string;
    dataset: string;
    digest: string;
    plan: QueryPlan;
    cost: Rational;
    cap: Rational;
    build: (ctx: DebitContext) => { release: Release; receipt: Receipt };
  }): DebitOutcome {
    const { analyst, population, dataset, digest, plan, cost, cap } = args;
    const run = this.db.transaction((): DebitOutcome => {
      const earlier = this.find(analyst, population, digest);
      if (earlier !== null) return { kind: "replay", row: earlier };
      const last = this.last(analyst, population);
      const spent = last === undefined ? Rational.ZERO : Rational.parse(last.total);
      const releases = last === undefined ? 0 : last.seq;
      const total = spent.add(cost);
      if (total.gt(cap)) return { kind: "over-cap", spent, releases };
      const ctx: DebitContext = {
        seq: releases + 1,
        prev: last === undefined ? GENESIS_PREV : last.receipt_hash,
        total,
        issuedAt: new Date().toISOString(),
      };
      const { release, receipt } = args.build(ctx);
      this.db
        .prepare(
          `INSERT INTO releases (analyst, population, dataset, seq, digest, plan, cost, total, release, receipt, receipt_hash, issued_at)
           VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
        )
        .run(
          analyst,
          population,
          dataset,
          ctx.seq,
          digest,
          JSON.stringify(plan),
          cost.toString(),
          total.toString(),
          JSON.stringify(release),
          JSON.stringify(receipt),
          receiptHash(receipt),
          ctx.issuedAt,
        );
      return {
        kind: "new",
        row: {
          analyst,
          population,
          dataset,
          seq: ctx.seq,
          digest,
          plan,
          cost: cost.toString(),
          total: total.toString(),
          release,
          receipt,
          issuedAt: ctx.issuedAt,
        },
      };
    });
    return run.immediate();
  }
}
