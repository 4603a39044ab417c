/**
 * The client against a curator that answers with crafted frames (a real ROUTER socket, test/client/
 * fake-router.ts), over ipc and over tcp with CURVE. Every malformed kind must fail the request it
 * belongs to at once with a MalformedReplyError naming the problem, never quoting the reply's
 * values, and must leave the connection usable for the next request.
 *
 * "At once" is checked without a timed assertion: the client waits 60 s for a reply, each test gets
 * 5 s, so a request left waiting for its timeout fails the test.
 */
import { randomUUID } from "node:crypto";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { CuratorClient } from "../../runtime/client/client.js";
import { MalformedReplyError, type ReplyProblem } from "../../runtime/client/reply-frame.js";
import { BadInputError, ProtocolError, UnauthorizedError, UnreachableError } from "../../runtime/errors.js";
import type { Release, SpendSummary } from "../../runtime/protocol/messages.js";
import { FakeRouter, type Transport } from "./fake-router.js";

const QUICK = { timeout: 5_000 };
/** Planted in malformed replies: no error message may repeat it. */
const SECRET = "SECRET-VALUE-4711";

const SPEND: SpendSummary = {
  analyst: "ada",
  dataset: "clinic",
  population: "clinic.csv",
  mode: "pure",
  spentEpsilon: "1/5",
  capEpsilon: "1",
  remainingEpsilon: "4/5",
  releases: 2,
};

/** A hand-made release that passes the schema (the invented numbers mean nothing). */
const RELEASE: Release = {
  dataset: "clinic",
  digest: "a".repeat(64),
  plan: { v: 1, dataset: "clinic", measure: { kind: "count" }, privacy: { epsilon: "0.1" }, confidence: 0.95 },
  groupColumns: [],
  rows: [{ key: [], stat: "count", column: null, value: "42", low: "30", high: "54" }],
  confidence: 0.95,
  intervalMethod: "exact noise quantiles",
  noiseOnly: true,
  mechanisms: [{ target: "count", family: "discrete-laplace", scale: "10", sensitivity: "1", step: "1", cost: "1/10" }],
  cost: "1/10",
  spend: SPEND,
  replay: false,
  receipt: {
    format: "hush-receipt/1",
    analyst: "ada",
    dataset: "clinic",
    population: "clinic.csv",
    seq: 2,
    digest: "a".repeat(64),
    unit: "epsilon",
    cost: "1/10",
    total: "1/5",
    cap: "1",
    result: [[[], "count", null, "42", "30", "54"]],
    mechanisms: [{ target: "count", family: "discrete-laplace", scale: "10", sensitivity: "1", step: "1", cost: "1/10" }],
    issuedAt: "2026-01-02T03:04:05.678Z",
    prev: "0".repeat(64),
    keyId: "0123456789abcdef",
    sig: "c2lnbmF0dXJl",
  },
  notes: [],
};

const ok = (id: string, body: unknown, extra: Record<string, unknown> = {}): string =>
  JSON.stringify({ v: 1, id, ok: true, body, ...extra });
const spendBody = (spend: unknown = SPEND) => ({ op: "spend", spend });
const askBody = (release: unknown = RELEASE) => ({ op: "ask", release });

type Op = "spend" | "ask";
interface Case {
  name: string;
  op: Op;
  frames: (id: string) => (string | Buffer)[];
  problem: ReplyProblem;
}

const MAX_REPLY = 4096;

