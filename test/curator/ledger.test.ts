import { generateKeyPairSync } from "node:crypto";
import { mkdtempSync, rmSync, statSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import Database from "better-sqlite3";
import { afterAll, describe, expect, it } from "vitest";
import { Rational } from "../../runtime/core/index.js";
import { Ledger } from "../../runtime/curator/ledger.js";
import type { CuratorKey } from "../../runtime/curator/keys.js";
import { signReceipt } from "../../runtime/curator/receipts.js";
import type { QueryPlan, Release } from "../../runtime/protocol/messages.js";
import { keyIdOf } from "../../runtime/protocol/receipts.js";
import { checkReceiptChains } from "../../cli/audit/chain.js";

const dir = mkdtempSync(join(tmpdir(), "hush-ledger-"));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

const { privateKey, publicKey } = generateKeyPairSync("ed25519");
const key: CuratorKey = { privateKey, publicKey, publicKeyB64: "", keyId: keyIdOf(publicKey) };

function plan(n: number, dataset = "visits"): QueryPlan {
  return { v: 1, dataset, measure: { kind: "count" }, privacy: { epsilon: "0.1" }, where: { op: "ge", column: "age", value: n } };
}

/** Every dataset here is about one population (the same people). */
const PEOPLE = "patients";

/** Debits one fake release of `cost` for `analyst`; the digest is the plan number. */
function debit(ledger: Ledger, analyst: string, n: number, cost: string, cap = "1", dataset = "visits", population = PEOPLE) {
  return ledger.debit({
    analyst,
    population,
    dataset,
    digest: `digest-${n}`,
    plan: plan(n, dataset),
    cost: Rational.parse(cost),
    cap: Rational.parse(cap),
    build: (ctx) => {
      const receipt = signReceipt(
        {
          analyst,
          dataset,
          population,
          seq: ctx.seq,
          digest: `digest-${n}`,
          unit: "epsilon",
          cost: Rational.parse(cost).toString(),
          total: ctx.total.toString(),
          cap: Rational.parse(cap).toString(),
          result: [[[], "count", null, String(n), null, null]],
          mechanisms: [],
          issuedAt: ctx.issuedAt,
          prev: ctx.prev,
        },
        key,
      );
      const release = { dataset, digest: `digest-${n}`, rows: [], receipt, replay: false } as unknown as Release;
      return { release, receipt };
    },
  });
}

describe("Ledger", () => {
  it("pages an analyst's history: the latest rows of each population below `before`, and a count of those left out", () => {
    const ledger = Ledger.open(join(dir, "pages.sqlite"));
    // 25 releases on the patients (alternating the datasets visits and labs), 3 on the staff.
    for (let i = 1; i <= 25; i++) expect(debit(ledger, "ada", i, "0.01", "1", i % 2 === 0 ? "labs" : "visits").kind).toBe("new");
    for (let i = 1; i <= 3; i++) expect(debit(ledger, "ada", 100 + i, "0.01", "1", "rota", "staff").kind).toBe("new");
    debit(ledger, "ben", 1, "0.01");
    const seqs = (p: ReturnType<Ledger["page"]>) => p.rows.map((r) => `${r.population}#${r.seq}`);
    const latest = ledger.page("ada", undefined, Number.MAX_SAFE_INTEGER, 10);
    expect(seqs(latest)).toEqual([...Array.from({ length: 10 }, (_, i) => `patients#${16 + i}`), "staff#1", "staff#2", "staff#3"]);
    expect(latest.earlier).toBe(15);
    const back = ledger.page("ada", undefined, 16, 10);
    expect(seqs(back)).toEqual([...Array.from({ length: 10 }, (_, i) => `patients#${6 + i}`), "staff#1", "staff#2", "staff#3"]);
    expect(back.earlier).toBe(5);
    // One dataset: labs holds the even seqs 2..24; the latest 10 are 6..24, and 2 and 4 are left out.
    const labs = ledger.page("ada", "labs", Number.MAX_SAFE_INTEGER, 10);
    expect(seqs(labs)).toEqual(Array.from({ length: 10 }, (_, i) => `patients#${6 + 2 * i}`));
    expect(labs.earlier).toBe(2);
    // A page that is not full leaves nothing out; another analyst's rows never show.
    expect(ledger.page("ada", undefined, Number.MAX_SAFE_INTEGER, 100)).toMatchObject({ earlier: 0 });
    expect(ledger.page("ada", undefined, Number.MAX_SAFE_INTEGER, 100).rows).toHaveLength(28);
    expect(seqs(ledger.page("ben", undefined, Number.MAX_SAFE_INTEGER, 10))).toEqual(["patients#1"]);
    expect(ledger.page("cy", undefined, Number.MAX_SAFE_INTEGER, 10)).toEqual({ rows: [], earlier: 0 });
    // The same rows as the whole history, page by page.
    const all: string[] = [];
    for (let before = Number.MAX_SAFE_INTEGER; ; ) {
      const p = ledger.page("ada", "visits", before, 4);
      all.unshift(...seqs(p));
      if (p.earlier === 0) break;
      before = p.rows[0].seq;
    }
    expect(all).toEqual(ledger.entries("ada", "visits").map((r) => `${r.population}#${r.seq}`));
    ledger.close();
  });

  it("streams one account's mechanisms in seq order, and a stream left early does not hold the ledger", () => {
    const ledger = Ledger.open(join(dir, "mechanisms.sqlite"));
    for (let i = 1; i <= 6; i++) expect(debit(ledger, "ada", i, "0.01").kind).toBe("new");
    debit(ledger, "ben", 1, "0.01");
    const seqsOf = [...ledger.mechanismsBetween("ada", PEOPLE, 2, 5)];
    expect(seqsOf).toHaveLength(3);
    for (const m of seqsOf) expect(m).toEqual([]);
    expect([...ledger.mechanismsBetween("ada", PEOPLE, 0, 100)]).toHaveLength(6);
    expect([...ledger.mechanismsBetween("ada", "staff", 0, 100)]).toHaveLength(0);
    // Leave a stream after its first row: the statement is closed, and the ledger takes a debit.
    for (const _ of ledger.mechanismsBetween("ada", PEOPLE, 0, 100)) break;
    expect(debit(ledger, "ada", 7, "0.01").kind).toBe("new");
    expect(ledger.spent("ada", PEOPLE).releases).toBe(7);
    ledger.close();
  });

  it("uses WAL with synchronous=FULL and a private file", () => {
    const path = join(dir, "pragmas", "ledger.sqlite");
    const ledger = Ledger.open(path);
    debit(ledger, "ada", 1, "0.1");
    ledger.close();
    expect(statSync(path).mode & 0o777).toBe(0o600);
    const db = new Database(path);
    expect(db.pragma("journal_mode", { simple: true })).toBe("wal");
    db.close();
    // synchronous is per connection: check the one the ledger opens.
    const again = Ledger.open(path) as unknown as { db: Database.Database };
    expect(again.db.pragma("synchronous", { simple: true })).toBe(2); // 2 = FULL (SQLite PRAGMA docs)
    (again as unknown as Ledger).close();
  });

  it("adds exactly: ten debits of 0.1 fill a cap of 1, the eleventh is refused and debits nothing", () => {
    const ledger = Ledger.open(join(dir, "exact.sqlite"));
    for (let i = 1; i <= 10; i++) {
      const out = debit(ledger, "ada", i, "0.1");
      expect(out.kind).toBe("new");
    }
    // docs/methods.md [C1.4c]: the exact sum of ten 1/10 is 1, where binary64 gives 0.9999999999999999 ([C1.4b]).
    expect(ledger.spent("ada", PEOPLE).spent.toString()).toBe("1");
    const refused = debit(ledger, "ada", 11, "0.1");
    expect(refused).toEqual({ kind: "over-cap", spent: Rational.ONE, releases: 10 });
    expect(ledger.entries("ada", "visits")).toHaveLength(10);
    // docs/methods.md §1 caution: with a cap of 0.3, 0.1 then 0.2 fits exactly.
    const b = Ledger.open(join(dir, "exact-b.sqlite"));
    expect(debit(b, "ada", 1, "0.1", "0.3").kind).toBe("new");
    expect(debit(b, "ada", 2, "0.2", "0.3").kind).toBe("new");
    expect(b.spent("ada", PEOPLE).spent.toString()).toBe("3/10");
    b.close();
    ledger.close();
  });

  it("returns the stored row for a plan already released, without spending", () => {
    const ledger = Ledger.open(join(dir, "replay.sqlite"));
    const first = debit(ledger, "ada", 7, "1/4");
    const second = debit(ledger, "ada", 7, "1/4");
    expect(first.kind).toBe("new");
    expect(second.kind).toBe("replay");
    if (first.kind !== "new" || second.kind !== "replay") throw new Error("unreachable");
    expect(second.row.receipt).toEqual(first.row.receipt);
    expect(ledger.spent("ada", PEOPLE)).toEqual({ spent: Rational.parse("1/4"), releases: 1 });
    // Another analyst asking the same plan pays for it: budgets are per analyst.
    expect(debit(ledger, "ben", 7, "1/4").kind).toBe("new");
    ledger.close();
  });

  it("keeps spend and the receipt chain across a reopen", () => {
    const path = join(dir, "reopen.sqlite");
    const a = Ledger.open(path);
    debit(a, "ada", 1, "1/3");
    debit(a, "ada", 2, "1/3");
    a.close();
    const b = Ledger.open(path);
    expect(b.spent("ada", PEOPLE)).toEqual({ spent: Rational.parse("2/3"), releases: 2 });
    debit(b, "ada", 3, "1/3");
    const entries = b.entries("ada");
    expect(entries.map((e) => e.seq)).toEqual([1, 2, 3]);
    expect(entries.map((e) => e.total)).toEqual(["1/3", "2/3", "1"]);
    expect(checkReceiptChains(entries.map((e) => e.receipt), publicKey)).toEqual([]);
    expect(b.find("ada", PEOPLE, "digest-2")?.plan).toEqual(plan(2));
    b.close();
  });

  it("keeps one account and one chain per (analyst, population) across datasets of that population", () => {
    const ledger = Ledger.open(join(dir, "population.sqlite"));
    expect(debit(ledger, "ada", 1, "0.5", "1", "visits").kind).toBe("new");
    expect(debit(ledger, "ada", 2, "0.5", "1", "visits-copy").kind).toBe("new");
    // The cap of 1 is reached over the two datasets together: a third debit on either is refused.
    expect(debit(ledger, "ada", 3, "0.1", "1", "visits-copy")).toEqual({ kind: "over-cap", spent: Rational.ONE, releases: 2 });
    expect(debit(ledger, "ada", 4, "0.1", "1", "visits").kind).toBe("over-cap");
    // A replay of a release on either dataset stays free.
    expect(debit(ledger, "ada", 1, "0.5", "1", "visits").kind).toBe("replay");
    const rows = ledger.entries("ada");
    expect(rows.map((r) => [r.dataset, r.seq, r.total])).toEqual([
      ["visits", 1, "1/2"],
      ["visits-copy", 2, "1"],
    ]);
    expect(rows[1].receipt.prev).not.toBe(rows[0].receipt.prev);
    expect(checkReceiptChains(rows.map((r) => r.receipt), publicKey)).toEqual([]);
    expect(ledger.entries("ada", "visits-copy").map((r) => r.seq)).toEqual([2]);
    ledger.close();
  });

  it("refuses a ledger written with spend per dataset (layout 1) instead of misreading it", () => {
    const path = join(dir, "old.sqlite");
    const db = new Database(path);
    db.exec(`CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
      INSERT INTO meta VALUES ('schema', '1');
      CREATE TABLE releases (analyst TEXT NOT NULL, dataset TEXT NOT NULL, seq INTEGER NOT NULL);`);
    db.close();
    expect(() => Ledger.open(path)).toThrow(/layout version 1; this curator reads version 2 \(spend per analyst and population\).*new file/);
    // A releases table without any layout record is refused the same way.
    const bare = join(dir, "bare.sqlite");
    const b = new Database(bare);
    b.exec("CREATE TABLE releases (analyst TEXT NOT NULL, dataset TEXT NOT NULL, seq INTEGER NOT NULL)");
    b.close();
    expect(() => Ledger.open(bare)).toThrow(/layout version unknown/);
  });

  it("rolls back when building the row fails", () => {
    const ledger = Ledger.open(join(dir, "rollback.sqlite"));
    expect(() =>
      ledger.debit({
        analyst: "ada",
        population: PEOPLE,
        dataset: "visits",
        digest: "d",
        plan: plan(1),
        cost: Rational.parse("0.1"),
        cap: Rational.ONE,
        build: () => {
          throw new Error("signing failed");
        },
      }),
    ).toThrow(/signing failed/);
    expect(ledger.spent("ada", PEOPLE).releases).toBe(0);
    ledger.close();
  });
});
