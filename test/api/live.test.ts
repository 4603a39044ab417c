/**
 * The cell API and its display against a real curator process (built dist/), reached through the
 * real client over ipc, configured as a steward's curator would be (HUSH_CURATOR, HUSH_ANALYST,
 * HUSH_TOKEN). The notebook made of the displayed releases must pass the project's own audit,
 * which re-checks every shown number against the Ed25519-signed receipts.
 *
 * Data: test/fixtures/service/clinic.csv (invented; unit ids start with "pt-canary-", which must
 * never appear in anything a cell sees).
 */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, test } from "vitest";
import { auditNotebook } from "../../cli/audit/checks.js";
import type { NbCell, Notebook } from "../../cli/audit/notebook.js";
import { HushSession, type MimeBundle } from "../../kernel/hush-session.js";
import { type EmbeddedCurator, startEmbeddedCurator } from "../../runtime/client/embedded.js";
import { Answer } from "../../runtime/api/answer.js";
import { runAsCell } from "../../runtime/api/asking-cell.js";
import { cellSourceDigest } from "../../runtime/protocol/cell-source.js";
import type { SealedTable } from "../../runtime/api/table.js";
import { BadInputError, OverCapError, UnknownDatasetError } from "../../runtime/errors.js";
import { formatAmount } from "../../runtime/protocol/format.js";
import { loadPublicKey } from "../../runtime/protocol/receipts.js";
import { CANARY, DISTRICTS, makeWorkspace, requireBuild, type Workspace } from "../integration/helpers.js";

let ws: Workspace;
let curator: EmbeddedCurator;
let session: HushSession;
const notices: MimeBundle[] = [];

beforeAll(async () => {
  requireBuild();
  ws = makeWorkspace("api", "2");
  curator = await startEmbeddedCurator({ policyFile: ws.policyFile, stateDir: ws.dir });
  session = HushSession.create(
    { display: (b) => notices.push(b) },
    { HUSH_CURATOR: curator.address, HUSH_ANALYST: "ada", HUSH_TOKEN: ws.tokens.ada },
  );
});

afterAll(async () => {
  await session?.close();
  await curator?.stop();
  if (ws) rmSync(ws.dir, { recursive: true, force: true });
});

/** The code of the cell each release is asked from: the sixth asks the first question again, from the first cell's code. */
const SOURCES = ["// cell 1", "// cell 2", "// cell 3", "// cell 4", "// cell 5", "// cell 1"];

function notebookOf(bundles: MimeBundle[]): Notebook {
  const cells: NbCell[] = bundles.map((b, i) => ({
    cell_type: "code",
    source: SOURCES[i],
    execution_count: i + 1,
    metadata: {},
    outputs: [{ output_type: "display_data", data: b.data, metadata: b.metadata }],
  }));
  return { nbformat: 4, nbformat_minor: 5, metadata: {}, cells };
}

