/** The audit corpus on a notebook assembled from receipts signed with the curator's signing code. */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe } from "vitest";
import { generateCuratorKey, loadCuratorKey } from "../../runtime/curator/keys.js";
import { type CorpusFixture, auditCorpus } from "./corpus.js";
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
});
