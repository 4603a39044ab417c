/**
 * The audit corpus: one executed notebook and every tampering a reviewer must catch. Registered
 * by each test file that brings a notebook (signed in the test, or executed by the real kernel).
 * The CLI cases spawn dist/cli/main.js, so the build (npm test does it first) must have run.
 */
import { spawnSync } from "node:child_process";
import { generateKeyPairSync, type KeyObject } from "node:crypto";
import { writeFileSync } from "node:fs";
import { join, resolve } from "node:path";
import { expect, it } from "vitest";
import { shown } from "../../cli/audit/chain.js";
import { type AuditReport, auditNotebook } from "../../cli/audit/checks.js";
import type { FindingKind } from "../../cli/audit/findings.js";
import type { Notebook } from "../../cli/audit/notebook.js";
import { Rational } from "../../runtime/core/index.js";
import { formatWithError } from "../../runtime/protocol/format.js";
import type { Receipt } from "../../runtime/protocol/messages.js";
import {
  RESPELLINGS,
  respellFigure,
  MADE_UP,
  READING_TAMPERS,
  respellStatedCost,
  tenth,
  printEditedFigure,
  rewriteFigure,
  addMadeUpRow,
  addUncheckedView,
  addActiveHtml,
  editStatedCost,
  allWithSeq,
  concealSignedInPlain,
  editChartValue,
  fakeStreamLine,
  hideSignedInHtml,
  swapGroupFigures,
  changeCost,
  deleteReleaseCell,
  editShownValue,
  forgeSignature,
  stripReceipt,
  releaseWithSeq,
  releasesOf,
  replaceKey,
  substituteReceipt,
  swapReleaseCells,
  editReleaseCode,
  lowerEpsilonInCode,
  addFilterToCode,
  widenSpacingInCode,
  swapReleaseCode,
  moveCodeAbove,
} from "./tamper.js";

export interface CorpusFixture {
  /** The executed, untouched notebook (at least three distinct releases). */
  nb: Notebook;
  key: KeyObject;
  /** The curator's public key file (PEM), as a reviewer gets it. */
  keyFile: string;
  /** A receipt of another analyst from the same curator. */
  foreign: Receipt;
  /** A scratch directory for tampered copies. */
  dir: string;
}

const CLI = resolve(import.meta.dirname, "../../dist/cli/main.js");

/** An exact amount as the audit states it (a decimal when it has a finite one, else a fraction). */
export function shownExact(x: string): string {
  return shown(Rational.parse(x));
}

export function runCli(args: string[]): { code: number | null; stdout: string; stderr: string } {
  const r = spawnSync(process.execPath, [CLI, ...args], { encoding: "utf8", timeout: 60_000, stdio: ["ignore", "pipe", "pipe"] });
  return { code: r.status, stdout: r.stdout, stderr: r.stderr };
}

function kinds(r: AuditReport): FindingKind[] {
  return r.findings.map((f) => f.kind);
}

/** The finding of `kind`, which must exist and name `cell` in its message. */
function expectFinding(r: AuditReport, kind: FindingKind, cell: number): void {
  expect(r.ok).toBe(false);
  const f = r.findings.find((x) => x.kind === kind && x.cell === cell);
  expect(f, `expected a ${kind} finding at cell ${cell}; got ${JSON.stringify(r.findings)}`).toBeDefined();
  expect(f!.message).toMatch(new RegExp(`^cell ${cell}\\b`));
}

/**
 * A note of `kind` at `cell` (reported, the notebook still passes), which --strict makes a finding.
 * What honest re-runs also produce: the audit must report it without failing the student.
 */
function expectNote(r: AuditReport, strict: AuditReport, kind: FindingKind, cell: number): string {
  expect(r.findings, JSON.stringify(r.findings)).toEqual([]);
  expect(r.ok).toBe(true);
  const n = r.notes.find((x) => x.kind === kind && x.cell === cell);
  expect(n, `expected a ${kind} note at cell ${cell}; got ${JSON.stringify(r.notes)}`).toBeDefined();
  expect(n!.message).toMatch(new RegExp(`^cell ${cell}\\b`));
  expectFinding(strict, kind, cell);
  expect(strict.notes).toEqual([]);
  return n!.message;
}

