/**
 * Bad input corpus, part 1: what reaches a running curator over its socket. Query plans, protocol
 * frames (raw bytes over a zeromq DEALER socket, which the typed client would never send) and
 * tokens. For each case: a clear error of the expected kind, the curator stays up, and no budget is
 * spent (the analyst's spend is compared before and after each case). At the end a good query
 * still works and costs exactly its price.
 *
 * Expected kinds follow the project's error contract (runtime/errors.ts, runtime/protocol/schema.ts):
 * envelope problems are "protocol", problems inside a plan "bad-input", wrong credentials
 * "unauthorized", datasets not granted "unknown-dataset".
 */
import fs from "node:fs";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { MAX_FRAME_BYTES, type QueryPlan, type Response, type SpendSummary } from "../../runtime/protocol/messages.js";
import { Rational } from "../../runtime/core/index.js";
import { CuratorProcess } from "../../bench/curator-process.js";
import { makeRelWorkspace, mix32, RawSpeaker, request, type RelWorkspace } from "./fixtures.js";

type Kind = "bad-input" | "protocol" | "unauthorized" | "unknown-dataset" | "over-cap";

let ws: RelWorkspace;
let curator: CuratorProcess;
let speaker: RawSpeaker;
let baseline: SpendSummary;

const good = (over: Partial<QueryPlan> & Record<string, unknown> = {}): Record<string, unknown> => ({
  v: 1,
  dataset: "visits",
  measure: { kind: "count" },
  privacy: { epsilon: "0.1" },
  ...over,
});

async function spendOf(analyst: string): Promise<SpendSummary> {
  const r = await speaker.exchange(request(analyst, ws.tokens[analyst], { op: "spend", dataset: "visits" }));
  if (r === null || !r.ok || r.body.op !== "spend") throw new Error(`spend request failed: ${JSON.stringify(r)}`);
  return r.body.spend;
}

function expectRefused(r: Response | null, kind: Kind | Kind[]): void {
  expect(r).not.toBeNull();
  expect(r!.ok).toBe(false);
  if (r!.ok) return;
  expect(Array.isArray(kind) ? kind : [kind]).toContain(r!.error.kind);
  // A clear message: says something, and names no internal failure.
  expect(r!.error.message.length).toBeGreaterThan(10);
  expect(r!.error.kind).not.toBe("internal");
}

async function expectNothingSpent(): Promise<void> {
  expect(curator.exited).toBe(false);
  for (const a of ["a1", "a2"]) {
    const s = await spendOf(a);
    expect({ spent: s.spentEpsilon, releases: s.releases }).toEqual({ spent: "0", releases: 0 });
  }
}

beforeAll(async () => {
  // a3 exists but is not granted "visits".
  ws = makeRelWorkspace({ prefix: "badw", analysts: 3, cap: "1", rows: 500, granted: 2 });
  curator = await CuratorProcess.start({ policyFile: ws.policyFile, listen: ws.listen });
  speaker = new RawSpeaker(ws.listen);
  baseline = await spendOf("a1");
}, 120_000);

afterAll(async () => {
  speaker?.close();
  await curator?.stop();
  if (ws) fs.rmSync(ws.dir, { recursive: true, force: true });
});

// ---- query plans -----------------------------------------------------------------------------

const deep = (n: number): Record<string, unknown> => (n === 0 ? { op: "gt", column: "age", value: 20 } : { op: "not", of: deep(n - 1) });
const many = (n: number) => ({ op: "and", of: Array.from({ length: n }, (_, i) => ({ op: "gt", column: "age", value: i })) });

