/**
 * The reported re-run, on the real kernel: the course notebook run through the hush kernel as the
 * student, one epsilon changed, the notebook run again top to bottom (a new kernel: a restart) on
 * the same curator. The audit passes it and reports the old answer's spend as not shown, exactly;
 * --strict makes that one finding. Needs the build (dist/), as npm test does first.
 */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { DEMO_ANALYSTS, ensureDemoData } from "../../notebooks/scenario/generate.js";
import { startEmbeddedCurator, type EmbeddedCurator } from "../../runtime/client/embedded.js";
import { loadPublicKey } from "../../runtime/protocol/receipts.js";
import { Rational } from "../../runtime/core/index.js";
import { auditNotebook } from "../../cli/audit/checks.js";
import { type Notebook, joinText, readNotebook } from "../../cli/audit/notebook.js";
import { executeNotebook } from "../../cli/commands/run.js";

const NOTEBOOK = resolve(import.meta.dirname, "../../notebooks/course-assignment.ipynb");

describe("audit of the course notebook re-run after one epsilon changed (real kernel)", () => {
  let curator: EmbeddedCurator | undefined;
  let dir: string;
  let first: Notebook;
  let second: Notebook;
  let changedCell = -1;
  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "hush-audit-rerun-"));
    const demo = await ensureDemoData({ dir: join(dir, "state") });
    curator = await startEmbeddedCurator({ policyFile: demo.policyFile, stateDir: dir });
    const env = { HUSH_CURATOR: curator.address, HUSH_ANALYST: "kit", HUSH_TOKEN: DEMO_ANALYSTS.kit.token };
    first = readNotebook(NOTEBOOK);
    const run1 = await executeNotebook(first, { env });
    expect(run1.failed).toBe(0);
    second = JSON.parse(JSON.stringify(first)) as Notebook;
    changedCell = second.cells.findIndex((c) => c.cell_type === "code" && /count\(\{ epsilon: 0\.1 \}\)/.test(joinText(c.source)));
    expect(changedCell).toBeGreaterThan(0);
    second.cells[changedCell].source = joinText(second.cells[changedCell].source).replace("epsilon: 0.1", "epsilon: 0.05");
    const run2 = await executeNotebook(second, { env });
    expect(run2.failed).toBe(0);
  }, 300_000);
  afterAll(async () => {
    await curator?.stop();
    rmSync(dir, { recursive: true, force: true });
  });

  it("passes, with the replaced answer's spend (ε 0.1) reported as not shown and counted", () => {
    const key = loadPublicKey(curator!.publicKeyB64);
    const before = auditNotebook(first, key);
    expect(before.findings).toEqual([]);
    const r = auditNotebook(second, key);
    expect(r.findings).toEqual([]);
    expect(r.ok).toBe(true);
    expect(r.superseded).toMatchObject({ releases: 1, spend: "0.1" });
    expect(r.notes.map((n) => n.kind)).toEqual(["superseded"]);
    // The total held to the cap is the first run's total plus the new answer's cost.
    expect(Rational.parse(r.total!).eq(Rational.parse(before.total!).add(Rational.parse("0.05")))).toBe(true);
    const strict = auditNotebook(second, key, { strict: true });
    expect(strict.findings.map((f) => f.kind)).toEqual(["superseded"]);
  });
});
