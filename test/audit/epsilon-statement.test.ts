/**
 * The audit reads back the epsilon a zCDP release states beside its spend ("ε 1 of 3 at
 * δ=0.000001, by plain composition", runtime/api/text.ts epsilonAtDelta) and recomputes it from
 * the receipts (docs/methods.md §22): the right statement passes, a wrong one is a finding. Check
 * values: ten pure epsilon = 0.1 releases give epsilon 1 by plain composition ([C22.1]); the
 * conversion of rho 1/20 is 1.47159475053 by mpmath ([C2.6c]), shown as 1.4716.
 */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { auditNotebook } from "../../cli/audit/checks.js";
import type { Notebook } from "../../cli/audit/notebook.js";
import { formatReport } from "../../cli/audit/report.js";
import { epsilonAtDelta } from "../../runtime/api/text.js";
import { Rational, bestEpsilon, pureEpsilonOfParts } from "../../runtime/core/index.js";
import { type CuratorKey, generateCuratorKey, loadCuratorKey } from "../../runtime/curator/keys.js";
import { signReceipt } from "../../runtime/curator/receipts.js";
import type { MechanismRecord, Receipt, SpendSummary } from "../../runtime/protocol/messages.js";
import { GENESIS_PREV, receiptHash } from "../../runtime/protocol/receipts.js";
import { assembleNotebook, releaseCell, rowsOf } from "./signed-notebook.js";

const DELTA = "0.000001";
// epsilon 0.1 on a count: discrete Laplace at t = 1/0.1 = 10, charged rho 0.1^2/2 = 1/200
const PURE: MechanismRecord = { target: "count", family: "discrete-laplace", scale: "10", sensitivity: "1", step: "1", cost: "1/200" };
const GAUSS: MechanismRecord = { target: "count", family: "discrete-gaussian", scale: "100", sensitivity: "1", step: "1", cost: "1/200" };

function zcdpChain(key: CuratorKey, parts: MechanismRecord[]): Receipt[] {
  let prev = GENESIS_PREV;
  let total = Rational.ZERO;
  return parts.map((m, i) => {
    total = total.add(Rational.parse(m.cost));
    const r = signReceipt(
      {
        analyst: "kit",
        dataset: "visits-zcdp",
        population: "clinic-patients",
        seq: i + 1,
        digest: String(i + 1).padStart(64, "0"),
        cell: releaseCell(i + 1),
        unit: "rho",
        cost: m.cost,
        total: total.toString(),
        cap: "1/5",
        delta: DELTA,
        result: rowsOf("count", null, [[String(1000 + i), String(990 + i), String(1010 + i)]]),
        mechanisms: [m],
        issuedAt: `2025-03-01T10:${String(i).padStart(2, "0")}:00.000Z`,
        prev,
      },
      key,
    );
    prev = receiptHash(r);
    return r;
  });
}

/** The notebook as the kernel writes it: each fresh release's cost line ends with the statement. */
function withStatements(receipts: Receipt[], say: (r: Receipt, honest: string) => string = (_r, h) => h, chain = receipts): Notebook {
  const nb = assembleNotebook(receipts);
  let pure: Rational | null = Rational.ZERO;
  const honest = new Map<number, string>();
  for (const r of chain) {
    const e = pureEpsilonOfParts(r.mechanisms);
    pure = pure === null || e === null ? null : pure.add(e);
    const best = bestEpsilon(Rational.parse(r.total), pure, Rational.parse(DELTA));
    const s = { spentEpsilon: best.epsilon.toString(), capEpsilon: "3", delta: DELTA, epsilonBy: best.by } as SpendSummary;
    honest.set(r.seq, epsilonAtDelta(s));
  }
  for (const c of nb.cells) {
    for (const o of c.outputs ?? []) {
      const meta = o.metadata?.["hush"] as { receipt: Receipt; replay: boolean } | undefined;
      if (meta === undefined || meta.replay || typeof o.data?.["text/plain"] !== "string") continue;
      const text = (o.data["text/plain"] as string).replace("cost ε=", "cost ρ=");
      o.data["text/plain"] = `${text} (${say(meta.receipt, honest.get(meta.receipt.seq) as string)})`;
    }
  }
  return nb;
}

