/**
 * Ledger checks shared by the load and crash tests. The ledger file is opened read-only with
 * better-sqlite3 (straight SQL, not the curator's Ledger class), so a bug in the curator's own
 * reading code cannot hide a bad row.
 */
import Database from "better-sqlite3";
import type { KeyObject } from "node:crypto";
import { Rational } from "../../runtime/core/index.js";
import type { Receipt } from "../../runtime/protocol/messages.js";
import { receiptHash } from "../../runtime/protocol/receipts.js";
import { checkReceiptChains } from "../../cli/audit/chain.js";

export interface RawLedgerRow {
  analyst: string;
  population: string;
  dataset: string;
  seq: number;
  digest: string;
  cost: string;
  total: string;
  receipt: Receipt;
  receiptHash: string;
  storedHash: string;
}

export function readLedger(file: string): RawLedgerRow[] {
  const db = new Database(file, { readonly: true, fileMustExist: true });
  try {
    const rows = db
      .prepare("SELECT analyst, population, dataset, seq, digest, cost, total, receipt, receipt_hash FROM releases ORDER BY analyst, population, seq")
      .all() as { analyst: string; population: string; dataset: string; seq: number; digest: string; cost: string; total: string; receipt: string; receipt_hash: string }[];
    return rows.map((r) => {
      const receipt = JSON.parse(r.receipt) as Receipt;
      return {
        analyst: r.analyst,
        population: r.population,
        dataset: r.dataset,
        seq: r.seq,
        digest: r.digest,
        cost: r.cost,
        total: r.total,
        receipt,
        receiptHash: receiptHash(receipt),
        storedHash: r.receipt_hash,
      };
    });
  } finally {
    db.close();
  }
}

/**
 * Every problem found in the ledger: chains broken (the audit's chain checks over all receipts), a row whose
 * columns disagree with its signed receipt, running totals that do not add up in exact rationals,
 * totals over the cap, two rows for one plan. Empty when the ledger is consistent.
 */
export function ledgerProblems(rows: RawLedgerRow[], publicKey: KeyObject, cap: string): string[] {
  const problems: string[] = [];
  for (const f of checkReceiptChains(
    rows.map((r) => r.receipt),
    publicKey,
  )) {
    problems.push(`chain: ${f.kind}: ${f.message}`);
  }
  const capR = Rational.parse(cap);
  const byChain = new Map<string, RawLedgerRow[]>();
  for (const r of rows) {
    const where = `${r.analyst}/${r.population} seq ${r.seq}`;
    if (r.storedHash !== r.receiptHash) problems.push(`${where}: stored receipt_hash differs from the receipt's hash`);
    const rc = r.receipt;
    if (rc.analyst !== r.analyst || rc.population !== r.population || rc.dataset !== r.dataset || rc.seq !== r.seq || rc.digest !== r.digest) {
      problems.push(`${where}: row columns disagree with its receipt`);
    }
    if (rc.cost !== r.cost || rc.total !== r.total) problems.push(`${where}: row cost/total disagree with its receipt`);
    const k = `${r.analyst}\u0000${r.population}`;
    byChain.set(k, [...(byChain.get(k) ?? []), r]);
  }
  for (const list of byChain.values()) {
    let running = Rational.ZERO;
    const digests = new Set<string>();
    list.forEach((r, i) => {
      const where = `${r.analyst}/${r.population} seq ${r.seq}`;
      if (r.seq !== i + 1) problems.push(`${where}: expected seq ${i + 1}`);
      running = running.add(Rational.parse(r.cost));
      if (!running.eq(Rational.parse(r.total))) problems.push(`${where}: total ${r.total} but costs add up to ${running.toString()}`);
      if (running.gt(capR)) problems.push(`${where}: total ${running.toString()} exceeds the cap ${cap}`);
      if (Rational.parse(r.cost).sign() <= 0) problems.push(`${where}: cost ${r.cost} is not positive`);
      if (digests.has(r.digest)) problems.push(`${where}: plan digest ${r.digest.slice(0, 12)} released twice`);
      digests.add(r.digest);
    });
  }
  return problems;
}

/** Sum of exact decimal strings. */
export function sumOf(values: Iterable<string>): Rational {
  let s = Rational.ZERO;
  for (const v of values) s = s.add(Rational.parse(v));
  return s;
}
