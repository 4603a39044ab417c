/**
 * A regression and a correlation end to end (docs/methods.md §18, §19): a notebook run through the
 * hush kernel (kernel/client, the Jupyter protocol) as the researcher rowan against a real curator
 * process on the invented demo data; the releases' receipts and every view of them must pass the
 * notebook audit (`hush audit`'s checks), and a tampered coefficient must not. Needs the build
 * (dist/), as npm test does first.
 */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { auditNotebook } from "../../cli/audit/checks.js";
import type { Notebook } from "../../cli/audit/notebook.js";
import { executeNotebook } from "../../cli/commands/run.js";
import { DEMO_ANALYSTS, ensureDemoData } from "../../notebooks/scenario/generate.js";
import { type EmbeddedCurator, startEmbeddedCurator } from "../../runtime/client/embedded.js";
import { OUTPUT_METADATA_KEY, type OutputMetadata } from "../../runtime/protocol/messages.js";
import { loadPublicKey } from "../../runtime/protocol/receipts.js";

const CELLS = [
  `const visits = await hush.open("visits");`,
  `await visits.preview.regress("wait_minutes", ["age", "district"], { epsilon: 0.3 })`,
  `await visits.regress("wait_minutes", ["age", "district"], { epsilon: 0.3 })`,
  `await visits.correlate(["age", "wait_minutes", "cost"], { epsilon: 0.2 })`,
];

function notebook(): Notebook {
  return {
    nbformat: 4,
    nbformat_minor: 5,
    metadata: { kernelspec: { name: "hush", display_name: "hush (TypeScript)", language: "typescript" } },
    cells: CELLS.map((source, i) => ({ cell_type: "code", id: `c${i}`, source, metadata: {}, outputs: [], execution_count: null })),
  } as unknown as Notebook;
}

describe("regression and correlation through the kernel and a curator process, audited", () => {
  let dir = "";
  let curator: EmbeddedCurator | undefined;
  let nb: Notebook;
  let key: ReturnType<typeof loadPublicKey>;
  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "hush-regression-e2e-"));
    const demo = await ensureDemoData({ dir: join(dir, "state") });
    curator = await startEmbeddedCurator({ policyFile: demo.policyFile, stateDir: dir });
    key = loadPublicKey(curator.publicKeyB64);
    nb = notebook();
    const run = await executeNotebook(nb, { env: { HUSH_CURATOR: curator.address, HUSH_ANALYST: "rowan", HUSH_TOKEN: DEMO_ANALYSTS.rowan.token } });
    expect(run.failed, JSON.stringify(nb.cells.flatMap((c) => c.outputs ?? []).filter((o) => o.output_type === "error"))).toBe(0);
  }, 300_000);
  afterAll(async () => {
    await curator?.stop();
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  const releases = () =>
    nb.cells.flatMap((c) => (c.outputs ?? []).filter((o) => (o.metadata as Record<string, unknown> | undefined)?.[OUTPUT_METADATA_KEY] !== undefined));

  it("releases both, with signed receipts, and the notebook passes the audit", () => {
    const outs = releases();
    expect(outs).toHaveLength(2);
    const metas = outs.map((o) => (o.metadata as Record<string, OutputMetadata>)[OUTPUT_METADATA_KEY]);
    const reg = metas[0].receipt.result;
    expect(reg.map((r) => r[0][0])).toEqual([
      "(intercept)",
      "age",
      "district: Riverside (vs Northgate)",
      "district: Elmstead (vs Northgate)",
      "district: Harrow Vale (vs Northgate)",
      "district: Kestrel Point (vs Northgate)",
      "district: Saltmarsh (vs Northgate)",
      "(fit)",
      "(rows)",
    ]);
    expect(reg.filter((r) => r[1] === "coefficient").every((r) => r[3] !== null && r[4] !== null && r[5] !== null)).toBe(true);
    expect(metas[1].receipt.result.filter((r) => r[1] === "correlation")).toHaveLength(3);
    // 1 + 1 + 5 design columns and the response: 8 factors, 36 pairs, less 10 structural zeros and 5 aliases.
    expect(metas[0].receipt.mechanisms).toHaveLength(21);
    expect(metas[0].receipt.cost).toBe("3/10");
    const report = auditNotebook(nb, key);
    expect(report.findings).toEqual([]);
  });

  it("a coefficient edited in the HTML view is a finding", () => {
    const copy = structuredClone(nb);
    const out = copy.cells[2].outputs!.find((o) => (o.metadata as Record<string, unknown> | undefined)?.[OUTPUT_METADATA_KEY] !== undefined)!;
    const data = out.data as Record<string, string>;
    // The second coefficient (age) as the compact view prints it (docs/methods.md §23), last digit changed.
    const html = data["text/html"];
    const spans = [...html.matchAll(/<span class="hush-value">([^<]*)<\/span>/g)];
    const target = spans[1];
    const changed = target[1].replace(/\d(?=\D*$)/, (d) => String((Number(d) + 1) % 10));
    const edited = html.slice(0, target.index) + `<span class="hush-value">${changed}</span>` + html.slice(target.index! + target[0].length);
    expect(edited).not.toBe(data["text/html"]);
    data["text/html"] = edited;
    expect(auditNotebook(copy, key).findings.length).toBeGreaterThan(0);
  });
});
