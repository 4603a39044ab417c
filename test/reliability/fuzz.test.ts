/**
 * Frame fuzzer against a real `hush serve` over tcp+CURVE on 127.0.0.1 (issue 9, acceptance 1).
 *
 * FRAMES generated frames, each from a seeded PRNG keyed by (seed, frame index) so a failing frame can
 * be made again alone: valid requests of every op, then mutated — truncated, bits flipped, values of
 * the wrong type, huge and odd numbers, unicode, deep nesting, unknown keys, frames past the size
 * limit, empty frames, several frames in one message, wrong versions, bad UTF-8, wrong tokens. They go
 * out on LANES CURVE connections at once, one frame in flight per connection.
 *
 * Pass:
 * - every frame gets exactly one reply message, whose last frame is a protocol Response (JSON with
 *   v, id, ok, and either a body or an error of a known kind), and whose id is the request's id or ""
 *   (a reply never answers another request);
 * - frames over libzmq's maximum message size (the curator's HARD_FRAME_LIMIT, 16 x MAX_FRAME_BYTES)
 *   are the one exception: libzmq drops them and disconnects that peer, so no reply comes; checked on
 *   separate connections while the lanes keep being answered;
 * - the curator never exits, a second analyst's `spend` (polled every 200 ms) is answered within
 *   WATCH_BOUND_MS each time, and VmRSS stays under RSS_BOUND;
 * - nothing is spent except by frames that were valid affordable asks: the ledger holds exactly the
 *   fresh releases the fuzzer received, and their costs add up to each dataset's total.
 *
 * HUSH_FUZZ_SEED picks another seed; HUSH_FUZZ_FRAMES another count.
 */
import { ERROR_KINDS } from "../../runtime/protocol/reply-schema.js";
import fs from "node:fs";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { CuratorClient } from "../../runtime/client/client.js";
import { MAX_FRAME_BYTES, type Receipt } from "../../runtime/protocol/messages.js";
import { loadPublicKey, receiptHash } from "../../runtime/protocol/receipts.js";
import { ledgerProblems, readLedger, sumOf } from "./checks.js";
import { CurveSpeaker, HOSTILE_BOUNDS, makeHostileWorkspace, ServeProcess, watchCurator, type HostileWorkspace, type WatchLog } from "./fixtures.js";
import { seededRandom } from "./seeded-random.js";

const SEED = Number(process.env.HUSH_FUZZ_SEED ?? 20_261_202);
const FRAMES = Number(process.env.HUSH_FUZZ_FRAMES ?? 10_000);
const LANES = 8;
/** HOSTILE_BOUNDS (fixtures.ts) states each bound and why. */
const REQUEST_BOUND_MS = HOSTILE_BOUNDS.requestMs;
const WATCH_EVERY_MS = HOSTILE_BOUNDS.watchEveryMs;
const WATCH_BOUND_MS = HOSTILE_BOUNDS.watchMs;
const RSS_BOUND = HOSTILE_BOUNDS.rssBytes;
/** The curator's libzmq maximum message size (runtime/curator/server.ts HARD_FRAME_LIMIT). */
const LIBZMQ_LIMIT = 16 * MAX_FRAME_BYTES;
/** Wrong tokens cost a scrypt each on today's curator (~135 ms), so they are a small share of the frames. */
const WRONG_TOKEN_SHARE = 0.004;
// Every kind the protocol defines (reply-schema.ts), so a new kind is added in one place.
const KNOWN_KINDS: ReadonlySet<string> = new Set(ERROR_KINDS);

// ---- generation ----------------------------------------------------------------------------------

type Rand = () => number;
const pick = <T>(r: Rand, xs: readonly T[]): T => xs[Math.floor(r() * xs.length)];
const int = (r: Rand, n: number) => Math.floor(r() * n);

interface Frame {
  /** Which generator made it (for the report). */
  kind: string;
  frames: Buffer[];
  /** The id the frame was built with; null when the mutation may have broken it (see readableId). */
  id: string | null;
}

