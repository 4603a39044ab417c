/** The audit corpus on a notebook assembled from receipts signed with the curator's signing code. */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { generateCuratorKey, loadCuratorKey } from "../../runtime/curator/keys.js";
import { signReasked, signReceipt } from "../../runtime/curator/receipts.js";
import { cellSourceDigest } from "../../runtime/protocol/cell-source.js";
import type { Notebook } from "../../cli/audit/notebook.js";
import { Rational } from "../../runtime/core/index.js";
import { GENESIS_PREV } from "../../runtime/protocol/receipts.js";
import { formatWithError } from "../../runtime/protocol/format.js";
import { auditNotebook } from "../../cli/audit/checks.js";
import { OUTPUT_METADATA_KEY } from "../../runtime/protocol/messages.js";
import { digestOf } from "../../runtime/protocol/canonical.js";
import { FSI, PDI, isolateRightToLeft, planWords } from "../../runtime/protocol/words.js";
import { type CorpusFixture, auditCorpus } from "./corpus.js";
import { clone, releaseWithSeq } from "./tamper.js";
import { badge, box, budgetBar, esc, notesList, table } from "../../kernel/display/html.js";
import { assembleNotebook, releaseCell, rowsOf, signedChain } from "./signed-notebook.js";

describe("notebook audit on a signed, assembled notebook", () => {
  let fx: CorpusFixture;
  beforeAll(() => {
    const dir = mkdtempSync(join(tmpdir(), "hush-audit-"));
    const keyFile = join(dir, "curator.key");
    generateCuratorKey(keyFile);
    const key = loadCuratorKey(keyFile);
    const student = { analyst: "kit", dataset: "visits-course", cap: "1" };
    const receipts = signedChain(key, student, [
      { cost: "0.05", rows: rowsOf("count", null, [["199871", "199811", "199931"]]) },
      {
        cost: "0.1",
        rows: rowsOf("mean", "wait_minutes", [["24.5", "23.25", "25.75"], ["56.5", "54", "59"]], [["Northgate"], ["Saltmarsh"]]),
      },
      { cost: "1/3", rows: rowsOf("p50", "cost", [["113.2", "108.9", "118.05"]]) },
      { cost: "0.2", rows: rowsOf("count", null, [["31002", "30902", "31102"]], [["Elmstead"]]) },
    ]);
    const [foreign] = signedChain(key, { analyst: "rowan", dataset: "visits", cap: "3" }, [
      { cost: "0.1", rows: rowsOf("count", null, [["200012", "199982", "200042"]]) },
    ]);
    fx = { nb: assembleNotebook(receipts), key: key.publicKey, keyFile: `${keyFile}.pub`, foreign, dir };
  });
  afterAll(() => rmSync(fx.dir, { recursive: true, force: true }));
  auditCorpus(() => fx);

  it("reports receipts of the wrong shape as malformed instead of failing on them", () => {
    const bad = clone(fx.nb);
    const garbage: unknown[] = [
      { format: "hush-receipt/1", seq: "one" },
      { ...releaseWithSeq(bad, 2).meta.receipt, result: [1, 2, 3] },
      { ...releaseWithSeq(bad, 3).meta.receipt, result: [[["x"], "count", null, { v: 1 }, null, null]] },
    ];
    const located = [1, 2, 3].map((seq) => releaseWithSeq(bad, seq));
    located.forEach((l, i) => {
      (l.output.metadata![OUTPUT_METADATA_KEY] as { receipt: unknown }).receipt = garbage[i];
    });
    const r = auditNotebook(bad, fx.key);
    expect(r.ok).toBe(false);
    for (const l of located) expect(r.findings.some((f) => f.kind === "malformed" && f.cell === l.cell)).toBe(true);
  });

  it("holds a zCDP notebook to --cap in epsilon (the rho total converted at the receipt's delta), not in rho", () => {
    const key = loadCuratorKey(join(fx.dir, "curator.key"));
    const r = signReceipt(
      {
        analyst: "kit",
        dataset: "visits-zcdp",
        population: "clinic-patients",
        seq: 1,
        digest: "1".padStart(64, "0"),
        cell: releaseCell(1),
        unit: "rho",
        cost: "1/200",
        total: "1/200",
        cap: "1/20",
        delta: "0.000001",
        result: rowsOf("count", null, [["199871", "199811", "199931"]]),
        mechanisms: [{ target: "count", family: "discrete-gaussian", scale: "10", sensitivity: "1", step: "1", cost: "1/200" }],
        issuedAt: "2025-03-01T10:00:00.000Z",
        prev: GENESIS_PREV,
      },
      key,
    );
    const nb = assembleNotebook([r, r]);
    for (const c of nb.cells) for (const o of c.outputs ?? []) if (typeof o.data?.["text/plain"] === "string") o.data["text/plain"] = (o.data["text/plain"] as string).replace("cost ε=", "cost ρ=");
    // rho = 0.005 is below a cap of 0.01, but as epsilon at delta 1e-6 it is about half:
    // eps <= rho + 2 sqrt(rho ln(1/delta)) (Bun & Steinke 2016, Prop. 1.3) = 0.5307.
    const clean = auditNotebook(nb, fx.key);
    expect(clean.findings).toEqual([]);
    const eps = Rational.parse(clean.totalEpsilon!).toNumber();
    expect(eps).toBeLessThanOrEqual(0.005 + 2 * Math.sqrt(0.005 * Math.log(1e6)) + 1e-9);
    expect(eps).toBeGreaterThan(0.3);
    expect(auditNotebook(nb, fx.key, { cap: Rational.parse("0.01") }).findings.map((f) => f.kind)).toEqual(["cap"]);
    expect(auditNotebook(nb, fx.key, { cap: Rational.parse("0.54") }).findings).toEqual([]);
  });

  it("checks two datasets of one population as one chain per (analyst, population), and keeps --dataset working", () => {
    const key = loadCuratorKey(join(fx.dir, "curator.key"));
    const who = { analyst: "rowan", dataset: "visits", cap: "3" };
    const count = (v: string) => rowsOf("count", null, [[v, String(Number(v) - 30), String(Number(v) + 30)]]);
    const receipts = signedChain(key, who, [
      { cost: "0.5", rows: count("200") },
      { cost: "1", rows: count("300"), dataset: "visits-course" },
      { cost: "0.25", rows: count("400") },
    ]);
    const nb = assembleNotebook(receipts);
    const r = auditNotebook(nb, fx.key, { analyst: "rowan", dataset: "visits-course" });
    expect(r.findings).toEqual([]);
    expect(r).toMatchObject({ ok: true, population: "clinic-patients", datasets: ["visits", "visits-course"], total: "7/4", receipts: 3 });
    expect(auditNotebook(nb, fx.key, { dataset: "visits" }).ok).toBe(true);
    expect(auditNotebook(nb, fx.key, { dataset: "visits-zcdp" }).findings.map((f) => f.kind)).toEqual(["owner"]);
    // Leaving out the other dataset's receipt breaks the population's chain: its spend is not shown
    // (reported with its cost from the totals; a finding under --strict).
    const partial = auditNotebook(assembleNotebook([receipts[0], receipts[2]]), fx.key);
    expect(partial.findings).toEqual([]);
    expect(partial.notes.map((f) => f.kind)).toEqual(["superseded"]);
    expect(partial.superseded).toMatchObject({ releases: 1, spend: "1" });
    expect(auditNotebook(assembleNotebook([receipts[0], receipts[2]]), fx.key, { strict: true }).findings.map((f) => f.kind)).toEqual(["superseded"]);
    // A receipt on another population of the same analyst is another chain: not mixed into this one.
    const [elsewhere] = signedChain(key, { ...who, population: "other-people" }, [{ cost: "0.1", rows: count("500") }]);
    const mixed = auditNotebook(assembleNotebook([...receipts, elsewhere]), fx.key);
    expect(mixed.findings.map((f) => f.kind)).toEqual(["mixed"]);
    expect(mixed.findings[0].message).toContain('population "other-people"');
  });

  it("reads a numeric group key before a bin key in an HTML table as labels, not as a figure (no false finding)", () => {
    const key = loadCuratorKey(join(fx.dir, "curator.key"));
    const rows = rowsOf("count", null, [["5995", "5755", "6235"], ["6120", "5880", "6360"]], [["2024", "[90, 100]"], ["2025", "[90, 100]"]]);
    const [r] = signedChain(key, { analyst: "kit", dataset: "visits-course", cap: "1" }, [{ cost: "0.1", rows }]);
    const nb = assembleNotebook([r, r]);
    for (const c of nb.cells) {
      for (const o of c.outputs ?? []) {
        if (o.data === undefined) continue;
        // The figures as the kernel rounds them ("6,000 ± 240", docs/methods.md §23), ± as a reference.
        const [a, b] = [formatWithError("5995", "5755", "6235"), formatWithError("6120", "5880", "6360")].map((f) => f.replace("±", "&plusmn;"));
        o.data["text/html"] = `<table><tr><td>2024</td><td>[90, 100]</td><td>${a}</td></tr><tr><td>2025</td><td>[90, 100]</td><td>${b}</td></tr></table><div>cost &epsilon;=0.1 · total 0.1 / 1</div>`;
      }
    }
    expect(auditNotebook(nb, fx.key).findings).toEqual([]);
  });

  it("passes group keys in other scripts, with their own dashes, digits and joiners, in the kernel's markup (the data's words are not judged)", () => {
    const key = loadCuratorKey(join(fx.dir, "curator.key"));
    // Keys as a dataset may hold them: a Unicode hyphen, Arabic-Indic digits, a Persian word with
    // a zero-width non-joiner, full-width digits, an emoji with a variation selector.
    const keys = [["Nord\u2010Ost"], ["منطقة ٣"], ["می\u200cخواهم"], ["Zone ５"], ["\u2764\ufe0f fans"]];
    const values: [string, string, string][] = [["5995", "5755", "6235"], ["6120", "5880", "6360"], ["-12.5", "-14", "-11"], ["7", "5", "9"], ["310", "300", "320"]];
    const rows = rowsOf("count", null, values, keys);
    const [r] = signedChain(key, { analyst: "kit", dataset: "visits-course", cap: "1" }, [{ cost: "0.1", rows }]);
    const nb = assembleNotebook([r, r]);
    const figures = values.map(([v, lo, hi]) => formatWithError(v, lo, hi));
    // The kernel's own building blocks (kernel/display/html.ts), as a release view puts them together.
    const figureHtml = (f: string): string => `<span class="hush-value">${esc(f.split(" ")[0])}</span> <span class="hush-errorbar">${esc(f.split(" ").slice(1).join(" "))}</span>`;
    const html = box(
      `<div><b>count by zone</b> <span style="opacity:0.75">on visits-course</span>${badge("replayed, no new cost", "#2e7d32")}</div>` +
        table(["zone", "count (95%)"], keys.map((k, i) => [esc(k[0]), figureHtml(figures[i])]), new Set([1])) +
        `<div style="font-size:12px;opacity:0.75">for each value, at least 95% of such answers fall within the ± shown of the true count (privacy noise only)</div>` +
        `<div style="margin-top:4px">cost ε=0.1</div>` +
        `<details class="hush-notes" style="margin-top:2px;font-size:12px"><summary style="opacity:0.75">details and 1 note</summary>${notesList(["a note — with a dash"])}</details>`,
      "release",
    ) + box(`<div><b>privacy loss</b> on visits-course</div>${budgetBar({ total: "0.1", recent: "0.1", cap: "1", symbol: "ε", recentLabel: "this cell", beforeLabel: "earlier" })}`, "loss");
    for (const c of nb.cells) for (const o of c.outputs ?? []) if (o.data !== undefined) o.data["text/html"] = html;
    expect(auditNotebook(nb, fx.key).findings).toEqual([]);
  });

  it("reads a filter's declared values (dashes beside digits, right-to-left words) like group keys once the metadata's plan is the signed one", () => {
    const key = loadCuratorKey(join(fx.dir, "curator.key"));
    // Declared category values as a steward may write them, used in filters: an en dash beside a
    // digit, and an Arabic district name with an Arabic-Indic digit.
    const values = ["Zone\u20133", "منطقة ٣"];
    const plans = values.map((v) => ({ v: 1, dataset: "visits-course", measure: { kind: "count" }, privacy: { epsilon: "0.1" }, where: { op: "eq", column: "district", value: v }, confidence: 0.95 }));
    const figures: [string, string, string][] = [["5995", "5755", "6235"], ["120", "-120", "360"]];
    const receipts = signedChain(
      key,
      { analyst: "kit", dataset: "visits-course", cap: "1" },
      plans.map((p, i) => ({ cost: "0.1", rows: rowsOf("count", null, [figures[i]]), digest: digestOf(p) })),
    );
    const build = (plan: (seq: number) => unknown): Notebook => {
      const nb = assembleNotebook(receipts);
      for (const c of nb.cells) {
        for (const o of c.outputs ?? []) {
          const meta = o.metadata?.[OUTPUT_METADATA_KEY] as { receipt: { seq: number; total: string } } | undefined;
          if (meta === undefined || o.data === undefined) continue;
          const i = meta.receipt.seq - 1;
          // The kernel's one-line form: the question with its filter, then the figure on the same line.
          const replay = String(o.data["text/plain"]).includes("replayed");
          // As kernel/display/bundle.ts writes it: a right-to-left word set in an isolate.
          o.data["text/plain"] = isolateRightToLeft(
            `count where district = ${values[i]} = ${formatWithError(...figures[i])} · ${replay ? "replayed, no new cost" : "cost ε=0.1"}\n` +
              `at least 95% of such answers fall within the ± shown of the true count (privacy noise only)`,
            planWords(plans[i]),
          );
          const p = plan(meta.receipt.seq);
          if (p !== undefined) (o.metadata![OUTPUT_METADATA_KEY] as Record<string, unknown>).plan = p;
        }
      }
      return nb;
    };
    // The kernel's metadata: the plan whose digest the receipt signed. Nothing to report.
    const honest = build((seq) => plans[seq - 1]);
    expect(JSON.stringify(honest)).toContain(JSON.stringify(`= ${FSI}منطقة ٣${PDI} =`).slice(1, -1));
    expect(auditNotebook(honest, fx.key).findings).toEqual([]);
    // Without the plan (a notebook from before it was written) the audit cannot tell the steward's
    // words from odd characters put there, and says so.
    const without = auditNotebook(build(() => undefined), fx.key).findings;
    expect(without.some((f) => f.kind === "shown-value" && /a dash or minus sign next to a digit/.test(f.message))).toBe(true);
    // The Arabic word, set in its isolate, shows invisible marks, another numeral system's digit and a right-to-left letter.
    expect(without.some((f) => f.kind === "shown-value" && /receipt seq 2\)$/.test(f.message) && /invisible format character/.test(f.message))).toBe(true);
    // A plan that is not the signed one excuses nothing and is reported.
    const forged = auditNotebook(build((seq) => ({ ...plans[seq - 1], where: { op: "eq", column: "district", value: "Zone\u20134" } })), fx.key).findings;
    expect(forged.some((f) => /not the one receipt seq 1 signed/.test(f.message))).toBe(true);
    expect(forged.some((f) => /a dash or minus sign next to a digit/.test(f.message))).toBe(true);
  });

  it("passes release code saved with CRLF or CR line endings (the digest makes line endings LF)", () => {
    for (const eol of ["\r\n", "\r"]) {
      const nb = clone(fx.nb);
      for (const c of nb.cells) if (Array.isArray(c.source)) c.source = c.source.map((l) => l.replace(/\n/g, eol));
      expect(JSON.stringify(nb)).toContain(JSON.stringify(eol).slice(1, -1));
      expect(auditNotebook(nb, fx.key).findings).toEqual([]);
    }
  });

  it("reports a release asked outside a notebook kernel as not bound to a cell, and only that", () => {
    const key = loadCuratorKey(join(fx.dir, "curator.key"));
    const [bound] = signedChain(key, { analyst: "kit", dataset: "visits-course", cap: "1" }, [{ cost: "0.1", rows: rowsOf("count", null, [["5995", "5755", "6235"]]) }]);
    const { cell: _cell, sig: _sig, keyId: _keyId, format: _format, ...fields } = bound;
    const unbound = signReceipt(fields, key);
    expect("cell" in unbound).toBe(false);
    const r = auditNotebook(assembleNotebook([unbound, unbound]), fx.key);
    // Three outputs show it (assembleNotebook shows each receipt given, then the second again).
    expect(r.findings.map((f) => f.kind)).toEqual(["not-bound", "not-bound", "not-bound"]);
    expect(r.findings[0].message).toMatch(/^cell 2 \(In \[2\]\): this release is not bound to a cell: receipt seq 1 names no code, so it was asked from outside a hush notebook kernel/);
    // Asked again from a notebook cell, the curator's statement names that cell's code: then it is bound.
    const nb = assembleNotebook([unbound, unbound]);
    for (const c of nb.cells) {
      for (const o of c.outputs ?? []) {
        const code = [c.source].flat().join("");
        o.metadata![OUTPUT_METADATA_KEY] = { ...(o.metadata![OUTPUT_METADATA_KEY] as object), reasked: signReasked(unbound, cellSourceDigest(code), key) };
      }
    }
    expect(auditNotebook(nb, fx.key).findings).toEqual([]);
    // A digest that is not one is reported, not trusted or crashed on.
    const odd = signReceipt({ ...fields, cell: "not a digest" }, key);
    expect(auditNotebook(assembleNotebook([odd, odd]), fx.key).findings.map((f) => f.kind)).toEqual(["code-mismatch", "code-mismatch", "code-mismatch"]);
  });

  it("accepts a replay under changed code only with the curator's statement for that code and that receipt", () => {
    const key = loadCuratorKey(join(fx.dir, "curator.key"));
    const last = fx.nb.cells.length - 1; // the second question asked again (assembleNotebook)
    const code = "// the second question again, with a comment\nawait visits.count({ epsilon: 0.2 })";
    const withStatement = (statement: unknown): Notebook => {
      const nb = clone(fx.nb);
      nb.cells[last].source = code;
      const out = nb.cells[last].outputs![0];
      if (statement !== undefined) out.metadata![OUTPUT_METADATA_KEY] = { ...(out.metadata![OUTPUT_METADATA_KEY] as object), reasked: statement };
      return nb;
    };
    const receipt2 = releaseWithSeq(fx.nb, 2).meta.receipt;
    const receipt3 = releaseWithSeq(fx.nb, 3).meta.receipt;
    const kinds = (nb: Notebook) => auditNotebook(nb, fx.key).findings.map((f) => [f.kind, f.cell]);
    expect(kinds(withStatement(signReasked(receipt2, cellSourceDigest(code), key)))).toEqual([]);
    // Missing, for other code, for another receipt, by another key, with its signature edited, or not a statement at all.
    const otherKey = join(fx.dir, "other.key");
    generateCuratorKey(otherKey);
    const good = signReasked(receipt2, cellSourceDigest(code), key);
    for (const bad of [
      undefined,
      signReasked(receipt2, cellSourceDigest(`${code} `), key),
      signReasked(receipt3, cellSourceDigest(code), key),
      signReasked(receipt2, cellSourceDigest(code), loadCuratorKey(otherKey)),
      { ...good, sig: signReasked(receipt3, cellSourceDigest(code), key).sig },
      { ...good, format: "hush-receipt/1" },
      "yes",
      { format: "hush-reasked/1", receipt: 5, cell: [], keyId: null, sig: {} },
    ]) {
      expect(kinds(withStatement(bad)), JSON.stringify(bad)).toEqual([["code-mismatch", last]]);
    }
  });
});
