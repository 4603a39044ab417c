/**
 * `hush ledger --policy FILE [--analyst NAME] [--json]`: the steward's view of spend per analyst and
 * dataset; the spend shown is the analyst's on the dataset's population (shared by all its datasets).
 * Opens the ledger read-only, so it is safe beside a running curator and never changes spend.
 */
import { existsSync } from "node:fs";
import Database from "better-sqlite3";
import { Rational, epsilonFromRho } from "../../runtime/core/index.js";
import { loadPolicy } from "../../runtime/curator/policy.js";
import { BadInputError } from "../../runtime/errors.js";
import { formatDecimal } from "../../runtime/protocol/format.js";

export interface LedgerLine {
  analyst: string;
  dataset: string;
  population: string;
  mode: "pure" | "zcdp";
  releases: number;
  /** Spend in the dataset's accounting unit (epsilon or rho), exact. */
  spent: string;
  cap: string;
  remaining: string;
  /** zCDP: spend as epsilon at the policy's delta (rounded up). */
  spentEpsilon: string;
  lastRelease: string | null;
}

export function readLedger(policyFile: string, analyst?: string): LedgerLine[] {
  const policy = loadPolicy(policyFile);
  if (analyst !== undefined && !policy.analysts.has(analyst)) throw new BadInputError(`analyst "${analyst}" is not in ${policyFile}`);
  const totals = new Map<string, { seq: number; total: string; issued_at: string }>();
  if (existsSync(policy.ledgerPath)) {
    const db = new Database(policy.ledgerPath, { readonly: true, fileMustExist: true });
    try {
      // The last row of each (analyst, population) chain holds its running total.
      const rows = db
        .prepare(
          `SELECT r.analyst, r.population, r.seq, r.total, r.issued_at FROM releases r
           JOIN (SELECT analyst, population, MAX(seq) AS seq FROM releases GROUP BY analyst, population) m
           ON r.analyst = m.analyst AND r.population = m.population AND r.seq = m.seq`,
        )
        .all() as { analyst: string; population: string; seq: number; total: string; issued_at: string }[];
      for (const r of rows) totals.set(JSON.stringify([r.analyst, r.population]), r);
    } finally {
      db.close();
    }
  }
  const lines: LedgerLine[] = [];
  for (const d of policy.datasets.values()) {
    for (const a of d.analysts) {
      if (analyst !== undefined && a !== analyst) continue;
      const t = totals.get(JSON.stringify([a, d.population]));
      const spent = t === undefined ? Rational.ZERO : Rational.parse(t.total);
      const acc = d.accounting;
      const cap = acc.mode === "pure" ? acc.capEpsilon : acc.capRho;
      lines.push({
        analyst: a,
        dataset: d.name,
        population: d.population,
        mode: acc.mode,
        releases: t?.seq ?? 0,
        spent: spent.toString(),
        cap: cap.toString(),
        remaining: cap.sub(spent).toString(),
        spentEpsilon: (acc.mode === "pure" ? spent : epsilonFromRho(spent, acc.delta)).toDecimal(),
        lastRelease: t?.issued_at ?? null,
      });
    }
  }
  return lines;
}

export function runLedger(o: { policy: string; analyst?: string; json?: boolean }, out: (s: string) => void): void {
  const lines = readLedger(o.policy, o.analyst);
  if (o.json === true) {
    out(`${JSON.stringify(lines, null, 2)}\n`);
    return;
  }
  const dec = (s: string): string => formatDecimal(s, 6);
  const table = [["analyst", "dataset", "releases", "spent", "cap", "remaining", "last release", "population"]];
  for (const l of lines) {
    const unit = l.mode === "pure" ? "ε" : "ρ";
    const spent = l.mode === "pure" ? `${unit} ${dec(l.spent)}` : `${unit} ${dec(l.spent)} (ε ${dec(l.spentEpsilon)})`;
    table.push([l.analyst, l.dataset, String(l.releases), spent, `${unit} ${dec(l.cap)}`, `${unit} ${dec(l.remaining)}`, l.lastRelease ?? "-", l.population]);
  }
  const widths = table[0].map((_, i) => Math.max(...table.map((r) => r[i].length)));
  for (const r of table) out(`${r.map((c, i) => c.padEnd(widths[i])).join("  ").trimEnd()}\n`);
}
