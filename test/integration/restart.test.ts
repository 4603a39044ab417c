/**
 * Restart: the curator is SIGKILLed between queries (no clean shutdown) and started again on the
 * same policy. Spend is intact, replays return the stored values, and the receipt chain continues.
 */
import { rmSync } from "node:fs";
import { join } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import { CuratorClient } from "../../runtime/client/client.js";
import type { QueryPlan, Release } from "../../runtime/protocol/messages.js";
import { loadPublicKey } from "../../runtime/protocol/receipts.js";
import { checkReceiptChains } from "../../cli/audit/chain.js";
import { countPlan, makeWorkspace, requireBuild, startCuratorChild, type CuratorChild, type Workspace } from "./helpers.js";

describe("restart after SIGKILL", () => {
  let ws: Workspace;
  let cur: CuratorChild | undefined;
  afterAll(async () => {
    await cur?.stop();
    if (ws) rmSync(ws.dir, { recursive: true, force: true });
  });

  it("keeps spend, replays stored releases and continues the chain", async () => {
    requireBuild();
    ws = makeWorkspace("restart", "1");
    const args = ["--policy", ws.policyFile, "--listen", `ipc://${join(ws.dir, "c.sock")}`];
    const session = async <T>(fn: (c: CuratorClient) => Promise<T>): Promise<T> => {
      const c = await CuratorClient.connect({ address: cur!.ready.address, analyst: "ada", token: ws.tokens.ada, timeoutMs: 30_000 });
      try {
        return await fn(c);
      } finally {
        await c.close();
      }
    };
    const plans: QueryPlan[] = [
      countPlan("0.1"),
      countPlan("0.2", { groupBy: [{ column: "district" }] }),
      { v: 1, dataset: "clinic", measure: { kind: "mean", column: "wait_minutes" }, privacy: { epsilon: "0.15" } },
    ];

    cur = await startCuratorChild(args);
    const first: Release[] = await session(async (c) => {
      const out: Release[] = [];
      for (const p of plans) out.push(await c.ask(p));
      return out;
    });
    await cur.kill();
    expect(cur.child.signalCode).toBe("SIGKILL");

    cur = await startCuratorChild(args);
    const { spend, again, next, entries } = await session(async (c) => {
      const spend = await c.spend("clinic");
      const again: Release[] = [];
      for (const p of plans) again.push(await c.ask(p));
      const next = await c.ask(countPlan("0.05", { where: { op: "eq", column: "insured", value: true } }));
      return { spend, again, next, entries: await c.ledger("clinic") };
    });
    expect(spend).toMatchObject({ spentEpsilon: "9/20", releases: 3 });
    again.forEach((r, i) => {
      expect(r.replay).toBe(true);
      expect(r.rows).toEqual(first[i].rows);
      expect(r.receipt).toEqual(first[i].receipt);
    });
    expect(next.receipt.seq).toBe(4);
    expect(next.receipt.total).toBe("1/2");
    expect(entries.map((e) => e.receipt)).toEqual([...first.map((r) => r.receipt), next.receipt]);
    expect(checkReceiptChains(entries.map((e) => e.receipt), loadPublicKey(ws.publicKeyB64))).toEqual([]);
  });
});
