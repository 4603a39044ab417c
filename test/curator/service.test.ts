/**
 * The request path of the curator service with a small fake answering side (no DuckDB): the order
 * auth → prepare → replay → lock → cap → compute → commit, error masking, and the server's framing
 * over a real ipc socket. The full path with the real engine is in test/integration/.
 */
import { generateKeyPairSync } from "node:crypto";
import { rmSync } from "node:fs";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it, vi } from "vitest";
import { CuratorClient } from "../../runtime/client/client.js";
import { Rational, pureToRho } from "../../runtime/core/index.js";
import type { CuratorKey } from "../../runtime/curator/keys.js";
import { Ledger } from "../../runtime/curator/ledger.js";
import { loadPolicy } from "../../runtime/curator/policy.js";
import { serveCurator, type RunningCurator } from "../../runtime/curator/server.js";
import { signReceipt } from "../../runtime/curator/receipts.js";
import { CuratorService, TALLY_CHUNK, type AnswerSource, type PreparedRelease } from "../../runtime/curator/service.js";
import { BadInputError, OverCapError } from "../../runtime/errors.js";
import { digestOf } from "../../runtime/protocol/canonical.js";
import { MAX_FRAME_BYTES, type QueryPlan, type Response } from "../../runtime/protocol/messages.js";
import { keyIdOf } from "../../runtime/protocol/receipts.js";
import { LEDGER_PAGE } from "../../runtime/protocol/limits.js";
import { responseSchema } from "../../runtime/protocol/reply-schema.js";
import { checkReceiptChains } from "../../cli/audit/chain.js";
import { countPlan, makeWorkspace, RawSpeaker, type Workspace } from "../integration/helpers.js";

/** Answers every plan with one made-up count; cost = the plan's epsilon or rho. */
class FakeAnswers implements AnswerSource {
  computed = 0;
  prepareError: Error | null = null;
  computeError: Error | null = null;
  /** Called when the service waits for the reply slot (ComputedRelease.untilReply). */
  onUntilReply: (() => Promise<void>) | null = null;
  datasetColumns() {
    return [{ name: "age", type: "integer" as const, lower: "0", upper: "100", step: "1" }];
  }
  prepare(_analyst: string, raw: unknown): PreparedRelease {
    if (this.prepareError) throw this.prepareError;
    const plan = raw as QueryPlan;
    const amount = "epsilon" in plan.privacy ? plan.privacy.epsilon : "rho" in plan.privacy ? plan.privacy.rho : "0.1";
    return {
      dataset: plan.dataset,
      digest: digestOf(plan),
      plan,
      unit: "epsilon" in plan.privacy ? "epsilon" : "rho",
      cost: Rational.parse(amount),
      notes: ["fake"],
      compute: async () => {
        // Yield to the event loop so concurrent requests really interleave.
        await new Promise((r) => setImmediate(r));
        if (this.computeError) throw this.computeError;
        this.computed++;
        return {
          groupColumns: [],
          rows: [{ key: [], stat: "count", column: null, value: String(this.computed), low: "0", high: "99" }],
          confidence: 0.95,
          intervalMethod: "fake",
          mechanisms: [{ target: "count", family: "discrete-laplace" as const, scale: "10", sensitivity: "1", step: "1", cost: amount }],
          notes: [],
          untilReply: async () => {
            await this.onUntilReply?.();
          },
        };
      },
    };
  }
  preview(analyst: string, raw: unknown) {
    return { prepared: this.prepare(analyst, raw), halfWidths: [{ stat: "count", column: null, halfWidth: "30" }], notes: [] };
  }
}

let ws: Workspace;
let counter = 0;

function makeService(): { service: CuratorService; fake: FakeAnswers; ledgerFile: string } {
  const policy = loadPolicy(ws.policyFile);
  const { privateKey, publicKey } = generateKeyPairSync("ed25519");
  const key: CuratorKey = { privateKey, publicKey, publicKeyB64: "k", keyId: keyIdOf(publicKey) };
  const fake = new FakeAnswers();
  const ledgerFile = join(ws.dir, `ledger-${++counter}.sqlite`);
  return { service: new CuratorService({ policy, answerer: fake, ledger: Ledger.open(ledgerFile), key }), fake, ledgerFile };
}