const PLAN_CASES: [string, Record<string, unknown>, Kind | Kind[]][] = [
  ["unknown dataset", good({ dataset: "nope" }), "unknown-dataset"],
  ["dataset not a string", good({ dataset: 7 as unknown as string }), "bad-input"],
  ["empty dataset name", good({ dataset: "" }), "bad-input"],
  ["plan version 2", good({ v: 2 as 1 }), "bad-input"],
  ["plan version missing", { dataset: "visits", measure: { kind: "count" }, privacy: { epsilon: "0.1" } }, "bad-input"],
  ["measure missing", { v: 1, dataset: "visits", privacy: { epsilon: "0.1" } }, "bad-input"],
  ["privacy missing", { v: 1, dataset: "visits", measure: { kind: "count" } }, "bad-input"],
  ["unknown plan field", good({ limit: 5 }), "bad-input"],
  ["unknown measure kind", good({ measure: { kind: "mode", column: "age" } as never }), "bad-input"],
  ["sum of unknown column", good({ measure: { kind: "sum", column: "salary" } }), "bad-input"],
  ["sum of the unit column", good({ measure: { kind: "sum", column: "pid" } }), "bad-input"],
  ["sum of a category", good({ measure: { kind: "sum", column: "region" } }), "bad-input"],
  ["mean of a date", good({ measure: { kind: "mean", column: "day" } }), "bad-input"],
  ["quantile with no p", good({ measure: { kind: "quantile", column: "age", p: [] } }), "bad-input"],
  ["quantile p = 0", good({ measure: { kind: "quantile", column: "age", p: [0] } }), "bad-input"],
  ["quantile p = 1", good({ measure: { kind: "quantile", column: "age", p: [1] } }), "bad-input"],
  ["quantile p = 1.5", good({ measure: { kind: "quantile", column: "age", p: [1.5] } }), "bad-input"],
  ["quantile p as text", good({ measure: { kind: "quantile", column: "age", p: ["0.5"] } as never }), "bad-input"],
  ["quantile of a category", good({ measure: { kind: "quantile", column: "region", p: [0.5] } }), "bad-input"],
  ["histogram with 0 bins", good({ measure: { kind: "histogram", column: "age", bins: 0 } }), "bad-input"],
  ["histogram with 2.5 bins", good({ measure: { kind: "histogram", column: "age", bins: 2.5 } }), "bad-input"],
  ["histogram with a million bins", good({ measure: { kind: "histogram", column: "age", bins: 1_000_000 } }), "bad-input"],
  ["crosstab of numbers", good({ measure: { kind: "crosstab", rows: "age", cols: "amount" } }), "bad-input"],
  ["crosstab of unknown column", good({ measure: { kind: "crosstab", rows: "region", cols: "ward" } }), "bad-input"],
  ["group by unknown column", good({ groupBy: [{ column: "ward" }] }), "bad-input"],
  ["group by the unit column", good({ groupBy: [{ column: "pid" }] }), "bad-input"],
  ["group by a number without bins", good({ groupBy: [{ column: "amount" }] }), "bad-input"],
  ["group by an empty list", good({ groupBy: [] }), "bad-input"],
  ["group by four keys", good({ groupBy: [{ column: "region" }, { column: "member" }, { column: "age", bins: 2 }, { column: "amount", bins: 2 }] }), "bad-input"],
  ["filter on unknown column", good({ where: { op: "eq", column: "ward", value: "x" } }), "bad-input"],
  ["filter on the unit column", good({ where: { op: "eq", column: "pid", value: 3 } }), "bad-input"],
  ["filter number against text", good({ where: { op: "gt", column: "age", value: "old" } }), "bad-input"],
  ["filter with an impossible date", good({ where: { op: "lt", column: "day", value: "2025-13-45" } }), "bad-input"],
  ["filter with an unknown op", good({ where: { op: "like", column: "region", value: "n%" } as never }), "bad-input"],
  ["filter 'in' with no values", good({ where: { op: "in", column: "region", values: [] } }), "bad-input"],
  ["filter nested 50 deep", good({ where: deep(50) as never }), "bad-input"],
  ["filter with 500 conditions", good({ where: many(500) as never }), "bad-input"],
  ["filter value null", good({ where: { op: "gt", column: "age", value: null as never } }), "bad-input"],
  ["epsilon 0", good({ privacy: { epsilon: "0" } }), "bad-input"],
  ["epsilon negative", good({ privacy: { epsilon: "-1" } }), "bad-input"],
  ["epsilon not a number", good({ privacy: { epsilon: "abc" } }), "bad-input"],
  ["epsilon as a JSON number", good({ privacy: { epsilon: 0.1 as never } }), "bad-input"],
  ["epsilon 1/0", good({ privacy: { epsilon: "1/0" } }), "bad-input"],
  ["epsilon and rho together", good({ privacy: { epsilon: "0.1", rho: "0.1" } as never }), "bad-input"],
  ["within 0", good({ privacy: { within: 0 } }), "bad-input"],
  ["within negative", good({ privacy: { within: -5 } }), "bad-input"],
  ["confidence 1", good({ confidence: 1 }), "bad-input"],
  ["confidence 0", good({ confidence: 0 }), "bad-input"],
  ["epsilon past the cap", good({ privacy: { epsilon: "2" } }), "over-cap"],
  ["plan as a string", "count everything" as never, "bad-input"],
];