function baseBody(r: Rand, i: number): Record<string, unknown> {
  const dataset = pick(r, ["people", "others"]);
  const where = { op: "and", of: [{ op: "ge", column: "age", value: 18 + (i % 60) }, { op: "lt", column: "amount", value: 100 + i / 1000 }] };
  const privacy = dataset === "people" ? { epsilon: pick(r, ["0.01", "1/50", "0.005"]) } : pick(r, [{ rho: "0.0001" }, { epsilon: "0.01" }]);
  const measures = [
    { kind: "count" },
    { kind: "sum", column: "amount" },
    { kind: "mean", column: "wide" },
    { kind: "quantile", column: "age", p: [0.5] },
    { kind: "histogram", column: "age", bins: 8 },
    { kind: "crosstab", rows: "region", cols: "member" },
  ];
  const plan = { v: 1, dataset, where, measure: pick(r, measures), privacy, ...(r() < 0.2 ? { groupBy: [{ column: "region" }] } : {}) };
  switch (int(r, 8)) {
    case 0:
      return { op: "catalogue" };
    case 1:
      return { op: "open", dataset };
    case 2:
      return { op: "spend", dataset };
    case 3:
      return r() < 0.5 ? { op: "ledger" } : { op: "ledger", dataset };
    case 4:
    case 5:
      return { op: "preview", plan };
    default:
      return { op: "ask", plan };
  }
}

const HUGE: unknown[] = [1e308, -1e308, 5e-324, -0, 2 ** 53 + 1, 123456789012345678901234567890, "1e99", "9".repeat(30), "1e-99", "0." + "0".repeat(29) + "1", "1/" + "9".repeat(30), -1, 0, 1e21, 0.1 + 0.2];
const ODD_STRINGS = ["", " ", "\u0000", "\u202E\u{1F600}", "\ud800", "n\u0308", "é".repeat(300), "x".repeat(1025), "people\u0000", "__proto__", "constructor", "NaN", "Infinity", "1e400"];

/** Every [container, key] pair in a JSON value, for picking a place to mutate. */
function places(v: unknown, out: [Record<string, unknown> | unknown[], string | number][] = []): [Record<string, unknown> | unknown[], string | number][] {
  if (Array.isArray(v)) v.forEach((x, k) => (out.push([v, k]), places(x, out)));
  else if (v !== null && typeof v === "object") for (const [k, x] of Object.entries(v)) (out.push([v as Record<string, unknown>, k]), places(x, out));
  return out;
}

function randomValue(r: Rand, depth = 0): unknown {
  switch (int(r, depth > 2 ? 5 : 7)) {
    case 0:
      return pick(r, HUGE);
    case 1:
      return pick(r, ODD_STRINGS);
    case 2:
      return r() < 0.5;
    case 3:
      return null;
    case 4:
      return int(r, 2000) - 1000;
    case 5:
      return Array.from({ length: int(r, 4) }, () => randomValue(r, depth + 1));
    default:
      return { [pick(r, ["op", "kind", "column", "epsilon", "x", "__proto__"])]: randomValue(r, depth + 1) };
  }
}

const enc = (v: unknown) => Buffer.from(JSON.stringify(v), "utf8");

