/**
 * Many clients at once: 4 child processes, 50 queries each, all spending one analyst's budget on one
 * dataset, split over two curator processes that share one ledger file. The cap must hold exactly.
 */
import { spawn } from "node:child_process";
import { rmSync } from "node:fs";
import { join } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import { Ledger } from "../../runtime/curator/ledger.js";
import { loadPublicKey } from "../../runtime/protocol/receipts.js";
import { checkReceiptChains } from "../../cli/audit/chain.js";
import type { Receipt } from "../../runtime/protocol/messages.js";
import { CLIENT_JS, ROOT, makeWorkspace, requireBuild, startCuratorChild, type CuratorChild, type Workspace } from "./helpers.js";

const CHILDREN = 4;
const PER_CHILD = 50;

function runChild(address: string, token: string, index: number): Promise<{ released: Receipt[]; refused: number; other: string[] }> {
  return new Promise((resolve, reject) => {
    const child = spawn(
      process.execPath,
      [join(ROOT, "test/integration/fixtures/ask-many.mjs"), CLIENT_JS, address, "ada", token, String(index), String(PER_CHILD), "0.01"],
      { stdio: ["ignore", "pipe", "inherit"] },
    );
    let out = "";
    child.stdout.on("data", (c: Buffer) => (out += c.toString("utf8")));
    child.once("exit", (code) => {
      if (code !== 0) reject(new Error(`client ${index} exited with ${code}`));
      else resolve(JSON.parse(out) as { released: Receipt[]; refused: number; other: string[] });
    });
  });
}

describe("concurrent spending", () => {
  let ws: Workspace;
  const curators: CuratorChild[] = [];
  afterAll(async () => {
    await Promise.all(curators.map((c) => c.stop()));
    if (ws) rmSync(ws.dir, { recursive: true, force: true });
  });

  it(`${CHILDREN} clients x ${PER_CHILD} queries on two curators never pass the cap`, async () => {
    requireBuild();
    ws = makeWorkspace("conc", "1");
    for (const n of [1, 2]) {
      curators.push(await startCuratorChild(["--policy", ws.policyFile, "--listen", `ipc://${join(ws.dir, `c${n}.sock`)}`]));
    }
    const results = await Promise.all(
      Array.from({ length: CHILDREN }, (_, i) => runChild(curators[i % 2].ready.address, ws.tokens.ada, i)),
    );
    expect(results.flatMap((r) => r.other)).toEqual([]);
    const released = results.flatMap((r) => r.released);
    // Each query costs exactly 1/100 against a cap of 1: exactly 100 fit (docs/methods.md [C1.4c] style
    // exactness; binary64 sums would stop at 99 or allow 101 depending on order), the rest are refused.
    expect(released).toHaveLength(100);
    expect(results.reduce((a, r) => a + r.refused, 0)).toBe(CHILDREN * PER_CHILD - 100);

    const ledger = Ledger.open(ws.ledgerFile);
    try {
      const entries = ledger.entries("ada", "clinic");
      expect(entries).toHaveLength(100);
      expect(entries[99].total).toBe("1");
      expect(ledger.spent("ada", "clinic.csv").spent.toString()).toBe("1"); // the population of clinic: its file
      // Ledger and received receipts match one for one, and form one valid chain.
      const bySeq = new Map(released.map((r) => [r.seq, r]));
      expect(entries.map((e) => e.receipt)).toEqual(entries.map((e) => bySeq.get(e.seq)));
      expect(checkReceiptChains(released, loadPublicKey(ws.publicKeyB64))).toEqual([]);
    } finally {
      ledger.close();
    }
  });
});