function frame(body: unknown, analyst = "ada", token?: string): Buffer {
  return Buffer.from(JSON.stringify({ v: 1, id: `q${++counter}`, analyst, token: token ?? ws.tokens[analyst as "ada"], body }));
}

async function call(service: CuratorService, body: unknown, analyst = "ada", token?: string): Promise<Response> {
  return JSON.parse((await service.handleFrame(frame(body, analyst, token), "test")).toString("utf8")) as Response;
}

beforeAll(() => {
  ws = makeWorkspace("svc", "1");
});
afterAll(() => rmSync(ws.dir, { recursive: true, force: true }));

describe("CuratorService", () => {
  it("serves 200 concurrent asks against a cap of 1 at 1/100 each: exactly 100 released", async () => {
    const { service, fake } = makeService();
    const replies = await Promise.all(
      Array.from({ length: 200 }, (_, i) => call(service, { op: "ask", plan: countPlan("0.01", { where: { op: "lt", column: "age", value: i } }) })),
    );
    const ok = replies.filter((r) => r.ok);
    const refused = replies.filter((r) => !r.ok && r.error.kind === "over-cap");
    expect(ok).toHaveLength(100);
    expect(refused).toHaveLength(100);
    // Refused before computing: the lock runs the cap check ahead of the noise.
    expect(fake.computed).toBe(100);
    const spend = await call(service, { op: "spend", dataset: "clinic" });
    expect(spend.ok && spend.body.op === "spend" && spend.body.spend).toMatchObject({ spentEpsilon: "1", remainingEpsilon: "0", releases: 100 });
    const ledger = await call(service, { op: "ledger", dataset: "clinic" });
    if (!ledger.ok || ledger.body.op !== "ledger") throw new Error("ledger failed");
    expect(checkReceiptChains(ledger.body.entries.map((e) => e.receipt), service.key.publicKey)).toEqual([]);
    await service.close();
  });

  it("after a restart, reads a long pure-epsilon history in chunks between turns of the event loop, each receipt once", async () => {
    // 10,000 pure releases at epsilon 1e-6 on the zCDP dataset clinic_z, written to the ledger
    // before the service starts (as a restarted curator finds them).
    const first = makeService();
    const population = loadPolicy(ws.policyFile).datasets.get("clinic_z")!.population;
    const ledger = Ledger.open(first.ledgerFile);
    const epsilon = Rational.parse("0.000001");
    const rho = pureToRho(epsilon);
    const n = 10_000;
    const mechanisms = [{ target: "count", family: "discrete-laplace" as const, scale: "1000000", sensitivity: "1", step: "1", cost: rho.toString() }];
    for (let i = 1; i <= n; i++) {
      const plan = countPlan("0.000001", { where: { op: "lt", column: "age", value: i } }, "clinic_z");
      ledger.debit({
        analyst: "ada",
        population,
        dataset: "clinic_z",
        digest: `d${i}`,
        plan,
        cost: rho,
        cap: Rational.ONE,
        build: (ctx) => {
          const receipt = signReceipt(
            { analyst: "ada", dataset: "clinic_z", population, seq: ctx.seq, digest: `d${i}`, unit: "rho", cost: rho.toString(), total: ctx.total.toString(), cap: "1", delta: "0.000001", result: [[[], "count", null, "1", null, null]], mechanisms, issuedAt: ctx.issuedAt, prev: ctx.prev },
            first.service.key,
          );
          return { release: { dataset: "clinic_z", digest: `d${i}`, rows: [], receipt, replay: false } as unknown as import("../../runtime/protocol/messages.js").Release, receipt };
        },
      });
    }
    ledger.close();
    await first.service.close();
    const policy = loadPolicy(ws.policyFile);
    const service = new CuratorService({ policy, answerer: new FakeAnswers(), ledger: Ledger.open(first.ledgerFile), key: first.service.key });
    await call(service, { op: "spend", dataset: "clinic" }); // sign-in, on a pure-epsilon dataset (no tally)
    // Count turns of the event loop while the first zCDP spend reads the history.
    let turns = 0;
    let done = false;
    const tick = () => {
      if (done) return;
      turns++;
      setImmediate(tick);
    };
    setImmediate(tick);
    const spend = await call(service, { op: "spend", dataset: "clinic_z" });
    done = true;
    if (!spend.ok || spend.body.op !== "spend") throw new Error("spend failed");
    expect(spend.body.spend.releases).toBe(n);
    expect(Rational.parse(spend.body.spend.spentRho!).eq(rho.mul(BigInt(n)))).toBe(true);
    // With 10,000 releases the conversion states less than plain composition (epsilon 0.01), so the
    // statement does not show the tally; read it from the service (every receipt counted once).
    const tally = (service as unknown as { pureTally: Map<string, { seq: number; pure: Rational | null }> }).pureTally.get(`ada\u0000${population}`);
    expect(tally?.seq).toBe(n);
    expect(tally?.pure?.eq(epsilon.mul(BigInt(n)))).toBe(true);
    expect(spend.body.spend.epsilonBy).toBe("zCDP conversion");
    // In one piece (before catchUpTally) the loop turned once or not at all while 10,000 receipts were read.
    expect(turns).toBeGreaterThanOrEqual(n / TALLY_CHUNK - 1);
    await service.close();
  }, 120_000);

  it("sends the ledger a page at a time: the latest 1,000 releases, how many came before, and the page before a release", async () => {
    const { service } = makeService();
    // 1,005 releases at 1/2000 each (cap 1).
    for (let i = 0; i < 1005; i++) {
      const r = await call(service, { op: "ask", plan: countPlan("0.0005", { where: { op: "lt", column: "age", value: i } }) });
      if (!r.ok) throw new Error(`ask ${i} refused: ${r.error.message}`);
    }
    const page = await call(service, { op: "ledger", dataset: "clinic" });
    if (!page.ok || page.body.op !== "ledger") throw new Error("ledger failed");
    expect(page.body.entries).toHaveLength(LEDGER_PAGE);
    expect(page.body.entries[0].seq).toBe(6);
    expect(page.body.entries.at(-1)?.seq).toBe(1005);
    expect(page.body.earlier).toBe(5);
    // The reply passes the client's own reading of a ledger reply.
    expect(responseSchema.safeParse(page).success).toBe(true);
    const back = await call(service, { op: "ledger", dataset: "clinic", before: 6 });
    if (!back.ok || back.body.op !== "ledger") throw new Error("ledger failed");
    expect(back.body.entries.map((e) => e.seq)).toEqual([1, 2, 3, 4, 5]);
    expect(back.body.earlier).toBeUndefined();
    // Both pages together are the whole chain, and it verifies.
    expect(checkReceiptChains([...back.body.entries, ...page.body.entries].map((e) => e.receipt), service.key.publicKey)).toEqual([]);
    for (const before of [0, -1, 1.5, 1e300, "6"]) {
      const bad = await call(service, { op: "ledger", before });
      expect(bad.ok, String(before)).toBe(false);
    }
    await service.close();
  }, 120_000);

  it("answers the same plan asked twice at once with one release and one replay", async () => {
    const { service, fake } = makeService();
    const [a, b] = await Promise.all([1, 2].map(() => call(service, { op: "ask", plan: countPlan("0.25") })));
    if (!a.ok || !b.ok || a.body.op !== "ask" || b.body.op !== "ask") throw new Error("ask failed");
    expect([a.body.release.replay, b.body.release.replay].sort()).toEqual([false, true]);
    expect(a.body.release.rows).toEqual(b.body.release.rows);
    expect(fake.computed).toBe(1);
    expect(b.body.release.spend.spentEpsilon).toBe("1/4");
    await service.close();
  });

  it("hides unexpected failures behind an internal error and logs them", async () => {
    const { service, fake } = makeService();
    fake.prepareError = new Error("duckdb: conversion failed for value 'pt-canary-0003'");
    const log = vi.spyOn(process.stderr, "write").mockImplementation(() => true);
    try {
      const r = await call(service, { op: "ask", plan: countPlan("0.1") });
      expect(r).toMatchObject({ ok: false, error: { kind: "internal" } });
      expect(JSON.stringify(r)).not.toContain("pt-canary");
      expect(log.mock.calls.map((c) => String(c[0])).join("")).toContain("pt-canary-0003");
    } finally {
      log.mockRestore();
    }
    fake.prepareError = new BadInputError("unknown column \"height\"");
    expect(await call(service, { op: "ask", plan: countPlan("0.1") })).toMatchObject({
      ok: false,
      error: { kind: "bad-input", message: 'unknown column "height"' },
    });
    await service.close();
  });

  it("spends nothing when the computation fails", async () => {
    const { service, fake } = makeService();
    fake.computeError = new OverCapError("stand-in failure");
    const r = await call(service, { op: "ask", plan: countPlan("0.1") });
    expect(r.ok).toBe(false);
    const spend = await call(service, { op: "spend", dataset: "clinic" });
    expect(spend.ok && spend.body.op === "spend" && spend.body.spend.releases).toBe(0);
    await service.close();
  });

  it("waits for the reply slot after the debit is stored and before the reply leaves", async () => {
    const { service, fake } = makeService();
    const seen: number[] = [];
    let replied = false;
    fake.onUntilReply = async () => {
      // The release is already debited and its receipt stored when the slot is waited for.
      const spend = await call(service, { op: "spend", dataset: "clinic" });
      seen.push(spend.ok && spend.body.op === "spend" ? spend.body.spend.releases : -1);
      expect(replied).toBe(false);
      await new Promise((r) => setTimeout(r, 30));
    };
    const t0 = performance.now();
    const r = await call(service, { op: "ask", plan: countPlan("0.1") });
    replied = true;
    expect(r.ok).toBe(true);
    expect(seen).toEqual([1]);
    expect(performance.now() - t0).toBeGreaterThanOrEqual(29);
    await service.close();
  });

  it("keeps checking the token after one verified", async () => {
    const { service } = makeService();
    expect((await call(service, { op: "catalogue" })).ok).toBe(true);
    expect(await call(service, { op: "catalogue" }, "ada", "guess")).toMatchObject({ ok: false, error: { kind: "unauthorized" } });
    expect(await call(service, { op: "catalogue" }, "ben", ws.tokens.ada)).toMatchObject({ ok: false, error: { kind: "unauthorized" } });
    expect((await call(service, { op: "catalogue" })).ok).toBe(true);
    await service.close();
  });

  it("summarises zCDP spend in rho with epsilon at delta", async () => {
    const { service } = makeService();
    const r = await call(service, { op: "ask", plan: { v: 1, dataset: "clinic_z", measure: { kind: "count" }, privacy: { rho: "1/50" } } });
    if (!r.ok || r.body.op !== "ask") throw new Error(JSON.stringify(r));
    expect(r.body.release.receipt).toMatchObject({ unit: "rho", cost: "1/50", delta: "0.000001" });
    expect(r.body.release.spend).toMatchObject({ mode: "zcdp", spentRho: "1/50", capEpsilon: "1", delta: "0.000001" });
    const prev = await call(service, { op: "preview", plan: { v: 1, dataset: "clinic_z", measure: { kind: "count" }, privacy: { rho: "100" } } });
    expect(prev.ok && prev.body.op === "preview" && prev.body.preview).toMatchObject({ affordable: false, unit: "rho", cost: "100" });
    await service.close();
  });
});