function makeFrame(i: number, ws: HostileWorkspace): Frame {
  const r = seededRandom(SEED * 1_000_003 + i);
  const id = `f${i}`;
  const req: Record<string, unknown> = { v: 1, id, analyst: "a1", token: ws.tokens.a1, body: baseBody(r, i) };
  const text = JSON.stringify(req);
  const bytes = Buffer.from(text, "utf8");
  // Byte range of the credentials: flips there would be wrong tokens, which get their own (rare) kind.
  const credStart = text.indexOf('"analyst"');
  const credEnd = text.indexOf('"body"');
  const outsideCreds = (n: number) => {
    let p = int(r, n - (credEnd - credStart));
    if (p >= credStart) p += credEnd - credStart;
    return p;
  };
  const roll = r();
  if (roll < WRONG_TOKEN_SHARE) {
    const t = pick(r, [ws.tokens.a1.slice(0, -1) + "A", ws.tokens.a2, "x"]);
    return { kind: "wrong token", frames: [enc({ ...req, token: t, analyst: pick(r, ["a1", "a2", "nobody"]) })], id };
  }
  if (roll < 0.1) return { kind: "valid", frames: [bytes], id };
  switch (int(r, 14)) {
    case 0: {
      const n = int(r, bytes.length);
      return { kind: "truncated", frames: [bytes.subarray(0, n)], id: null };
    }
    case 1: {
      const b = Buffer.from(bytes);
      const flips = 1 + int(r, 8);
      for (let k = 0; k < flips; k++) {
        const p = outsideCreds(b.length);
        b[p] ^= 1 << int(r, 8);
      }
      return { kind: "bit flips", frames: [b], id: null };
    }
    case 2:
    case 3: {
      const copy = JSON.parse(text) as Record<string, unknown>;
      const spots = places(copy).filter(([c, k]) => !(c === copy && (k === "token" || k === "analyst" || k === "id")));
      const [c, k] = pick(r, spots);
      (c as Record<string | number, unknown>)[k] = randomValue(r);
      return { kind: "wrong value", frames: [enc(copy)], id };
    }
    case 4: {
      const copy = JSON.parse(text) as Record<string, unknown>;
      const objects = [copy, ...places(copy).map(([c, k]) => (c as Record<string | number, unknown>)[k]).filter((x) => x !== null && typeof x === "object" && !Array.isArray(x))];
      const o = pick(r, objects) as Record<string, unknown>;
      const key = pick(r, ["extra", "constructor", "prototype", "__proto__", "", "\u0000", "toString"]);
      // defineProperty, so "__proto__" is an own key that reaches the wire rather than a prototype change.
      Object.defineProperty(o, key, { value: randomValue(r), enumerable: true, configurable: true, writable: true });
      return { kind: "unknown key", frames: [enc(copy)], id };
    }
    case 5: {
      const depth = pick(r, [13, 100, 1000, 50_000]);
      const copy = JSON.parse(text) as { body: { plan?: { where?: unknown } } };
      if (copy.body.plan !== undefined && depth <= 1000) {
        let where: unknown = copy.body.plan.where;
        for (let k = 0; k < depth; k++) where = { op: "not", of: where };
        copy.body.plan.where = where;
        return { kind: "deep nesting", frames: [enc(copy)], id };
      }
      const t = r() < 0.5 ? "[".repeat(depth) + "]".repeat(depth) : '{"a":'.repeat(depth) + "1" + "}".repeat(depth);
      return { kind: "deep nesting", frames: [Buffer.from(t, "utf8")], id: null };
    }
    case 6: {
      if (r() < 0.25) {
        const size = MAX_FRAME_BYTES + pick(r, [1, 10, 1000, 100_000]);
        return { kind: "oversized", frames: [enc({ ...req, pad: "x".repeat(size) })], id };
      }
      // Numbers JSON.parse turns into Infinity or rounds: the version and a privacy value.
      const t = text.replace('"v":1', `"v":${pick(r, ["1e400", "1.0000000000000001", "-0", "1E0"])}`);
      return { kind: "wrong version", frames: [Buffer.from(t, "utf8")], id };
    }
    case 7:
      return { kind: "empty", frames: [Buffer.alloc(0)], id: null };
    case 8: {
      const n = 2 + int(r, 3);
      const frames = Array.from({ length: n }, (_, k) => (k === 0 && r() < 0.3 ? Buffer.alloc(0) : bytes));
      return { kind: "multi-frame", frames, id: null };
    }
    case 9: {
      const v = pick(r, [0, 2, "1", 1.0000001, null, true, [1], -1]);
      return { kind: "wrong version", frames: [enc({ ...req, v })], id };
    }
    case 10: {
      const bad = pick(r, [[0xff], [0xc0, 0x80], [0x80], [0xe2, 0x82], [0xed, 0xa0, 0x80], [0xfe, 0xff]]);
      const p = outsideCreds(bytes.length);
      return { kind: "bad UTF-8", frames: [Buffer.concat([bytes.subarray(0, p), Buffer.from(bad), bytes.subarray(p)])], id: null };
    }
    case 11: {
      const n = pick(r, [1, 16, 300, 5000]);
      return { kind: "random bytes", frames: [Buffer.from(Array.from({ length: n }, () => int(r, 256)))], id: null };
    }
    case 12: {
      const top = pick(r, [null, 42, "spend", [], [req], true, {}]);
      return { kind: "not an object", frames: [enc(top)], id: null };
    }
    default: {
      const copy = JSON.parse(text) as Record<string, unknown>;
      const spots = places(copy).filter(([, k]) => typeof k === "string" && k !== "token" && k !== "analyst" && k !== "id");
      const [c, k] = pick(r, spots);
      delete (c as Record<string, unknown>)[k as string];
      return { kind: "missing field", frames: [enc(copy)], id };
    }
  }
}