const CASES: Case[] = [
  {
    name: "a frame that is not UTF-8 (its id read from the first bytes)",
    op: "spend",
    frames: (id) => [Buffer.concat([Buffer.from(`{"v":1,"id":"${id}","ok":true,"body":"`), Buffer.from([0xc3, 0x28, 0xff]), Buffer.from(`${SECRET}"}`)])],
    problem: "not-utf8",
  },
  { name: "a truncated JSON frame", op: "spend", frames: (id) => [ok(id, spendBody()).slice(0, 60)], problem: "not-json" },
  { name: "a frame of plain text", op: "spend", frames: () => [SECRET], problem: "not-json" },
  { name: "a JSON array", op: "spend", frames: () => [JSON.stringify([SECRET, 1, 2])], problem: "not-object" },
  { name: "a JSON string", op: "spend", frames: () => [JSON.stringify(SECRET)], problem: "not-object" },
  { name: "JSON null", op: "spend", frames: () => ["null"], problem: "not-object" },
  { name: "another protocol version", op: "spend", frames: (id) => [JSON.stringify({ v: 2, id, ok: true, body: spendBody() })], problem: "version" },
  { name: "no protocol version", op: "spend", frames: (id) => [JSON.stringify({ id, ok: true, body: spendBody() })], problem: "version" },
  { name: "ok that is not a boolean", op: "spend", frames: (id) => [JSON.stringify({ v: 1, id, ok: "yes", body: spendBody() })], problem: "shape" },
  { name: "an unknown key on the envelope", op: "spend", frames: (id) => [ok(id, spendBody(), { [SECRET]: 1 })], problem: "shape" },
  { name: "a number where an exact string belongs", op: "spend", frames: (id) => [ok(id, spendBody({ ...SPEND, spentEpsilon: 0.2 }))], problem: "shape" },
  { name: "an exact number the display cannot read", op: "spend", frames: (id) => [ok(id, spendBody({ ...SPEND, spentEpsilon: SECRET }))], problem: "shape" },
  { name: "an exponent past 400", op: "spend", frames: (id) => [ok(id, spendBody({ ...SPEND, capEpsilon: "1e999" }))], problem: "shape" },
  { name: "a zero denominator", op: "spend", frames: (id) => [ok(id, spendBody({ ...SPEND, remainingEpsilon: "4/0" }))], problem: "shape" },
  { name: "a missing field", op: "spend", frames: (id) => [ok(id, spendBody({ ...SPEND, releases: undefined }))], problem: "shape" },
  { name: "an unknown key in the body", op: "spend", frames: (id) => [ok(id, spendBody({ ...SPEND, [SECRET]: SECRET }))], problem: "shape" },
  { name: "a negative release count", op: "spend", frames: (id) => [ok(id, spendBody({ ...SPEND, releases: -1 }))], problem: "shape" },
  {
    name: "a frame over the reply limit (its id read from the first bytes)",
    op: "spend",
    frames: (id) => [`{"v":1,"id":"${id}","ok":true,"body":{"op":"spend","spend":"${SECRET.repeat(400)}"}}`],
    problem: "too-large",
  },
  {
    name: "a nest 1500 levels deep that fits the size limit",
    op: "spend",
    frames: (id) => [`{"v":1,"id":"${id}","ok":true,"body":{"op":"spend","spend":${"[".repeat(1500)}${"]".repeat(1500)}}}`],
    problem: "too-deep",
  },
  {
    name: "a nest just past the depth limit inside the body",
    op: "spend",
    frames: (id) => [`{"v":1,"id":"${id}","ok":true,"body":{"op":"spend","spend":${"[".repeat(63)}${"]".repeat(63)}}}`],
    problem: "too-deep",
  },
  {
    name: "a nest that fits the depth limit",
    op: "spend",
    frames: (id) => [`{"v":1,"id":"${id}","ok":true,"body":{"op":"spend","spend":${"[".repeat(62)}${"]".repeat(62)}}}`],
    problem: "shape",
  },
  {
    name: "an error reply of an unknown kind",
    op: "spend",
    frames: (id) => [JSON.stringify({ v: 1, id, ok: false, error: { kind: SECRET, message: "m" } })],
    problem: "shape",
  },
  {
    name: "an error reply without a message",
    op: "spend",
    frames: (id) => [JSON.stringify({ v: 1, id, ok: false, error: { kind: "policy" } })],
    problem: "shape",
  },
  { name: "a result for another op", op: "spend", frames: (id) => [ok(id, { op: "ledger", entries: [] })], problem: "wrong-op" },
  { name: "a result that names no request", op: "spend", frames: () => [ok("", spendBody())], problem: "no-id" },
  { name: "two frames where one is expected", op: "spend", frames: (id) => ["", ok(id, spendBody())], problem: "frames" },
  { name: "a release whose plan is not a plan", op: "ask", frames: (id) => [ok(id, askBody({ ...RELEASE, plan: { v: 1, [SECRET]: 1 } }))], problem: "shape" },
  {
    name: "a release row value that is not a number",
    op: "ask",
    frames: (id) => [ok(id, askBody({ ...RELEASE, rows: [{ ...RELEASE.rows[0], value: SECRET }] }))],
    problem: "shape",
  },
  {
    name: "a receipt with a short digest",
    op: "ask",
    frames: (id) => [ok(id, askBody({ ...RELEASE, receipt: { ...RELEASE.receipt, digest: "abc" } }))],
    problem: "shape",
  },
  { name: "a release without noiseOnly", op: "ask", frames: (id) => [ok(id, askBody({ ...RELEASE, noiseOnly: false }))], problem: "shape" },
];