export function auditCorpus(get: () => CorpusFixture): void {
  const audit = (nb: Notebook, cap?: string): AuditReport => auditNotebook(nb, get().key, cap === undefined ? {} : { cap: Rational.parse(cap) });
  const strictly = (nb: Notebook): AuditReport => auditNotebook(nb, get().key, { strict: true });
  const save = (name: string, nb: Notebook): string => {
    const file = join(get().dir, name);
    writeFileSync(file, JSON.stringify(nb));
    return file;
  };

  it("passes the untouched notebook (library and CLI, exit 0)", () => {
    const { nb, keyFile } = get();
    const r = audit(nb);
    expect(r.findings).toEqual([]);
    expect(r.receipts).toBeGreaterThanOrEqual(3);
    const cli = runCli(["audit", save("clean.ipynb", nb), "--key", keyFile]);
    expect(cli.stderr).toBe("");
    expect(cli.stdout).toMatch(/^verdict: PASS/m);
    expect(cli.code).toBe(0);
  });

  it("catches a signed figure shown otherwise than the display rule writes it (unrounded, ungrouped, another last digit)", () => {
    for (const r of RESPELLINGS) {
      const bad = respellFigure(get().nb, 1, r.spell);
      const report = audit(bad);
      expect(report.ok, r.name).toBe(false);
      expect(report.findings.some((f) => f.kind === "shown-value" && f.cell === releaseWithSeq(bad, 1).cell && f.message.includes("text/plain")), r.name).toBe(true);
    }
  });

  it("catches a shown value edited away from the signed one", () => {
    const bad = editShownValue(get().nb, 2);
    expectFinding(audit(bad), "shown-value", releaseWithSeq(bad, 2).cell);
  });

  // A deleted release cell looks exactly like a cell run again after an edit (its old receipt is
  // no longer shown): its spend is reported, counted and vouched for by the totals, not failed.
  it("reports a deleted release cell's spend as not shown (count and exact cost), a finding only under --strict", () => {
    const bad = deleteReleaseCell(get().nb, 2);
    const cost = releaseWithSeq(get().nb, 2).meta.receipt.cost;
    const r = audit(bad);
    const msg = expectNote(r, strictly(bad), "superseded", releaseWithSeq(bad, 3).cell);
    expect(msg).toContain(`release 2 (1 release, ε ${shownExact(cost)} in all, by the running totals) is not shown in this notebook`);
    expect(r.superseded).toEqual({ releases: 1, spend: shownExact(cost), runs: [{ from: 2, to: 2, spend: shownExact(cost) }] });
    expect(r.total).toBe(audit(get().nb).total);
  });

  it("reports a deleted first release: the spend of seq 1 is not shown, a finding only under --strict", () => {
    const bad = deleteReleaseCell(get().nb, 1);
    const r = audit(bad);
    const msg = expectNote(r, strictly(bad), "superseded", releaseWithSeq(bad, 2).cell);
    expect(msg).toMatch(/the first receipt shown is seq 2: release 1 \(1 release/);
    expect(r.superseded.releases).toBe(1);
  });

  it("catches a release output whose receipt was removed", () => {
    const cell = releaseWithSeq(get().nb, 2).cell;
    const r = audit(stripReceipt(get().nb, 2));
    expectFinding(r, "no-receipt", cell);
  });

  // ---- the code above a release (receipts sign the asking cell's source digest) ----------------
  const codeFinding = (bad: Notebook, seq: number): string => {
    const r = audit(bad);
    const cell = releaseWithSeq(bad, seq).cell;
    expectFinding(r, "code-mismatch", cell);
    return r.findings.find((f) => f.kind === "code-mismatch" && f.cell === cell)!.message;
  };

  it("catches a release cell whose epsilon was edited in the code after it ran (epsilon: 0.1 -> 0.01)", () => {
    const bad = editReleaseCode(get().nb, 1, lowerEpsilonInCode);
    const message = codeFinding(bad, 1);
    expect(message).toMatch(/^cell \d+ \(In \[\d+\]\): the code of this cell is not the code that made this release \(receipt seq 1\): it was changed after/);
    // Only the code was touched: the receipts, figures and chain are all still fine.
    expect(kinds(audit(bad))).toEqual(["code-mismatch"]);
  });

  it("catches a filter added to the code of a release cell", () => {
    const bad = editReleaseCode(get().nb, 2, addFilterToCode);
    codeFinding(bad, 2);
  });

  it("reports a spacing-only edit of a release cell's code (spacing can change a string the query uses)", () => {
    const bad = editReleaseCode(get().nb, 3, widenSpacingInCode);
    expect(codeFinding(bad, 3)).toContain("even spacing");
  });

  it("catches the code of two release cells exchanged, naming the cell whose code made each release", () => {
    const { nb } = get();
    const bad = swapReleaseCode(nb, 1, 3);
    const c1 = releaseWithSeq(bad, 1).cell;
    const c3 = releaseWithSeq(bad, 3).cell;
    expect(codeFinding(bad, 1)).toMatch(new RegExp(`made by the code of cell ${c3}\\b`));
    expect(codeFinding(bad, 3)).toMatch(new RegExp(`made by the code of cell ${c1}\\b`));
  });

  it("catches the true code moved to a cell above and the release cell's code edited", () => {
    const bad = moveCodeAbove(get().nb, 2);
    const moved = releaseWithSeq(bad, 2).cell - 1;
    expect(codeFinding(bad, 2)).toMatch(new RegExp(`made by the code of cell ${moved}\\b.*show each release in the cell that asks for it`));
  });

  it("passes a release cell rerun unchanged, its release shown again (the repeat carries the first receipt and the same code)", () => {
    const { nb } = get();
    const out = JSON.parse(JSON.stringify(nb)) as Notebook;
    const rel = releaseWithSeq(out, 1);
    const copy = JSON.parse(JSON.stringify(out.cells[rel.cell])) as Notebook["cells"][number];
    copy.execution_count = 99;
    out.cells.push(copy);
    const r = audit(out);
    expect(r.findings).toEqual([]);
    expect(r.replays).toBeGreaterThanOrEqual(1);
  });

  it("notes cells shown out of spend order (a finding only under --strict)", () => {
    const bad = swapReleaseCells(get().nb, 2, 3);
    const msg = expectNote(audit(bad), strictly(bad), "spend-order", releaseWithSeq(bad, 2).cell);
    expect(msg).toMatch(/receipt seq 2 is shown below cell \d+( \(In \[\d+\]\))?, which shows the later seq 3/);
    expect(msg).toContain("the spend is counted either way");
  });

  it("catches a receipt from another analyst", () => {
    const bad = substituteReceipt(get().nb, 3, get().foreign);
    const at = releasesOf(bad).find((x) => x.meta.receipt.analyst === get().foreign.analyst)!.cell;
    const r = audit(bad);
    expectFinding(r, "mixed", at);
    expect(r.findings.find((f) => f.kind === "mixed")!.message).toContain(`analyst "${get().foreign.analyst}"`);
  });

  it("catches a forged signature", () => {
    const bad = forgeSignature(get().nb, 2);
    const r = audit(bad);
    expectFinding(r, "signature", releaseWithSeq(bad, 2).cell);
    // Only the signature was touched: nothing else is reported at that receipt.
    expect(r.findings.filter((f) => f.kind !== "signature" && f.kind !== "prev-link")).toEqual([]);
  });

  it("catches a changed cost (signature and running total)", () => {
    const bad = changeCost(get().nb, 2);
    const r = audit(bad);
    const cell = releaseWithSeq(bad, 2).cell;
    expectFinding(r, "signature", cell);
    expectFinding(r, "total", cell);
  });

  it("catches a replaced key even when the chain was re-signed consistently", () => {
    const other = generateKeyPairSync("ed25519");
    const bad = replaceKey(get().nb, other);
    const r = audit(bad);
    expectFinding(r, "key", releaseWithSeq(bad, 1).cell);
    expect(kinds(r).every((k) => k === "key")).toBe(true);
    const cli = runCli(["audit", save("rekeyed.ipynb", bad), "--key", get().keyFile, "--json"]);
    expect(cli.code).toBe(1);
    const json = JSON.parse(cli.stdout) as AuditReport;
    expect(json.ok).toBe(false);
    expect(json.findings.some((f) => f.kind === "key" && /key was replaced/.test(f.message))).toBe(true);
  });

  it("fails a notebook over a stricter review cap (--cap below the total), exit 1", () => {
    const { nb, keyFile } = get();
    const total = Rational.parse(audit(nb).total!);
    const under = total.mul(Rational.of(1, 2)).toDecimal(12);
    const file = save("capped.ipynb", nb);
    const cli = runCli(["audit", file, "--key", keyFile, "--cap", under]);
    expect(cli.code).toBe(1);
    expect(cli.stdout).toMatch(/over the review cap/);
    expect(cli.stdout).toMatch(/^verdict: FAIL/m);
    // The same cap at the total itself passes: the bound is "at most".
    expect(runCli(["audit", file, "--key", keyFile, "--cap", total.toString()]).code).toBe(0);
  });

  it("holds the notebook to the analyst and dataset the reviewer expects (--analyst, --dataset)", () => {
    const { nb, keyFile } = get();
    const mine = audit(nb);
    const file = save("owner.ipynb", nb);
    const as = (args: string[]) => runCli(["audit", file, "--key", keyFile, ...args]);
    expect(as(["--analyst", mine.analyst!, "--dataset", mine.datasets[0]]).code).toBe(0);
    const other = as(["--analyst", `${mine.analyst!}-classmate`]);
    expect(other.code).toBe(1);
    expect(other.stdout).toContain(`the receipts are for analyst "${mine.analyst!}", not "${mine.analyst!}-classmate" as expected`);
    expect(as(["--dataset", "some-other-dataset"]).code).toBe(1);
  });

  it("catches a made-up extra row added to a release output", () => {
    const bad = addMadeUpRow(get().nb, 2);
    const r = audit(bad);
    expectFinding(r, "shown-value", releaseWithSeq(bad, 2).cell);
    expect(r.findings.find((f) => f.kind === "shown-value")!.message).toContain(MADE_UP);
  });

  it("catches two groups' figures swapped (each signed, shown under the wrong group)", () => {
    const bad = swapGroupFigures(get().nb, 2);
    expectFinding(audit(bad), "shown-value", releaseWithSeq(bad, 2).cell);
  });

  it("catches an edited figure in text/html with the signed one hidden beside it", () => {
    const bad = hideSignedInHtml(get().nb, 1);
    const r = audit(bad);
    expectFinding(r, "shown-value", releaseWithSeq(bad, 1).cell);
    expect(r.findings.some((f) => f.kind === "shown-value" && f.message.includes("text/html") && f.message.includes(MADE_UP))).toBe(true);
  });

  it("catches an edited figure in text/plain with the signed one behind a terminal escape", () => {
    const bad = concealSignedInPlain(get().nb, 1);
    const r = audit(bad);
    expectFinding(r, "shown-value", releaseWithSeq(bad, 1).cell);
    expect(r.findings.some((f) => f.message.includes("a control character"))).toBe(true);
  });

  it("catches digits reordered by a bidi override, and figures written as HTML character references", () => {
    const out = JSON.parse(JSON.stringify(get().nb)) as Notebook;
    const rel = releaseWithSeq(out, 1);
    const plain = rel.output.data!["text/plain"];
    rel.output.data!["text/plain"] = `${Array.isArray(plain) ? plain.join("") : String(plain)}\n\u202e5.2424`;
    const r = audit(out);
    expectFinding(r, "shown-value", rel.cell);
    const html = addActiveHtml(get().nb, 1, `<b>&#52;&#50;&#52;&#50;.5 &#177; 1.5</b>`);
    const rh = audit(html);
    expect(rh.findings.some((f) => f.kind === "shown-value" && f.message.includes("text/html") && f.message.includes(MADE_UP))).toBe(true);
  });

  it("catches an edited value in the Vega-Lite chart of a grouped release", () => {
    const bad = editChartValue(get().nb, 2);
    expectFinding(audit(bad), "bundle-value", releaseWithSeq(bad, 2).cell);
  });

  it("catches a printed release-looking line with a made-up figure and no receipt (stream output)", () => {
    const bad = fakeStreamLine(get().nb, 2);
    const r = audit(bad);
    expectFinding(r, "no-receipt", releaseWithSeq(bad, 2).cell);
    expect(r.findings.find((f) => f.kind === "no-receipt")!.message).toContain(MADE_UP);
  });

  it("does not flag a printed copy of a signed figure (console.log of an answer without spend words)", () => {
    const out = JSON.parse(JSON.stringify(get().nb)) as Notebook;
    const rel = releaseWithSeq(out, 2);
    const row = rel.meta.receipt.result.find((x) => x[3] !== null && x[4] !== null)!;
    out.cells[rel.cell].outputs!.push({ output_type: "stream", name: "stdout", text: `${formatWithError(row[3], row[4], row[5])}\n` });
    expect(audit(out).findings).toEqual([]);
  });

  it("limit: a deleted last release cannot be seen without the ledger (the audit passes the shorter chain)", () => {
    const last = Math.max(...releasesOf(get().nb).map((x) => x.meta.receipt.seq));
    const out = JSON.parse(JSON.stringify(get().nb)) as Notebook;
    const cells = new Set(allWithSeq(out, last).map((x) => x.cell));
    out.cells = out.cells.filter((_, i) => !cells.has(i));
    const r = audit(out);
    expect(r.findings).toEqual([]);
    expect(r.receipts).toBe(last - 1);
  });

  it("reports hostile receipts and outputs as findings, never a crash or a pass", () => {
    const variants: ((r: Record<string, unknown>, o: Record<string, unknown>) => void)[] = [
      (r) => void (r.cost = "1e999999999"),
      (r) => void (r.total = "9".repeat(5000)),
      (r) => void ((r.result as unknown[][])[0][3] = "1e999999999"),
      (r) => void (r.seq = 1e300),
      (r) => void (r.seq = -1),
      (r) => void (r.seq = 1.5),
      (r) => void (r.unit = "rho"),
      (r) => void (r.cap = "1/0"),
      (r) => void delete r.sig,
      (_r, o) => void (o.data = null),
      (_r, o) => void (o.data = { "text/plain": [5, null] }),
      (_r, o) => void (o.metadata = { hush: { receipt: null } }),
      (_r, o) => void (o.metadata = { hush: { receipt: { format: "hush-receipt/1", seq: "1" }, dataset: 7 } }),
    ];
    variants.forEach((edit, i) => {
      const out = JSON.parse(JSON.stringify(get().nb)) as Notebook;
      const rel = releaseWithSeq(out, 1);
      edit(rel.meta.receipt as unknown as Record<string, unknown>, rel.output as unknown as Record<string, unknown>);
      let r: AuditReport | undefined;
      expect(() => (r = audit(out)), `variant ${i}`).not.toThrow();
      expect(r!.ok, `variant ${i}`).toBe(false);
    });
  });

  it("catches a view the audit cannot read (LaTeX, or JSON without rows) added to a release output", () => {
    for (const mime of ["text/latex", "image/png", "application/json"]) {
      const bad = addUncheckedView(get().nb, 1, mime);
      const r = audit(bad);
      expectFinding(r, "bundle-value", releaseWithSeq(bad, 1).cell);
      expect(r.findings.find((f) => f.kind === "bundle-value")!.message).toContain(mime);
    }
  });

  it("reports a zCDP receipt whose delta or total has no epsilon as a finding, not an error (with --cap)", () => {
    const last = Math.max(...releasesOf(get().nb).map((x) => x.meta.receipt.seq));
    for (const [delta, total] of [["2", null], ["0", null], ["0.000001", "-1"]] as const) {
      const out = JSON.parse(JSON.stringify(get().nb)) as Notebook;
      for (const { meta } of allWithSeq(out, last)) {
        meta.receipt.unit = "rho";
        meta.receipt.delta = delta;
        if (total !== null) meta.receipt.total = total;
      }
      let r: AuditReport | undefined;
      expect(() => (r = audit(out, "1"))).not.toThrow();
      expect(r!.findings.some((f) => f.kind === "malformed" && /has no epsilon/.test(f.message)), `delta ${delta}`).toBe(true);
    }
  });

  it("catches an edited cost in the release line (the receipt's cost left alone)", () => {
    const bad = editStatedCost(get().nb, 2);
    const r = audit(bad);
    expectFinding(r, "shown-value", releaseWithSeq(bad, 2).cell);
    expect(r.findings.find((f) => f.kind === "shown-value")!.message).toMatch(/stated cost differs from the signed one/);
  });

  it("catches HTML that can draw figures the audit cannot read (script, style sheet, inline SVG, foreign image)", () => {
    const markups = [
      `<script>document.body.innerText = "x"</script>`,
      `<style>pre::after { content: "\\34 242" }</style>`,
      `<svg><text>4242</text></svg>`,
      `<img src="data:image/png;base64,AAAA">`,
      `<div style="background:url(data:image/png;base64,AAAA)"></div>`,
      `<div onmouseover="this.innerText='4242'">x</div>`,
    ];
    for (const m of markups) {
      const bad = addActiveHtml(get().nb, 1, m);
      const r = audit(bad);
      expect(r.findings.some((f) => f.kind === "shown-value" && f.cell === releaseWithSeq(bad, 1).cell && f.message.includes("text/html")), m).toBe(true);
    }
  });

  it("prints the report (exit 1, never an internal error) when the last receipt's total and cap are not numbers", () => {
    const last = Math.max(...releasesOf(get().nb).map((x) => x.meta.receipt.seq));
    const out = JSON.parse(JSON.stringify(get().nb)) as Notebook;
    for (const { meta } of allWithSeq(out, last)) {
      meta.receipt.total = "abc";
      meta.receipt.cap = "1e99999999999";
    }
    const cli = runCli(["audit", save("bad-amounts.ipynb", out), "--key", get().keyFile]);
    expect(cli.stderr).toBe("");
    expect(cli.stdout).toMatch(/^verdict: FAIL/m);
    expect(cli.code).toBe(1);
  });

  it("catches receipts moved between release outputs (each output then shows another receipt's figures)", () => {
    const out = JSON.parse(JSON.stringify(get().nb)) as Notebook;
    const a = releaseWithSeq(out, 1);
    const b = releaseWithSeq(out, 2);
    [a.output.metadata!.hush, b.output.metadata!.hush] = [b.output.metadata!.hush, a.output.metadata!.hush];
    const r = audit(out);
    expectFinding(r, "shown-value", a.cell);
    expectFinding(r, "shown-value", b.cell);
  });

  it("catches a duplicated release cell whose copy shows an edited figure under the same receipt", () => {
    const out = JSON.parse(JSON.stringify(get().nb)) as Notebook;
    const rel = releaseWithSeq(out, 2);
    const copy = JSON.parse(JSON.stringify(out.cells[rel.cell])) as Notebook["cells"][number];
    out.cells.splice(rel.cell + 1, 0, copy);
    const edited = addMadeUpRow({ ...out, cells: [copy] }, 2);
    out.cells[rel.cell + 1] = edited.cells[0];
    const r = audit(out);
    expectFinding(r, "shown-value", rel.cell + 1);
    expect(r.findings.every((f) => f.cell === rel.cell + 1)).toBe(true);
  });

  // A reader must see the signed number: each edit below keeps the signed digits in the text but
  // makes a person read another number (a minus, a digit in front, an exponent), or hides a digit.
  for (const t of READING_TAMPERS) {
    it(`catches a figure a reader sees otherwise than signed: ${t.name}`, () => {
      const bad = rewriteFigure(get().nb, 1, t);
      expectFinding(audit(bad), "shown-value", releaseWithSeq(bad, 1).cell);
    });
  }

  for (const name of ["U+2212 minus sign before the value", "the value's last digit as a superscript (an exponent)", "1 and a no-break space before the value", "a Thai 1 before the value"]) {
    it(`catches a printed copy of a signed figure that reads otherwise (no receipt): ${name}`, () => {
      const t = READING_TAMPERS.find((x) => x.name === name)!;
      const bad = printEditedFigure(get().nb, 1, t);
      expectFinding(audit(bad), "no-receipt", releaseWithSeq(bad, 1).cell);
    });
  }

  it("catches an HTML output without a receipt that reverses a signed figure's digits with <bdo>", () => {
    const out = JSON.parse(JSON.stringify(get().nb)) as Notebook;
    const rel = releaseWithSeq(out, 1);
    const row = rel.meta.receipt.result.find((x) => x[3] !== null && x[4] !== null)!;
    const [v, ...rest] = formatWithError(row[3], row[4], row[5]).split(" ");
    out.cells[rel.cell].outputs!.push({ output_type: "display_data", metadata: {}, data: { "text/plain": "a note", "text/html": `<p><bdo dir="rtl">${v}</bdo> ${rest.join(" ")}</p>` } });
    expectFinding(audit(out), "no-receipt", rel.cell);
  });

  it("quotes notebook text in findings without control characters (an escape cannot act on the reviewer's terminal)", () => {
    const out = JSON.parse(JSON.stringify(get().nb)) as Notebook;
    const rel = releaseWithSeq(out, 1);
    const plain = String(Array.isArray(rel.output.data!["text/plain"]) ? (rel.output.data!["text/plain"] as string[]).join("") : rel.output.data!["text/plain"]);
    rel.output.data!["text/plain"] = plain.replace(/cost (ε|ρ)=/, "cost $1=\u001b[2J") + "\n1\u001b[8m9 ± 1";
    rel.output.data!["text/html"] = `<span class="\u001b[2J" style="color:\u001b]0;x\u0007">${plain}</span>`;
    const r = audit(out);
    expect(r.findings.length).toBeGreaterThan(0);
    for (const f of r.findings) expect(f.message, f.message).not.toMatch(/[\u0000-\u0008\u000b-\u001f\u007f]/);
  });

  const costSpellings: [string, (u: string, a: string) => string][] = [
    ["a Cyrillic є for ε and a tenth of the cost", (_u, a) => `cost \u0454=${tenth(a)}`],
    ["a colon and no symbol", (_u, a) => `cost: ${tenth(a)}`],
    ["the cost left out", () => "no new cost"],
    ["spaces around the equals sign and a capital C", (u, a) => `Cost ${u} = ${tenth(a)}`],
  ];
  for (const [name, f] of costSpellings) {
    it(`catches a stated cost spelled so the old reader missed it: ${name}`, () => {
      const bad = respellStatedCost(get().nb, 2, f);
      const r = audit(bad);
      expectFinding(r, "shown-value", releaseWithSeq(bad, 2).cell);
      expect(r.findings.some((x) => x.kind === "shown-value" && /cost/.test(x.message))).toBe(true);
    });
  }

  it("catches an HTML output without a receipt showing a signed figure after &minus;", () => {
    const out = JSON.parse(JSON.stringify(get().nb)) as Notebook;
    const rel = releaseWithSeq(out, 1);
    const row = rel.meta.receipt.result.find((x) => x[3] !== null && x[4] !== null)!;
    out.cells[rel.cell].outputs!.push({ output_type: "display_data", metadata: {}, data: { "text/plain": "a note", "text/html": `<p>&minus;${formatWithError(row[3], row[4], row[5])}</p>` } });
    expectFinding(audit(out), "no-receipt", rel.cell);
  });

  it("exits 2 on unreadable input: missing notebook, bad JSON, bad key", () => {
    const { keyFile } = get();
    const good = save("good.ipynb", get().nb);
    const badJson = join(get().dir, "bad.ipynb");
    writeFileSync(badJson, "{ not json");
    const badKey = join(get().dir, "bad.pub");
    writeFileSync(badKey, "-----BEGIN PUBLIC KEY-----\nAAAA\n-----END PUBLIC KEY-----\n");
    const missing = runCli(["audit", join(get().dir, "nope.ipynb"), "--key", keyFile]);
    expect(missing.code).toBe(2);
    expect(missing.stderr).toMatch(/cannot be read/);
    const json = runCli(["audit", badJson, "--key", keyFile]);
    expect(json.code).toBe(2);
    expect(json.stderr).toMatch(/not valid JSON/);
    const key = runCli(["audit", good, "--key", badKey]);
    expect(key.code).toBe(2);
    expect(key.stderr).toMatch(/public key/);
  });
}