// ---- the run -------------------------------------------------------------------------------------

interface Sent {
  index: number;
  kind: string;
  /** What went wrong with this frame's reply; empty when all is well. */
  problems: string[];
  askRelease?: { dataset: string; cost: string; replay: boolean; receipt: Receipt };
  errorKind?: string;
}

interface FuzzLog {
  sent: Sent[];
  notSent: number;
  watch: WatchLog;
  /** Over-limit frames: did a reply come on the sending connection (it must not), and did others carry on. */
  dropped: { gotReply: boolean; answeredAfter: boolean }[];
  exitedDuring: boolean;
  /** ms from SIGTERM (after the last frame) to exit; null if it had not exited within the bound. */
  sigtermMs: number | null;
  stderr: string;
  durationMs: number;
}

/** The request id readable in a message: one frame, or a REQ-style empty delimiter then one frame. */
function readableId(frames: Buffer[]): string | null {
  const payload = frames.length === 2 && frames[0].length === 0 ? frames.slice(1) : frames;
  if (payload.length !== 1) return null;
  try {
    const v = JSON.parse(payload[0].toString("utf8")) as unknown;
    if (v !== null && typeof v === "object" && !Array.isArray(v) && typeof (v as { id?: unknown }).id === "string") return (v as { id: string }).id;
  } catch {
    return null;
  }
  return null;
}

function checkReply(f: Frame, got: Buffer[] | null, index: number): Sent {
  const s: Sent = { index, kind: f.kind, problems: [] };
  if (got === null) {
    s.problems.push(`no reply within ${REQUEST_BOUND_MS} ms`);
    return s;
  }
  const extra = got.slice(0, -1);
  if (extra.some((b) => b.length !== 0)) s.problems.push(`reply of ${got.length} frames`);
  let reply: Record<string, unknown>;
  try {
    reply = JSON.parse(got[got.length - 1].toString("utf8")) as Record<string, unknown>;
  } catch {
    s.problems.push("reply is not JSON");
    return s;
  }
  if (reply === null || typeof reply !== "object" || reply.v !== 1 || typeof reply.id !== "string" || typeof reply.ok !== "boolean") {
    s.problems.push(`reply is not a Response: ${JSON.stringify(reply).slice(0, 200)}`);
    return s;
  }
  // The id the curator could read from the frame as sent (mutations may have changed or broken it):
  // the reply must carry that id, or "" when it could not read one. Never another request's id.
  const readable = readableId(f.frames);
  if (reply.id !== "" && reply.id !== readable) s.problems.push(`reply id ${JSON.stringify(reply.id).slice(0, 60)} is not the id of frame ${index} (${JSON.stringify(readable)})`);
  if (f.id !== null && readable === f.id && reply.id !== f.id && f.kind === "valid") s.problems.push(`a valid request answered without its id`);
  if (reply.ok) {
    const body = reply.body as Record<string, unknown> | undefined;
    if (body === undefined || typeof body.op !== "string") s.problems.push("ok reply without a body op");
    else if (body.op === "ask") {
      const rel = body.release as { dataset: string; cost: string; replay: boolean; receipt: Receipt };
      s.askRelease = { dataset: rel.dataset, cost: rel.cost, replay: rel.replay, receipt: rel.receipt };
    }
  } else {
    const err = reply.error as { kind?: unknown; message?: unknown } | undefined;
    if (err === undefined || typeof err.kind !== "string" || !KNOWN_KINDS.has(err.kind) || typeof err.message !== "string") {
      s.problems.push(`error reply without a known kind and a message: ${JSON.stringify(err).slice(0, 200)}`);
    } else s.errorKind = err.kind;
  }
  return s;
}