const call = (client: CuratorClient, op: Op): Promise<unknown> => (op === "spend" ? client.spend("clinic") : client.ask(RELEASE.plan));

describe.each<Transport>(["ipc", "tcp"])("client replies over %s", (transport) => {
  let fake: FakeRouter;
  let client: CuratorClient;

  beforeAll(async () => {
    fake = await FakeRouter.start(transport);
    // The full 60 s reply timeout: a test that passes did not wait for it.
    client = await fake.connect({ timeoutMs: 60_000, maxReplyBytes: MAX_REPLY });
  });

  afterAll(async () => {
    await client?.close();
    await fake?.close();
  });

  it("a well-formed reply resolves with its body (the hand-made samples pass the schema)", QUICK, async () => {
    const p = client.spend("clinic");
    const { peer, request } = await fake.next();
    await fake.send(peer, ok(request.id, spendBody()));
    expect(await p).toEqual(SPEND);
    const a = client.ask(RELEASE.plan);
    const asked = await fake.next();
    expect(asked.request.body).toEqual({ op: "ask", plan: RELEASE.plan });
    await fake.send(asked.peer, ok(asked.request.id, askBody()));
    expect(await a).toEqual(RELEASE);
  });

  it.each(CASES)("$name fails the request at once ($problem)", QUICK, async ({ op, frames, problem }) => {
    const p = call(client, op);
    const { peer, request } = await fake.next();
    await fake.send(peer, ...frames(request.id));
    const e = await p.then(
      () => expect.fail("the request resolved"),
      (err: unknown) => err,
    );
    expect(e).toBeInstanceOf(MalformedReplyError);
    expect(e).toBeInstanceOf(ProtocolError);
    const m = e as MalformedReplyError;
    expect({ kind: m.kind, problem: m.problem }).toEqual({ kind: "protocol", problem });
    expect(m.message).not.toContain(SECRET);
    expect(m.message).not.toContain("4711");
    // The connection still works: the next request gets its well-formed reply.
    const next = client.spend("clinic");
    const again = await fake.next();
    await fake.send(again.peer, ok(again.request.id, spendBody()));
    expect(await next).toEqual(SPEND);
  });

  it("a body nested a million levels deep is refused before it is parsed", QUICK, async () => {
    const roomy = await fake.connect({ timeoutMs: 60_000, maxReplyBytes: 4 * 1024 * 1024 });
    try {
      const p = roomy.spend("clinic");
      const { peer, request } = await fake.next();
      await fake.send(peer, `{"v":1,"id":"${request.id}","ok":true,"body":{"op":"spend","spend":${"[".repeat(1_000_000)}${"]".repeat(1_000_000)}}}`);
      await expect(p).rejects.toMatchObject({ name: "MalformedReplyError", problem: "too-deep" });
    } finally {
      await roomy.close();
    }
  });

  it("brackets and escaped quotes inside strings do not count toward the depth", QUICK, async () => {
    const odd = { ...SPEND, analyst: `\\"${"[{".repeat(300)}\\`, dataset: `"\\"${"{".repeat(100)}` };
    const p = client.spend("clinic");
    const { peer, request } = await fake.next();
    await fake.send(peer, ok(request.id, spendBody(odd)));
    expect(await p).toEqual(odd);
  });

  it("a shape problem names the path and the rule, not the value", QUICK, async () => {
    const p = client.spend("clinic");
    const { peer, request } = await fake.next();
    await fake.send(peer, ok(request.id, spendBody({ ...SPEND, spentEpsilon: SECRET })));
    await expect(p).rejects.toThrow(/reply\.body\.spend\.spentEpsilon: must be an exact number/);
  });

  it("the curator's own error reply still comes back as its error class", QUICK, async () => {
    const p = client.spend("clinic");
    const { peer, request } = await fake.next();
    await fake.send(peer, JSON.stringify({ v: 1, id: request.id, ok: false, error: { kind: "unauthorized", message: "no" } }));
    await expect(p).rejects.toBeInstanceOf(UnauthorizedError);
  });

  it("an error reply without an id fails the one request in flight with the curator's error", QUICK, async () => {
    const p = client.spend("clinic");
    const { peer } = await fake.next();
    await fake.send(peer, JSON.stringify({ v: 1, id: "", ok: false, error: { kind: "protocol", message: "request frame is not valid UTF-8 JSON" } }));
    const e = await p.then(() => expect.fail("resolved"), (err: unknown) => err);
    expect(e).toBeInstanceOf(ProtocolError);
    expect(e).not.toBeInstanceOf(MalformedReplyError);
  });

  it("replies for no pending request are dropped; the pending request gets its own reply", QUICK, async () => {
    const before = client.droppedReplies;
    const p = client.spend("clinic");
    const { peer, request } = await fake.next();
    await fake.send(peer, ok(randomUUID(), spendBody()));
    await fake.send(peer, ok(randomUUID(), spendBody({ ...SPEND, spentEpsilon: SECRET })));
    await fake.send(peer, `{"v":1,"id":"${randomUUID()}", not json`);
    await fake.send(peer, ok(request.id, spendBody()));
    expect(await p).toEqual(SPEND);
    expect(client.droppedReplies - before).toBe(3);
  });

  it("with two requests in flight, a malformed reply naming one fails only that one", QUICK, async () => {
    const p1 = client.spend("clinic");
    const p2 = client.catalogue();
    const r1 = await fake.next();
    const r2 = await fake.next();
    await fake.send(r1.peer, ok(r1.request.id, spendBody({ ...SPEND, mode: SECRET })));
    await expect(p1).rejects.toBeInstanceOf(MalformedReplyError);
    await fake.send(r2.peer, ok(r2.request.id, { op: "catalogue", datasets: [{ name: "clinic", description: "d" }], publicKey: "AAAA" }));
    expect(await p2).toEqual({ datasets: [{ name: "clinic", description: "d" }], publicKey: "AAAA" });
  });

  it("with two requests in flight, a reply naming neither fails neither", QUICK, async () => {
    const before = client.droppedReplies;
    const p1 = client.spend("clinic");
    const p2 = client.spend("clinic");
    const r1 = await fake.next();
    const r2 = await fake.next();
    await fake.send(r1.peer, SECRET);
    await fake.send(r1.peer, JSON.stringify({ v: 1, id: "", ok: false, error: { kind: "protocol", message: "unreadable" } }));
    await fake.send(r1.peer, "x".repeat(MAX_REPLY + 1));
    // Replies travel in order on one connection, so these arrive after the three above.
    await fake.send(r2.peer, ok(r2.request.id, spendBody()));
    await fake.send(r1.peer, ok(r1.request.id, spendBody()));
    expect(await Promise.all([p1, p2])).toEqual([SPEND, SPEND]);
    expect(client.droppedReplies - before).toBe(3);
  });

  it("a flood of malformed replies for nobody leaves a request in flight untouched", QUICK, async () => {
    const before = client.droppedReplies;
    const p = client.spend("clinic");
    const { peer, request } = await fake.next();
    for (let i = 0; i < 2000; i++) {
      await fake.send(peer, i % 2 === 0 ? ok(randomUUID(), spendBody()) : `{"v":1,"id":"${randomUUID()}"`);
    }
    await fake.send(peer, ok(request.id, spendBody()));
    expect(await p).toEqual(SPEND);
    expect(client.droppedReplies - before).toBe(2000);
  });

  it("a frame past twice the limit is dropped by the socket unread; the request fails as unreachable and the client reconnects", QUICK, async () => {
    const p = client.spend("clinic");
    const { peer, request } = await fake.next();
    await fake.send(peer, `{"v":1,"id":"${request.id}","ok":true,"body":"${"x".repeat(3 * MAX_REPLY)}"}`);
    const e = await p.then(() => expect.fail("resolved"), (err: unknown) => err);
    expect(e).toBeInstanceOf(UnreachableError);
    expect((e as Error).message).toMatch(/dropped while the request was in flight/);
    // The DEALER reconnects by itself; the next request is answered.
    const next = client.spend("clinic");
    const again = await fake.next();
    await fake.send(again.peer, ok(again.request.id, spendBody()));
    expect(await next).toEqual(SPEND);
  });
});

