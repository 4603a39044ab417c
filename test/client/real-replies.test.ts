/**
 * Every reply shape a real curator sends passes the reply schema. One real curator process
 * (dist/runtime/curator/main.js, test/integration/helpers.ts) on ipc; each op is made with a raw
 * DEALER so the exact frame is checked, every measure kind is asked, and each error kind the
 * curator gives is provoked. The typed client then makes each op too and must accept the replies.
 */
import { randomUUID } from "node:crypto";
import { rmSync } from "node:fs";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { CuratorClient } from "../../runtime/client/client.js";
import type { Measure, QueryPlan, RequestBody, Response } from "../../runtime/protocol/messages.js";
import { describeReplyIssues, responseSchema } from "../../runtime/protocol/reply-schema.js";
import {
  countPlan,
  listenArgs,
  makeWorkspace,
  RawSpeaker,
  requireBuild,
  startCuratorChild,
  type CuratorChild,
  type Workspace,
} from "../integration/helpers.js";

let ws: Workspace;
let cur: CuratorChild;
let raw: RawSpeaker;

beforeAll(async () => {
  requireBuild();
  ws = makeWorkspace("rr", "50");
  cur = await startCuratorChild(listenArgs(ws, "ipc"));
  raw = RawSpeaker.connect(cur.ready);
});

afterAll(async () => {
  raw?.close();
  await cur?.stop();
  if (ws) rmSync(ws.dir, { recursive: true, force: true });
});

/** Sends one request frame and returns the reply after checking it against the schema. */
async function exchange(body: RequestBody | Record<string, unknown>, over: Record<string, unknown> = {}): Promise<Response> {
  const id = randomUUID();
  const reply = await raw.exchange([JSON.stringify({ v: 1, id, analyst: "ada", token: ws.tokens.ada, body, ...over })]);
  const r = responseSchema.safeParse(reply);
  if (!r.success) expect.fail(`${JSON.stringify(body).slice(0, 200)}: ${describeReplyIssues(r.error)}`);
  expect(r.data.id).toBe(id);
  return r.data;
}

async function expectOk(body: RequestBody): Promise<void> {
  const r = await exchange(body);
  if (!r.ok) expect.fail(`${body.op} was refused: ${r.error.kind}: ${r.error.message}`);
  expect(r.body.op).toBe(body.op);
}

async function expectError(body: RequestBody | Record<string, unknown>, kind: string, over: Record<string, unknown> = {}): Promise<Response> {
  const r = await exchange(body, over);
  expect(r.ok).toBe(false);
  if (!r.ok) expect(r.error.kind).toBe(kind);
  return r;
}

const plan = (measure: Measure, extra: Partial<QueryPlan> = {}): QueryPlan => ({
  v: 1,
  dataset: "clinic",
  measure,
  privacy: { epsilon: "1" },
  ...extra,
});

/** One plan per measure kind (and grouped, binned and zCDP variants); ε 1 each, well under the cap of 50. */
const ASKS: [string, QueryPlan][] = [
  ["count", countPlan("1")],
  ["sum", plan({ kind: "sum", column: "age" })],
  ["mean", plan({ kind: "mean", column: "wait_minutes" })],
  ["variance", plan({ kind: "variance", column: "age" })],
  ["std", plan({ kind: "std", column: "wait_minutes" })],
  ["quantile", plan({ kind: "quantile", column: "age", p: [0.25, 0.5, 0.9] })],
  ["histogram", plan({ kind: "histogram", column: "age", bins: 5 })],
  ["crosstab", plan({ kind: "crosstab", rows: "district", cols: "insured" })],
  ["describe", plan({ kind: "describe" })],
  ["count by district and binned age, filtered", plan({ kind: "count" }, { groupBy: [{ column: "district" }, { column: "age", bins: 4 }], where: { op: "ge", column: "age", value: 18 } })],
  ["mean by insured", plan({ kind: "mean", column: "age" }, { groupBy: [{ column: "insured" }], confidence: 0.9 })],
  ["zCDP count", { v: 1, dataset: "clinic_z", measure: { kind: "count" }, privacy: { rho: "0.01" } }],
  ["zCDP accuracy-first sum", { v: 1, dataset: "clinic_z", measure: { kind: "sum", column: "age" }, privacy: { within: 5000, atMost: "1000" } }],
];

describe("real curator replies pass the reply schema", () => {
  it("catalogue, open, spend, ledger before any release", async () => {
    await expectOk({ op: "catalogue" });
    await expectOk({ op: "open", dataset: "clinic" });
    await expectOk({ op: "open", dataset: "clinic_z" });
    await expectOk({ op: "spend", dataset: "clinic" });
    await expectOk({ op: "spend", dataset: "clinic_z" });
    await expectOk({ op: "ledger" });
  });

  it.each(ASKS)("preview and ask: %s", async (_name, p) => {
    await expectOk({ op: "preview", plan: p });
    await expectOk({ op: "ask", plan: p });
    // Asked again: the replay shape (cost "0", replay true).
    await expectOk({ op: "ask", plan: p });
    await expectOk({ op: "preview", plan: p });
  });

  it("spend and ledger after releases", async () => {
    await expectOk({ op: "spend", dataset: "clinic" });
    await expectOk({ op: "spend", dataset: "clinic_z" });
    await expectOk({ op: "ledger" });
    await expectOk({ op: "ledger", dataset: "clinic_z" });
  });

  it("each error the curator gives", async () => {
    const over = await expectError({ op: "ask", plan: countPlan("60") }, "over-cap");
    expect(!over.ok && over.error.spend).toBeTruthy();
    await expectError({ op: "open", dataset: "hidden" }, "unknown-dataset");
    await expectError({ op: "ask", plan: plan({ kind: "sum", column: "district" }) }, "bad-input");
    await expectError({ op: "spend", dataset: "clinic" }, "unauthorized", { token: "wrong-token" });
    await expectError({ op: "spend", dataset: "clinic" }, "protocol", { v: 9 });
    // A frame the curator cannot read comes back with id "".
    const unread = responseSchema.safeParse(await raw.exchange(["not json"]));
    expect(unread.success && !unread.data.ok && unread.data.id === "" && unread.data.error.kind).toBe("protocol");
  });

  it("the typed client accepts every op's reply", async () => {
    const client = await CuratorClient.connect({ address: cur.ready.address, analyst: "ada", token: ws.tokens.ada, timeoutMs: 30_000 });
    try {
      expect((await client.catalogue()).datasets.map((d) => d.name).sort()).toEqual(["clinic", "clinic_z"]);
      expect((await client.open("clinic_z")).spend.mode).toBe("zcdp");
      for (const [, p] of ASKS) {
        expect((await client.preview(p)).replay).toBe(true);
        expect((await client.ask(p)).replay).toBe(true);
      }
      expect((await client.spend("clinic")).releases).toBe(11);
      expect((await client.ledger()).length).toBe(ASKS.length);
    } finally {
      await client.close();
    }
  });
});