async function runFuzz(ws: HostileWorkspace): Promise<FuzzLog> {
  const t0 = performance.now();
  const serve = await ServeProcess.start(ws);
  const watcherClient = await CuratorClient.connect({ address: serve.address, curveServerKey: serve.curvePublicKey, analyst: "a2", token: ws.tokens.a2, timeoutMs: WATCH_BOUND_MS });
  const watcher = watchCurator({ spend: () => watcherClient.spend("people"), rss: () => serve.rss(), everyMs: WATCH_EVERY_MS });
  const sent: Sent[] = [];
  const dropped: FuzzLog["dropped"] = [];
  let next = 0;
  let stop = false;
  // Three over-limit frames, sent from their own connections when the lanes reach these indices.
  const dropAt = new Set([Math.floor(FRAMES / 4), Math.floor(FRAMES / 2), Math.floor((3 * FRAMES) / 4)]);
  const dropTasks: Promise<void>[] = [];
  const dropOne = async (k: number) => {
    const big = new CurveSpeaker(serve.address, serve.curvePublicKey, 1_000);
    const probe = new CurveSpeaker(serve.address, serve.curvePublicKey, REQUEST_BOUND_MS);
    try {
      await big.send([Buffer.alloc(LIBZMQ_LIMIT + 1 + k, 0x20)]);
      // Another peer is still served after the oversize frame went in ...
      await probe.send([enc({ v: 1, id: `probe${k}`, analyst: "a2", token: ws.tokens.a2, body: { op: "spend", dataset: "people" } })]);
      const answer = await probe.receive();
      // ... and by then the oversize peer has had its chance to be answered; it must not be (1 s bound).
      const late = await big.receive();
      dropped.push({ gotReply: late !== null, answeredAfter: answer !== null });
    } finally {
      big.close();
      probe.close();
    }
  };
  const lanes = Array.from({ length: LANES }, async () => {
    const speaker = new CurveSpeaker(serve.address, serve.curvePublicKey, REQUEST_BOUND_MS);
    try {
      while (!stop) {
        const i = next++;
        if (i >= FRAMES) return;
        if (dropAt.has(i)) dropTasks.push(dropOne(i));
        const f = makeFrame(i, ws);
        await speaker.send(f.frames);
        const s = checkReply(f, await speaker.receive(), i);
        sent.push(s);
        // A frame left unanswered means the curator is wedged: stop and report rather than wait 35 s per lane.
        if (s.problems.some((p) => p.startsWith("no reply")) || serve.exited || watcher.wedged()) stop = true;
      }
    } finally {
      speaker.close();
    }
  });
  await Promise.all(lanes);
  await Promise.all(dropTasks);
  const exitedDuring = serve.exited;
  const watch = await watcher.stop();
  await watcherClient.close();
  const sigtermMs = await serve.terminate(HOSTILE_BOUNDS.sigtermMs);
  return { sent, notSent: Math.max(0, FRAMES - sent.length), watch, dropped, exitedDuring, sigtermMs, stderr: serve.stderr, durationMs: performance.now() - t0 };
}

// ---- the checks ----------------------------------------------------------------------------------

