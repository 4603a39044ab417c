/**
 * Spend per population (issue 9, item 5), through a real curator process: two datasets over one
 * source file are the same people, so an analyst granted both draws on one cap. Before, each
 * dataset had its own cap and the analyst could spend both on the same people.
 */
import { readFileSync, writeFileSync } from "node:fs";
import { parse, stringify } from "yaml";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { CuratorClient } from "../../runtime/client/client.js";
import { OverCapError } from "../../runtime/errors.js";
import { loadPublicKey, receiptHash } from "../../runtime/protocol/receipts.js";
import { checkReceiptChains } from "../../cli/audit/chain.js";
import {
  CLINIC_CSV,
  countPlan,
  listenArgs,
  makeWorkspace,
  requireBuild,
  startCuratorChild,
  type CuratorChild,
  type Transport,
  type Workspace,
} from "./helpers.js";

/** The workspace of helpers.ts plus "clinic_b": a second dataset over clinic.csv, granted to ada only. */
function twoViewWorkspace(prefix: string): Workspace {
  const ws = makeWorkspace(prefix, "1");
  const policy = parse(readFileSync(ws.policyFile, "utf8")) as { datasets: Record<string, { analysts: string[]; source: string }> };
  policy.datasets.clinic_b = { ...policy.datasets.clinic, analysts: ["ada"] };
  writeFileSync(ws.policyFile, stringify(policy));
  return ws;
}

describe.each<Transport>(["ipc", "tcp"])("spend per population over %s", (transport) => {
  let ws: Workspace;
  let cur: CuratorChild;
  const connect = (analyst: "ada" | "ben") =>
    CuratorClient.connect({
      address: cur.ready.address,
      analyst,
      token: ws.tokens[analyst],
      ...(cur.ready.curvePublicKey ? { curveServerKey: cur.ready.curvePublicKey } : {}),
      timeoutMs: 30_000,
    });

  beforeAll(async () => {
    requireBuild();
    ws = twoViewWorkspace(`pop-${transport}`);
    cur = await startCuratorChild(listenArgs(ws, transport));
  });
  afterAll(async () => {
    await cur?.stop();
  });

  it("refuses the second dataset once the shared cap is reached, spends nothing on the refusal, and names the population total", async () => {
    const ada = await connect("ada");
    try {
      const first = await ada.ask(countPlan("0.6"));
      expect(first.spend).toMatchObject({ dataset: "clinic", population: "clinic.csv", spentEpsilon: "3/5", releases: 1 });
      expect(first.receipt).toMatchObject({ dataset: "clinic", population: "clinic.csv", seq: 1 });

      // The other view of the same people starts where the first one is, not at zero.
      const opened = await ada.open("clinic_b");
      expect(opened.spend).toMatchObject({ dataset: "clinic_b", population: "clinic.csv", spentEpsilon: "3/5", remainingEpsilon: "2/5" });
      const preview = await ada.preview(countPlan("0.5", {}, "clinic_b"));
      expect(preview).toMatchObject({ affordable: false, replay: false });
      expect(preview.spend.spentEpsilon).toBe("3/5");

      const err = await ada.ask(countPlan("0.5", {}, "clinic_b")).then(
        () => null,
        (e: unknown) => e,
      );
      expect(err).toBeInstanceOf(OverCapError);
      const over = err as OverCapError;
      expect(over.message).toMatch(/costs ε 0\.5, but .* has ε 0\.4 left of the cap 1 on population clinic\.csv.*spent 0\.6\).*nothing was spent/);
      expect(over.spend).toMatchObject({ dataset: "clinic_b", population: "clinic.csv", spentEpsilon: "3/5", releases: 1 });
      // Nothing was spent on the refusal, on either view.
      expect(await ada.spend("clinic_b")).toMatchObject({ spentEpsilon: "3/5", releases: 1 });
      expect(await ada.spend("clinic")).toMatchObject({ spentEpsilon: "3/5", releases: 1 });

      // Exactly the remainder still fits, on either view; the chain continues across datasets.
      const second = await ada.ask(countPlan("0.4", {}, "clinic_b"));
      expect(second.spend).toMatchObject({ dataset: "clinic_b", population: "clinic.csv", spentEpsilon: "1", remainingEpsilon: "0" });
      expect(second.receipt).toMatchObject({ dataset: "clinic_b", population: "clinic.csv", seq: 2, total: "1", prev: receiptHash(first.receipt) });
      await expect(ada.ask(countPlan("0.01", { where: { op: "ge", column: "age", value: 1 } }))).rejects.toThrow(OverCapError);

      // Replays stay free, on a full account too.
      const again = await ada.ask(countPlan("0.6"));
      expect(again).toMatchObject({ replay: true, cost: "0" });
      expect(again.receipt).toEqual(first.receipt);

      const entries = await ada.ledger();
      expect(entries.map((e) => [e.dataset, e.population, e.seq, e.total])).toEqual([
        ["clinic", "clinic.csv", 1, "3/5"],
        ["clinic_b", "clinic.csv", 2, "1"],
      ]);
      expect(checkReceiptChains(entries.map((e) => e.receipt), loadPublicKey(ws.publicKeyB64))).toEqual([]);
    } finally {
      await ada.close();
    }
  });

  it("keeps accounts per analyst: another analyst on the same people has their own cap", async () => {
    const ben = await connect("ben");
    try {
      expect(await ben.spend("clinic")).toMatchObject({ population: "clinic.csv", spentEpsilon: "0", releases: 0 });
      expect((await ben.ask(countPlan("0.5"))).spend.spentEpsilon).toBe("1/2");
    } finally {
      await ben.close();
    }
  });
});

describe("a policy granting one analyst two differing caps on one population", () => {
  it("does not start: the error names both datasets and the path", async () => {
    requireBuild();
    const ws = makeWorkspace("pop-bad", "1");
    const policy = parse(readFileSync(ws.policyFile, "utf8")) as { datasets: Record<string, Record<string, unknown>> };
    policy.datasets.clinic_z.source = CLINIC_CSV;
    writeFileSync(ws.policyFile, stringify(policy));
    await expect(startCuratorChild(listenArgs(ws, "ipc"))).rejects.toThrow(
      /datasets\.clinic_z\.accounting: datasets clinic and clinic_z are one population \("clinic\.csv", the same people\) and ada is granted both/,
    );
  });
});
