/** The audit corpus on a notebook assembled from receipts signed with the curator's signing code. */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { generateCuratorKey, loadCuratorKey } from "../../runtime/curator/keys.js";
import { auditNotebook } from "../../cli/audit/checks.js";
import { OUTPUT_METADATA_KEY } from "../../runtime/protocol/messages.js";
import { type CorpusFixture, auditCorpus } from "./corpus.js";
import { clone, releaseWithSeq } from "./tamper.js";
import { assembleNotebook, rowsOf, signedChain } from "./signed-notebook.js";

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
});