describe.each<Transport>(["ipc", "tcp"])("curator gone over %s", (transport) => {
  it("a request in flight when the curator goes away fails at once as unreachable", QUICK, async () => {
    const fake = await FakeRouter.start(transport);
    const client = await fake.connect({ timeoutMs: 60_000 });
    try {
      const p = client.spend("clinic");
      await fake.next();
      await fake.close();
      await expect(p).rejects.toBeInstanceOf(UnreachableError);
    } finally {
      await client.close();
    }
  });

  if (transport === "ipc") {
    it("after a curator restart at the same address, the client is answered again", QUICK, async () => {
      let fake = await FakeRouter.start("ipc");
      const client = await fake.connect({ timeoutMs: 60_000 });
      try {
        const p = client.spend("clinic");
        await fake.next();
        const dir = fake.folder;
        await fake.close(true);
        await expect(p).rejects.toBeInstanceOf(UnreachableError);
        fake = await FakeRouter.start("ipc", dir);
        const next = client.spend("clinic");
        const { peer, request } = await fake.next();
        await fake.send(peer, ok(request.id, spendBody()));
        expect(await next).toEqual(SPEND);
        // Exactly one connection: a second request goes out once, on it, and is answered once.
        const third = client.spend("clinic");
        const r3 = await fake.next();
        await fake.send(r3.peer, ok(r3.request.id, spendBody()));
        expect(await third).toEqual(SPEND);
        expect(r3.peer.equals(peer)).toBe(true);
      } finally {
        await client.close();
        await fake.close();
      }
    });
  }
});

describe("reply size option", () => {
  it.each([0, 10, 1023, 1.5, Number.NaN, Number.POSITIVE_INFINITY, 2 ** 40])("maxReplyBytes %s is refused before connecting", async (maxReplyBytes) => {
    await expect(CuratorClient.connect({ address: "ipc:///nonexistent/c.sock", analyst: "ada", token: "t", maxReplyBytes })).rejects.toBeInstanceOf(BadInputError);
  });
});
