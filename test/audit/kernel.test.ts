/**
 * The audit corpus on a notebook executed for real: notebooks/course-assignment.ipynb run through the
 * hush kernel (kernel/client, the Jupyter protocol) as the student analyst against a curator on the
 * demo data. Needs the build (dist/), as npm test does first.
 */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import { afterAll, beforeAll, describe, expect } from "vitest";
import { DEMO_ANALYSTS, ensureDemoData } from "../../notebooks/scenario/generate.js";
import { CuratorClient } from "../../runtime/client/client.js";
import { startEmbeddedCurator, type EmbeddedCurator } from "../../runtime/client/embedded.js";
import { loadPublicKey } from "../../runtime/protocol/receipts.js";
import { readNotebook } from "../../cli/audit/notebook.js";
import { executeNotebook } from "../../cli/commands/run.js";
import { type CorpusFixture, auditCorpus } from "./corpus.js";

const NOTEBOOK = resolve(import.meta.dirname, "../../notebooks/course-assignment.ipynb");

describe("notebook audit on the course assignment executed by the kernel", () => {
  let fx: CorpusFixture;
  let curator: EmbeddedCurator | undefined;
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
});