describe("cell API on a real curator", () => {
  let clinic: SealedTable;
  const releases: MimeBundle[] = [];

  test("open: public schema and spend; no notice when a curator is configured", async () => {
    clinic = await session.api.open("clinic");
    expect(clinic.columns.map((c) => c.name).sort()).toEqual(["age", "district", "insured", "wait_minutes"]);
    expect(clinic.unit).toEqual({ column: "patient_id", maxRows: 4, maxGroups: 2 });
    expect(clinic.spend).toMatchObject({ analyst: "ada", dataset: "clinic", capEpsilon: "2", releases: 0 });
    expect(notices).toEqual([]);
  });

  test("releases render with receipts, and the notebook they make passes the audit", async () => {
    // Each ask runs as the kernel runs a cell (kernel/execution.ts), so its receipt names that cell's code.
    const asks = [
      () => clinic.count({ epsilon: 0.1 }),
      () => clinic.where(session.api.col("age").ge(40)).by("district").mean("wait_minutes", { epsilon: "0.2" }),
      () => clinic.histogram("age", { bins: 5, epsilon: 0.1 }),
      () => clinic.crosstab("district", "insured", { epsilon: 0.1 }),
      () => clinic.by("district").count({ within: 30, atMost: 1 }),
      () => clinic.count({ epsilon: 0.1 }), // the first question again: a replay
    ];
    const answers: Answer[] = [];
    for (const [i, ask] of asks.entries()) answers.push(await runAsCell(SOURCES[i], ask));
    expect(answers.map((a) => a.replay)).toEqual([false, false, false, false, false, true]);
    expect(answers[1].rows.map((r) => r.key.district)).toEqual(DISTRICTS);
    for (const a of answers) releases.push((await session.render(a))!);
    for (const [i, b] of releases.entries()) {
      expect(b.metadata.hush, `release ${i}`).toMatchObject({ dataset: "clinic", replay: i === 5 });
      expect(JSON.stringify(b)).not.toContain(CANARY);
    }
    expect(releases[0].data["text/plain"]).toMatch(/^count = -?[\d,]+ ± [\d,]+ · cost ε=0\.1\n  at least 95% of such answers fall within ±[\d,]+ of the true count \(privacy noise only\)/);
    expect((releases[2].data["image/svg+xml"] as string).startsWith("<svg")).toBe(true);
    expect(releases[5].data["text/html"]).toContain("replayed, no new cost");

    const report = auditNotebook(notebookOf(releases), loadPublicKey(curator.publicKeyB64));
    expect(report.findings).toEqual([]);
    expect(report.ok).toBe(true);
    expect(report.receipts).toBe(5);
    expect(report.replays).toBe(1);
    expect(answers.map((a) => a.release.receipt.cell)).toEqual(SOURCES.map((src) => cellSourceDigest(src)));
  });

  test("the audit notices when a displayed number is edited (so the check above could fail)", () => {
    const edited = structuredClone(releases);
    const text = edited[0].data["text/plain"] as string;
    edited[0].data["text/plain"] = text.replace(/= (-?\d+)/, (_m, n: string) => `= ${Number(n) + 1}`);
    const report = auditNotebook(notebookOf(edited), loadPublicKey(curator.publicKeyB64));
    expect(report.ok).toBe(false);
    expect(report.findings.map((f) => f.kind)).toContain("shown-value");
  });

  test("afterCell reports this session's spend against the cap", async () => {
    const b = (await session.afterCell())!;
    expect(b.data["text/plain"]).toMatch(/^privacy loss on clinic \(population clinic\.csv\): ε [\d.]+ of 2 used · this cell [\d.]+ \(1 answer replayed, no new cost\) · left [\d.]+ \[[#+.]{24}\]$/);
    expect(await session.afterCell()).toBeNull();
  });

  test("a preview spends nothing", async () => {
    const before = (await session.api.budget("clinic")).of("clinic")!.spend;
    const q = await clinic.by("insured").preview.sum("wait_minutes", { epsilon: 0.05 });
    expect(q.cost).toBe("1/20");
    expect(q.affordable).toBe(true);
    expect(q.expectedErrors.length).toBeGreaterThan(0);
    const after = (await session.api.budget("clinic")).of("clinic")!.spend;
    expect(after).toEqual(before);
  });

  test("over the cap: refused with the remaining budget, nothing spent", async () => {
    const before = (await session.api.budget("clinic")).of("clinic")!.spend;
    const p = clinic.count({ epsilon: 5 });
    await expect(p).rejects.toThrow(OverCapError);
    // What is left is rounded down (docs/methods.md §23), the cost up; amounts in decimals, never fractions.
    const left = formatAmount(before.remainingEpsilon, "down").replace(".", "\\.");
    await expect(p).rejects.toThrow(new RegExp(`^over the cap: this query costs ε 5, but ada has ε ${left} left of the cap 2 on population clinic\\.csv \\(.*; spent [\\d.]+\\); nothing was spent\\n`));
    await expect(p).rejects.not.toThrow(/\d\/\d/);
    await expect(p).rejects.toThrow(new RegExp(`^over the cap: .*nothing was spent\\nε ${left} of 2 remains on clinic \\(population clinic\\.csv\\) for ada\\.$`, "s"));
    expect((await session.api.budget("clinic")).of("clinic")!.spend).toEqual(before);
  });

  test("bad input is refused before sending; the curator's own refusals come back as the same classes", async () => {
    const before = (await session.api.budget("clinic")).of("clinic")!.spend;
    await expect(clinic.mean("wait", { epsilon: 0.1 })).rejects.toThrow(BadInputError);
    await expect(clinic.count({ epsilon: Number.NaN })).rejects.toThrow(/NaN/);
    await expect(session.api.open("nope")).rejects.toThrow(UnknownDatasetError);
    // a dataset granted to someone else is not revealed to exist
    await expect(session.api.open("hidden")).rejects.toThrow(UnknownDatasetError);
    expect((await session.api.budget("clinic")).of("clinic")!.spend).toEqual(before);
  });

  test("zCDP dataset: costs in ρ with the ε equivalent", async () => {
    const z = await session.api.open("clinic_z");
    const a = await z.count({ rho: "0.001" });
    expect(String(a)).toMatch(/ · cost ρ=0\.001\n/);
    const b = (await session.render(a))!;
    expect(b.data["text/html"]).toContain("cost ρ=0.001");
    const loss = (await session.afterCell())!;
    expect(loss.data["text/plain"]).toMatch(/^privacy loss on clinic_z \(population clinic-z\.csv\): ρ 0\.001 of [\d.]+ used \(ε [\d.]+ of 1 at δ=0\.000001, by zCDP conversion\) · this cell 0\.001 · left [\d.]+ \[[#+.]{24}\]$/);
  });

  test("budget and ledger", async () => {
    const b = await session.api.budget();
    expect(b.datasets.map((d) => d.dataset)).toEqual(["clinic", "clinic_z"]);
    expect(b.of("clinic")!.queries).toHaveLength(6);
    const l = await session.api.ledger("clinic");
    expect(l.entries.map((e) => e.seq)).toEqual([1, 2, 3, 4, 5]);
    const bundle = (await session.render(l))!;
    expect(bundle.data["text/plain"]).toContain("clinic #5 count by district");
  });
});

describe("embedded default on the demo scenario", () => {
  test("with nothing configured the session starts a local curator, says so first, and answers", async () => {
    const dir = mkdtempSync(join(tmpdir(), "hush-demo-"));
    const shown: MimeBundle[] = [];
    const demo = HushSession.create({ display: (b) => shown.push(b) }, { HUSH_DEMO_DIR: join(dir, "demo") });
    try {
      const visits = await demo.api.open("visits");
      expect(shown).toHaveLength(1);
      expect(shown[0].data["text/plain"]).toMatch(
        /^hush: no curator configured — started a local curator on the demo policy .*policy\.yaml, as analyst rowan\. \(local embedded mode: the data lives on this machine, in a separate process;/,
      );
      const a = await visits.count({ epsilon: 0.05 });
      expect(a.value).toBeGreaterThan(0);
      expect(String(a)).toMatch(/ · cost ε=0\.05\n/);
      expect(shown).toHaveLength(1); // said once
    } finally {
      await demo.close();
      rmSync(dir, { recursive: true, force: true });
    }
  });
});