describe("the audit checks the stated epsilon of a zCDP notebook (docs/methods.md §22)", () => {
  let dir: string;
  let key: CuratorKey;
  beforeAll(() => {
    dir = mkdtempSync(join(tmpdir(), "hush-eps-"));
    generateCuratorKey(join(dir, "curator.key"));
    key = loadCuratorKey(join(dir, "curator.key"));
  });
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  it("accepts ten pure releases stated by plain composition and reports epsilon 1", () => {
    const receipts = zcdpChain(key, Array.from({ length: 10 }, () => PURE));
    const nb = withStatements(receipts);
    const text = JSON.stringify(nb);
    expect(text).toContain("ε 1 of 3 at δ=0.000001, by plain composition");
    expect(text).toContain("ε 0.1 of 3 at δ=0.000001, by plain composition");
    const r = auditNotebook(nb, key.publicKey);
    expect(r.findings).toEqual([]);
    expect(r.notes).toEqual([]);
    expect(r).toMatchObject({ ok: true, total: "1/20", totalEpsilon: "1", epsilonBy: "plain composition" });
    expect(formatReport("nb.ipynb", r)).toContain("(ε 1 at δ 0.000001, by plain composition)");
  });

  it("rejects the conversion's 1.4716 when plain composition gives 1, and a made-up smaller figure", () => {
    const receipts = zcdpChain(key, Array.from({ length: 10 }, () => PURE));
    const conv = withStatements(receipts, (r, h) => (r.seq === 10 ? "ε 1.4716 of 3 at δ=0.000001, by zCDP conversion" : h));
    const a = auditNotebook(conv, key.publicKey);
    expect(a.findings.map((f) => f.kind)).toEqual(["epsilon-statement"]);
    expect(a.findings[0].message).toContain("plain composition gives the smaller ε 1");
    const low = withStatements(receipts, (r, h) => (r.seq === 10 ? "ε 0.9 of 3 at δ=0.000001, by plain composition" : h));
    const b = auditNotebook(low, key.publicKey);
    expect(b.findings.map((f) => f.kind)).toEqual(["epsilon-statement"]);
    expect(b.findings[0].message).toContain("gives ε 1");
  });

  it("with a Gaussian release in the chain: accepts the conversion, rejects a claim of plain composition", () => {
    const receipts = zcdpChain(key, [PURE, GAUSS, ...Array.from({ length: 8 }, () => PURE)]);
    const honest = auditNotebook(withStatements(receipts), key.publicKey);
    expect(honest.findings).toEqual([]);
    expect(honest).toMatchObject({ totalEpsilon: "1.4716", epsilonBy: "zCDP conversion" });
    expect(JSON.stringify(withStatements(receipts))).toContain("ε 1.4716 of 3 at δ=0.000001, by zCDP conversion");
    const claim = withStatements(receipts, (r, h) => (r.seq === 10 ? "ε 1 of 3 at δ=0.000001, by plain composition" : h));
    const c = auditNotebook(claim, key.publicKey);
    expect(c.findings.map((f) => f.kind)).toEqual(["epsilon-statement"]);
    expect(c.findings[0].message).toContain("not pure epsilon-DP");
  });

  it("a forged part (Laplace charged less than epsilon^2/2) is not pure: plain composition is refused", () => {
    const forged = { ...PURE, cost: "1/400" };
    const receipts = zcdpChain(key, Array.from({ length: 4 }, () => forged));
    const claim = withStatements(receipts, (r) => `ε ${r.seq / 10} of 3 at δ=0.000001, by plain composition`);
    expect(auditNotebook(claim, key.publicKey).findings.every((f) => f.kind === "epsilon-statement")).toBe(true);
    expect(auditNotebook(claim, key.publicKey).findings).toHaveLength(4);
  });

  it("an older statement without its route passes when it is the conversion", () => {
    const receipts = zcdpChain(key, [GAUSS, PURE]); // not pure from seq 1: every honest figure is the conversion
    const old = withStatements(receipts, (_r, h) => h.replace(/, by .*$/, ""));
    expect(auditNotebook(old, key.publicKey).findings).toEqual([]);
  });

  it("plain composition over seqs the notebook does not show is a note, not a finding", () => {
    const receipts = zcdpChain(key, Array.from({ length: 4 }, () => PURE));
    const nb = withStatements([receipts[0], receipts[2], receipts[3]], undefined, receipts);
    const r = auditNotebook(nb, key.publicKey);
    expect(r.findings).toEqual([]);
    expect(r.notes.map((f) => f.kind).sort()).toEqual(["epsilon-statement-unverified", "epsilon-statement-unverified", "superseded"]);
    // the final figure falls back to the conversion, which holds without the missing receipts
    expect(r.epsilonBy).toBe("zCDP conversion");
  });
});