describe("reliability: frame fuzzer over tcp+CURVE", () => {
  let ws: HostileWorkspace;
  let log: FuzzLog;

  beforeAll(async () => {
    ws = makeHostileWorkspace({ prefix: "fuzz", rows: 1000, capPure: "20", capZcdp: "20" });
    log = await runFuzz(ws);
    const byKind = new Map<string, number>();
    for (const s of log.sent) byKind.set(s.kind, (byKind.get(s.kind) ?? 0) + 1);
    const errs = new Map<string, number>();
    for (const s of log.sent) if (s.errorKind) errs.set(s.errorKind, (errs.get(s.errorKind) ?? 0) + 1);
    console.log(
      `fuzz: seed ${SEED}, ${log.sent.length} frames answered-or-checked, ${log.notSent} not sent; by kind ${JSON.stringify(Object.fromEntries(byKind))}; ` +
        `error kinds ${JSON.stringify(Object.fromEntries(errs))}; fresh asks ${log.sent.filter((s) => s.askRelease && !s.askRelease.replay).length}; ` +
        `watcher ${log.watch.latencies.length} polls, max ${Math.max(0, ...log.watch.latencies).toFixed(0)} ms, ${log.watch.misses.length} missed; ` +
        `peak RSS ${(log.watch.peakRss / 2 ** 20).toFixed(0)} MiB; run ${(log.durationMs / 1000).toFixed(1)} s`,
    );
  }, 600_000);

  afterAll(() => {
    if (ws) fs.rmSync(ws.dir, { recursive: true, force: true });
  });

  it(`sends ${FRAMES} frames and gets one well-formed reply for each, echoing its id`, () => {
    const bad = log.sent.filter((s) => s.problems.length > 0).map((s) => `frame ${s.index} (${s.kind}): ${s.problems.join("; ")}`);
    expect(bad.slice(0, 20)).toEqual([]);
    expect(log.notSent).toBe(0);
    expect(log.sent.length).toBe(FRAMES);
  });

  it("never answers a fuzzed frame with an internal error", () => {
    const internal = log.sent.filter((s) => s.errorKind === "internal").map((s) => `frame ${s.index} (${s.kind})`);
    expect(internal.slice(0, 20)).toEqual([]);
  });

  it("drops a peer whose frame passes libzmq's size limit, and keeps serving the others", () => {
    expect(log.dropped.length).toBe(3);
    for (const d of log.dropped) expect(d).toEqual({ gotReply: false, answeredAfter: true });
  });

  it("never exits, stays responsive and within the memory bound", () => {
    expect(log.exitedDuring).toBe(false);
    expect(log.watch.misses.slice(0, 5)).toEqual([]);
    expect(log.watch.latencies.length).toBeGreaterThan(10);
    expect(log.watch.lastSpent).toBe("0");
    expect(log.watch.peakRss).toBeLessThan(RSS_BOUND);
  });

  it(`stops within ${HOSTILE_BOUNDS.sigtermMs} ms of SIGTERM afterwards`, () => {
    expect(log.sigtermMs).not.toBeNull();
  });

  it("spends only on valid affordable asks: the ledger is exactly the fresh releases received", () => {
    const rows = readLedger(ws.ledgerFile);
    const key = loadPublicKey(ws.publicKeyB64);
    const asks = log.sent.flatMap((s) => (s.askRelease ? [s.askRelease] : []));
    const fresh = asks.filter((a) => !a.replay);
    expect(fresh.length).toBeGreaterThan(0); // the fuzzer did reach the release path
    for (const dataset of ["people", "others"]) {
      const mine = rows.filter((r) => r.dataset === dataset);
      expect(mine.every((r) => r.analyst === "a1")).toBe(true);
      if (mine.length > 0) expect(ledgerProblems(mine, key, mine[0].receipt.cap)).toEqual([]);
      const got = fresh.filter((a) => a.dataset === dataset);
      const total = mine.length > 0 ? mine[mine.length - 1].total : "0";
      expect({ dataset, total: sumOf([total]).toString(), rows: mine.length }).toEqual({ dataset, total: sumOf(got.map((a) => a.cost)).toString(), rows: got.length });
      const receivedHashes = new Set(got.map((a) => receiptHash(a.receipt)));
      expect(mine.filter((r) => !receivedHashes.has(r.receiptHash)).map((r) => `${dataset} seq ${r.seq}`)).toEqual([]);
    }
    for (const a of asks.filter((x) => x.replay)) expect(sumOf([a.cost]).sign()).toBe(0);
  });
});
