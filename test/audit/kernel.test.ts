/**
 * The audit corpus on a notebook executed for real: notebooks/course-assignment.ipynb run through the
 * hush kernel (kernel/client, the Jupyter protocol) as the student analyst against a curator on the
 * demo data. Needs the build (dist/), as npm test does first.
 */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { DEMO_ANALYSTS, ensureDemoData } from "../../notebooks/scenario/generate.js";
import { CuratorClient } from "../../runtime/client/client.js";
import { startEmbeddedCurator, type EmbeddedCurator } from "../../runtime/client/embedded.js";
import { loadPublicKey } from "../../runtime/protocol/receipts.js";
import { readNotebook } from "../../cli/audit/notebook.js";
import { executeNotebook } from "../../cli/commands/run.js";
import { type CorpusFixture, auditCorpus } from "./corpus.js";
import { auditNotebook } from "../../cli/audit/checks.js";
import type { Notebook } from "../../cli/audit/notebook.js";
import { Answer } from "../../runtime/api/answer.js";
import { answerBundle } from "../../kernel/display/bundle.js";
import type { Receipt } from "../../runtime/protocol/messages.js";
import { editReleaseCode, lowerEpsilonInCode, releasesOf } from "./tamper.js";

const NOTEBOOK = resolve(import.meta.dirname, "../../notebooks/course-assignment.ipynb");

describe("notebook audit on the course assignment executed by the kernel", () => {
  let fx: CorpusFixture;
  let curator: EmbeddedCurator | undefined;
  /** The course notebook (optionally edited first) run again as kit, through the kernel, on the same ledger. */
  const runAgain = async (edit: (nb: Notebook) => void = () => {}): Promise<Notebook> => {
    const nb = readNotebook(NOTEBOOK);
    edit(nb);
    const run = await executeNotebook(nb, { env: { HUSH_CURATOR: curator!.address, HUSH_ANALYST: "kit", HUSH_TOKEN: DEMO_ANALYSTS.kit.token } });
    expect(run.failed).toBe(0);
    return nb;
  };
  const receipts = (nb: Notebook): Receipt[] => releasesOf(nb).map((x) => x.meta.receipt);
  beforeAll(async () => {
    const dir = mkdtempSync(join(tmpdir(), "hush-audit-kernel-"));
    const demo = await ensureDemoData({ dir: join(dir, "state") });
    curator = await startEmbeddedCurator({ policyFile: demo.policyFile, stateDir: dir });
    const nb = readNotebook(NOTEBOOK);
    const run = await executeNotebook(nb, {
      env: { HUSH_CURATOR: curator.address, HUSH_ANALYST: "kit", HUSH_TOKEN: DEMO_ANALYSTS.kit.token },
    });
    expect(run.failed, JSON.stringify(nb.cells.flatMap((c) => c.outputs ?? []).filter((o) => o.output_type === "error"))).toBe(0);
    // The researcher's receipt from the same curator: what a student might paste in.
    const rowan = await CuratorClient.connect({ address: curator.address, analyst: "rowan", token: DEMO_ANALYSTS.rowan.token });
    const foreign = (await rowan.ask({ v: 1, dataset: "visits", measure: { kind: "count" }, privacy: { epsilon: "0.05" } })).receipt;
    await rowan.close();
    fx = { nb, key: loadPublicKey(curator.publicKeyB64), keyFile: demo.publicKeyFile, foreign, dir };
  }, 300_000);
  afterAll(async () => {
    await curator?.stop();
    if (fx) rmSync(fx.dir, { recursive: true, force: true });
  });
  auditCorpus(() => fx);

  it("passes the notebook run again unchanged (hush run): every release a replay carrying the first receipt, bound to the same code", async () => {
    const again = await runAgain();
    expect(receipts(again)).toEqual(receipts(fx.nb));
    expect(releasesOf(again).every((x) => x.meta.replay)).toBe(true);
    expect(receipts(again).every((r) => typeof r.cell === "string")).toBe(true);
    expect(auditNotebook(again, fx.key).findings).toEqual([]);
  }, 300_000);

  it("passes the same question asked again from changed code (a comment added): the replay carries the first receipt and the curator's statement that this code asked", async () => {
    let cell = -1;
    const again = await runAgain((nb) => {
      cell = nb.cells.findIndex((c) => c.cell_type === "code" && [c.source].flat().join("") === "await visits.count({ epsilon: 0.1 })");
      expect(cell).toBeGreaterThan(0);
      nb.cells[cell].source = "// everyone in the course data\nawait visits.count({ epsilon: 0.1 })";
    });
    expect(receipts(again)).toEqual(receipts(fx.nb));
    const metas = releasesOf(again).map((x) => x.meta);
    expect(metas.filter((m) => m.reasked !== undefined).map((m) => m.receipt.seq)).toEqual([1]);
    expect(auditNotebook(again, fx.key).findings).toEqual([]);

    // The statement names that code: editing it again after the run is caught.
    const edited = editReleaseCode(again, 1, lowerEpsilonInCode);
    expect(auditNotebook(edited, fx.key).findings.map((f) => [f.kind, f.cell])).toEqual([["code-mismatch", cell]]);
    // ... and it names that receipt: copied, with its code, onto another release, it does not hold.
    const moved = JSON.parse(JSON.stringify(again)) as Notebook;
    const target = releasesOf(moved).find((x) => x.meta.receipt.seq === 2)!;
    moved.cells[target.cell].source = moved.cells[cell].source;
    target.output.metadata!.hush = { ...target.meta, reasked: metas.find((m) => m.reasked)!.reasked };
    expect(auditNotebook(moved, fx.key).findings.map((f) => [f.kind, f.cell])).toEqual([["code-mismatch", target.cell]]);
    // Without the statement (a curator before this change), the finding says how to fix it.
    const stripped = JSON.parse(JSON.stringify(again)) as Notebook;
    for (const x of releasesOf(stripped)) delete (x.output.metadata!.hush as { reasked?: unknown }).reasked;
    const r = auditNotebook(stripped, fx.key);
    expect(r.findings.map((f) => [f.kind, f.cell])).toEqual([["code-mismatch", cell]]);
    expect(r.findings[0].message).toMatch(/the curator returned the first release, which names the first code, without its statement that this code asked again: restore that code, or run the cell again/);
  }, 300_000);

  it("reports a release asked by a script outside the kernel and pasted into the notebook as not bound to a cell", async () => {
    const kit = await CuratorClient.connect({ address: curator!.address, analyst: "kit", token: DEMO_ANALYSTS.kit.token });
    const release = await kit.ask({ v: 1, dataset: "visits-course", measure: { kind: "count" }, privacy: { epsilon: "0.05" } });
    await kit.close();
    expect(release.receipt.cell).toBeUndefined();
    const nb = JSON.parse(JSON.stringify(fx.nb)) as Notebook;
    const bundle = await answerBundle(new Answer(release, release.cost));
    nb.cells.push({
      cell_type: "code",
      source: "await visits.count({ epsilon: 0.05 })",
      execution_count: 20,
      outputs: [{ output_type: "execute_result", execution_count: 20, data: bundle.data, metadata: bundle.metadata }],
      metadata: {},
    });
    const r = auditNotebook(nb, fx.key);
    expect(r.findings.map((f) => [f.kind, f.cell])).toEqual([["not-bound", nb.cells.length - 1]]);
  }, 60_000);
});