describe("bad input: query plans", () => {
  it.each(PLAN_CASES)("%s", async (_name, plan, kind) => {
    for (const op of ["ask", "preview"] as const) {
      if (op === "preview" && kind === "over-cap") continue; // previewing an unaffordable plan is allowed
      const r = await speaker.exchange(request("a1", ws.tokens.a1, { op, plan: plan as unknown as QueryPlan }));
      expectRefused(r, kind);
    }
    await expectNothingSpent();
  });
});

// ---- protocol frames -------------------------------------------------------------------------

const valid = () => request("a1", ws.tokens.a1, { op: "spend", dataset: "visits" }) as unknown as Record<string, unknown>;
const json = (v: unknown) => Buffer.from(JSON.stringify(v), "utf8");
const garbage = (n: number, seed: number) => Buffer.from(Array.from({ length: n }, (_, i) => mix32(seed * 100_003 + i) & 0xff));

const FRAME_CASES: [string, () => Buffer[], Kind][] = [
  ["empty frame", () => [Buffer.alloc(0)], "protocol"],
  ["random bytes", () => [garbage(300, 1)], "protocol"],
  ["random bytes, long", () => [garbage(100_000, 2)], "protocol"],
  ["truncated JSON", () => [json(valid()).subarray(0, 40)], "protocol"],
  ["invalid UTF-8", () => [Buffer.from([0x7b, 0x22, 0xff, 0xfe, 0x22, 0x7d])], "protocol"],
  ["JSON array", () => [json([1, 2, 3])], "protocol"],
  ["JSON null", () => [json(null)], "protocol"],
  ["JSON number", () => [json(42)], "protocol"],
  ["JSON string", () => [json("spend")], "protocol"],
  ["protocol version 2", () => [json({ ...valid(), v: 2 })], "protocol"],
  ["protocol version as text", () => [json({ ...valid(), v: "1" })], "protocol"],
  ["protocol version missing", () => [json({ ...valid(), v: undefined })], "protocol"],
  ["version 1e400 (parses as Infinity)", () => [Buffer.from(JSON.stringify(valid()).replace('"v":1', '"v":1e400'))], "protocol"],
  ["id missing", () => [json({ ...valid(), id: undefined })], "protocol"],
  ["id of 500 characters", () => [json({ ...valid(), id: "x".repeat(500) })], "protocol"],
  ["body missing", () => [json({ ...valid(), body: undefined })], "protocol"],
  ["unknown op", () => [json({ ...valid(), body: { op: "drop", dataset: "visits" } })], "protocol"],
  ["op missing", () => [json({ ...valid(), body: { dataset: "visits" } })], "protocol"],
  ["spend with a numeric dataset", () => [json({ ...valid(), body: { op: "spend", dataset: 5 } })], "protocol"],
  ["unknown envelope field", () => [json({ ...valid(), extra: true })], "protocol"],
  ["__proto__ member", () => [Buffer.from(JSON.stringify(valid()).replace(/}$/, ',"__proto__":{"ok":true}}'))], "protocol"],
  ["nested 100000 deep", () => [Buffer.from("[".repeat(100_000) + "]".repeat(100_000))], "protocol"],
  ["frame over the size limit", () => [json({ ...valid(), pad: "x".repeat(MAX_FRAME_BYTES + 10) })], "protocol"],
  ["two frames", () => [json(valid()), json(valid())], "protocol"],
  ["three frames with a delimiter", () => [Buffer.alloc(0), json(valid()), json(valid())], "protocol"],
];

