/**
 * Fair accounting of re-runs: what honest work produces (a cell run again after an edit, unchanged
 * cells answered again from their receipts, a kernel restart, cells run by hand out of order)
 * passes with the spend it no longer shows reported; what must fail still fails.
 * Receipts are signed in the test with the curator's signing code; the re-runs are laid out as the
 * kernel lays them out (a replay shows its earlier receipt, "replayed, no new cost").
 */
import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { type AuditReport, auditNotebook } from "../../cli/audit/checks.js";
import type { Notebook } from "../../cli/audit/notebook.js";
import { Rational } from "../../runtime/core/index.js";
import { type CuratorKey, generateCuratorKey, loadCuratorKey } from "../../runtime/curator/keys.js";
import type { Receipt } from "../../runtime/protocol/messages.js";
import { runCli } from "./corpus.js";
import { notebookOf } from "./laid-out.js";
import { rowsOf, signedChain } from "./signed-notebook.js";

const count = (v: number) => rowsOf("count", null, [[String(v), String(v - 30), String(v + 30)]]);

describe("audit of notebooks re-run by an honest student", () => {
  let dir: string;
  let key: CuratorKey;
  const kinds = (r: AuditReport) => r.findings.map((f) => f.kind);
  beforeAll(() => {
    dir = mkdtempSync(join(tmpdir(), "hush-rerun-"));
    generateCuratorKey(join(dir, "curator.key"));
    key = loadCuratorKey(join(dir, "curator.key"));
  });
  afterAll(() => rmSync(dir, { recursive: true, force: true }));
  const audit = (nb: Notebook, o: { strict?: boolean; cap?: string } = {}) =>
    auditNotebook(nb, key.publicKey, { strict: o.strict === true, ...(o.cap === undefined ? {} : { cap: Rational.parse(o.cap) }) });
  const chain = (costs: string[], cap = "1") =>
    signedChain(key, { analyst: "kit", dataset: "visits-course", cap }, costs.map((cost, i) => ({ cost, rows: count(1000 + i) })));

  it("passes a re-run after one ask changed: the old answer's spend is reported as not shown, exact, never as reordering or a gap", () => {
    // First run: four questions (seq 1..4). Q2's epsilon changed, the notebook run top to bottom:
    // Q1, Q3, Q4 are answered again from their receipts; Q2 gets seq 5.
    const [s1, s2, s3, s4, s5] = chain(["0.1", "0.2", "0.05", "0.1", "1/3"]);
    const nb = notebookOf([
      { r: s1, replay: true, n: 5 },
      { r: s5, n: 6 },
      { r: s3, replay: true, n: 7 },
      { r: s4, replay: true, n: 8 },
    ]);
    void s2;
    const r = audit(nb);
    expect(r.findings).toEqual([]);
    expect(r.ok).toBe(true);
    expect(r.superseded).toEqual({ releases: 1, spend: "0.2", runs: [{ from: 2, to: 2, spend: "0.2" }] });
    expect(r.notes.map((n) => n.kind)).toEqual(["superseded"]);
    expect(r.notes[0].message).toMatch(/^cell 3 \(In \[7\]\): receipt seq 3 follows seq 1 in cell 1 \(In \[5\]\): release 2 \(1 release, ε 0\.2 in all/);
    expect(r.notes[0].message).not.toMatch(/reorder|deleted\)|missing|forged/);
    // The spend counts: the total held to the cap is the last total, superseded spend included.
    expect(r.total).toBe(Rational.parse("0.1").add(Rational.parse("0.2")).add(Rational.parse("0.05")).add(Rational.parse("0.1")).add(Rational.of(1, 3)).toString());
    const file = join(dir, "rerun.ipynb");
    writeFileSync(file, JSON.stringify(nb));
    const cli = runCli(["audit", file, "--key", `${join(dir, "curator.key")}.pub`]);
    expect(cli.code).toBe(0);
    expect(cli.stdout).toMatch(/^ {2}not shown {5}1 release \(ε 0\.2\), spent but superseded or shown elsewhere; counted in the spend above$/m);
    expect(cli.stdout).toMatch(/^verdict: PASS \(4 receipts verified, spend within the cap, 1 release \(ε 0\.2\) not shown but counted\)$/m);
    const strict = runCli(["audit", file, "--key", `${join(dir, "curator.key")}.pub`, "--strict"]);
    expect(strict.code).toBe(1);
    expect(strict.stdout).toMatch(/\[superseded\] cell 3/);
    expect(strict.stdout).toMatch(/^verdict: FAIL \(1 finding\)$/m);
  });

  it("passes a re-run unchanged, and a kernel restarted midway (counts start again), even under --strict", () => {
    const [s1, s2, s3] = chain(["0.1", "0.2", "0.3"]);
    // Q1 and Q2 ran, the kernel restarted, all cells ran again: Q1 and Q2 replayed, Q3 new.
    const restarted = notebookOf([{ r: s1, replay: true, n: 1 }, { r: s2, replay: true, n: 2 }, { r: s3, n: 3 }]);
    for (const strict of [false, true]) {
      const r = audit(restarted, { strict });
      expect(r.findings).toEqual([]);
      expect(r.notes).toEqual([]);
      expect(r.superseded.releases).toBe(0);
    }
    // Restarted after changing Q2: seqs 1..3 ran, then 1 (replay), 4, 3 (replay).
    const [t1, , t3, t4] = chain(["0.1", "0.2", "0.3", "0.25"]);
    const changed = audit(notebookOf([{ r: t1, replay: true, n: 1 }, { r: t4, n: 2 }, { r: t3, replay: true, n: 3 }]));
    expect(changed.ok).toBe(true);
    expect(changed.superseded).toMatchObject({ releases: 1, spend: "0.2" });
  });

  it("passes cells run by hand out of order, with a note that says so by their In [n]", () => {
    // Q3 was run first (seq 1), then Q1, Q2, Q4.
    const [a, b, c, d] = chain(["0.1", "0.1", "0.1", "0.1"]);
    const nb = notebookOf([{ r: b, n: 2 }, { r: c, n: 3 }, { r: a, n: 1 }, { r: d, n: 4 }]);
    const r = audit(nb);
    expect(r.ok).toBe(true);
    expect(r.notes.map((n) => n.kind)).toEqual(["spend-order"]);
    expect(r.notes[0].message).toContain("its cell was run before that one (In [1] before In [3])");
    expect(kinds(audit(nb, { strict: true }))).toEqual(["spend-order"]);
  });

  it("reports several runs of not-shown spend (the start of the chain and two gaps) with their exact sum", () => {
    const s = chain(["0.1", "0.2", "1/3", "0.05", "0.1", "1/7", "0.01"], "2");
    const r = audit(notebookOf([{ r: s[2], n: 1 }, { r: s[4], n: 2 }, { r: s[6], n: 3 }]));
    expect(r.ok).toBe(true);
    const sum = ["0.1", "0.2", "0.05", "1/7"].reduce((x, y) => x.add(Rational.parse(y)), Rational.ZERO);
    expect(r.superseded.releases).toBe(4);
    expect(Rational.parse(r.superseded.spend!).eq(sum)).toBe(true);
    expect(r.superseded.runs.map((x) => [x.from, x.to])).toEqual([[1, 2], [4, 4], [6, 6]]);
    expect(r.notes[0].message).toMatch(/the first receipt shown is seq 3: releases 1\.\.2 \(2 releases, ε 0\.3 in all/);
  });

  it("still fails an edited receipt, an over-cap chain and totals that do not add up, superseded spend included", () => {
    const [s1, , s3, s4] = chain(["0.1", "0.2", "0.05", "0.1"]);
    const base = [{ r: s1, replay: true, n: 3 }, { r: s4, n: 4 }, { r: s3, replay: true, n: 5 }];
    // An edited receipt in a re-run notebook: the signature.
    const edited = notebookOf(base);
    const meta = edited.cells[2].outputs![0].metadata!.hush as { receipt: Receipt };
    meta.receipt = { ...meta.receipt, cost: "0.01" };
    expect(kinds(audit(edited))).toContain("signature");
    // Superseded spend counts against the review cap: what is shown costs 0.25, the chain 0.45.
    expect(audit(notebookOf(base), { cap: "0.44" }).findings.map((f) => f.kind)).toEqual(["cap"]);
    expect(audit(notebookOf(base), { cap: "0.45" }).ok).toBe(true);
    // A chain over its signed cap, the overspend in a release not shown.
    const [o1, , o3] = chain(["0.4", "0.5", "0.3"]);
    expect(kinds(audit(notebookOf([{ r: o1, n: 1 }, { r: o3, n: 2 }])))).toEqual(["cap"]);
    // Totals that leave nothing for a missing release (only a forger's receipts could): seq 3
    // with total 0.4 after seq 1 with total 0.3 leaves 0.4 - 0.1 - 0.3 = 0 for seq 2.
    const resigned = signedChain(key, { analyst: "kit", dataset: "visits-course", cap: "1" }, [
      { cost: "0.3", rows: count(1) },
      { cost: "0.1", rows: count(2) },
      { cost: "0.1", rows: count(3) },
    ]);
    const r3 = { ...resigned[2], total: "0.4" };
    const bad = audit(notebookOf([{ r: resigned[0], n: 1 }, { r: r3, n: 2 }]));
    expect(kinds(bad)).toEqual(expect.arrayContaining(["signature", "total"]));
    expect(bad.findings.find((f) => f.kind === "total")!.message).toContain("the totals do not add up");
    expect(bad.superseded).toMatchObject({ releases: 1, spend: null });
    expect(bad.notes[0].message).toContain("spend unknown: see the total finding");
  });
});