describe("server framing (fake answers, real ipc socket)", () => {
  let running: RunningCurator;
  beforeAll(async () => {
    const { service } = makeService();
    running = await serveCurator(service, { listen: `ipc://${join(ws.dir, "fake.sock")}` });
  });
  afterAll(async () => {
    await running.close();
  });

  it("answers the client, refuses oversized and multi-frame requests, and keeps serving", async () => {
    const client = await CuratorClient.connect({ address: running.address, analyst: "ada", token: ws.tokens.ada, timeoutMs: 20_000 });
    const raw = RawSpeaker.connect({ ready: true, address: running.address, publicKey: "", pid: 0 });
    try {
      const r = await client.ask(countPlan("0.5"));
      expect(r.receipt.seq).toBe(1);
      await expect(client.ask(countPlan("0.6"))).rejects.toMatchObject({ kind: "over-cap", spend: { spentEpsilon: "1/2" } });
      expect(await raw.exchange([Buffer.alloc(MAX_FRAME_BYTES + 10, 0x41)])).toMatchObject({ ok: false, id: "", error: { kind: "protocol" } });
      expect(await raw.exchange(["a", "b", "c"])).toMatchObject({ ok: false, error: { kind: "protocol" } });
      // A REQ-style empty delimiter frame is accepted and echoed.
      const withDelimiter = await raw.exchange(["", frame({ op: "spend", dataset: "clinic" })]);
      expect(withDelimiter).toMatchObject({ ok: true });
      expect((await client.spend("clinic")).spentEpsilon).toBe("1/2");
    } finally {
      raw.close();
      await client.close();
    }
  });
});