describe("bad input: protocol frames", () => {
  it.each(FRAME_CASES)("%s", async (_name, frames, kind) => {
    await speaker.sendRaw(frames());
    expectRefused(await speaker.receive(), kind);
    await expectNothingSpent();
  });

  it("a frame far over the size limit drops only that peer", async () => {
    // libzmq drops a peer whose message passes maxMessageSize, so no reply comes back on it.
    const big = new RawSpeaker(ws.listen);
    await big.sendRaw([Buffer.alloc(8 * 1024 * 1024, 0x20)]);
    big.close();
    await expectNothingSpent();
  });
});

// ---- tokens ----------------------------------------------------------------------------------

const TOKEN_CASES: [string, () => [string, unknown], Kind][] = [
  ["wrong token", () => ["a1", "not-the-token"], "unauthorized"],
  ["unknown analyst", () => ["zed", ws.tokens.a1], "unauthorized"],
  ["another analyst's token", () => ["a1", ws.tokens.a2], "unauthorized"],
  ["token with a trailing space", () => ["a1", `${ws.tokens.a1} `], "unauthorized"],
  ["token in upper case", () => ["a1", ws.tokens.a1.toUpperCase()], "unauthorized"],
  ["token of 1024 characters", () => ["a1", "t".repeat(1024)], "unauthorized"],
  ["analyst with a NUL", () => ["a1\u0000", ws.tokens.a1], "unauthorized"],
  ["empty token", () => ["a1", ""], "protocol"],
  ["token of 1025 characters", () => ["a1", "t".repeat(1025)], "protocol"],
  ["token as a number", () => ["a1", 12345], "protocol"],
  ["empty analyst", () => ["", ws.tokens.a1], "protocol"],
  ["analyst not granted the dataset", () => ["a3", ws.tokens.a3], "unknown-dataset"],
];

describe("bad input: tokens", () => {
  it.each(TOKEN_CASES)("%s", async (_name, who, kind) => {
    const [analyst, token] = who();
    const req = { ...request("x", "x", { op: "ask", plan: good() as unknown as QueryPlan }), analyst, token };
    // Each case from its own connection: one connection's repeated failures meet the sign-in's
    // backoff (a "busy" refusal, tested in test/curator/sign-in.test.ts), not the case's own refusal.
    const stranger = new RawSpeaker(ws.listen);
    try {
      expectRefused(await stranger.exchange(Buffer.from(JSON.stringify(req))), kind);
    } finally {
      stranger.close();
    }
    await expectNothingSpent();
  });
});

describe("bad input: afterwards", () => {
  it("still answers a good query, which costs exactly its price", async () => {
    const r = await speaker.exchange(request("a1", ws.tokens.a1, { op: "ask", plan: good({ privacy: { epsilon: "0.25" } }) as unknown as QueryPlan }));
    expect(r?.ok).toBe(true);
    const after = await spendOf("a1");
    expect(Rational.parse(after.spentEpsilon).eq(Rational.parse("0.25"))).toBe(true);
    expect(after.releases).toBe(baseline.releases + 1);
    expect(curator.exited).toBe(false);
  });
});
