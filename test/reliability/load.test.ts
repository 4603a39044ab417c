/**
 * Load: 8 concurrent clients (6 analysts; two of them run two clients each, so one analyst's
 * requests race each other) × 100 mixed requests against one curator process with a tight cap.
 *
 * Invariants (the accounting rules of the curator, "common practice" for a spend ledger):
 * - no analyst's spend ever exceeds the cap;
 * - every fresh release has exactly one ledger row, whose receipt is the one the client got, and
 *   every ledger row was received by a client (no crash here, so nothing is lost in between);
 * - each receipt verifies against the curator key, and each analyst's ledger is one intact chain;
 * - refused requests cost nothing: the ledger total equals the sum of the fresh releases' costs.
 *
 * HUSH_HEAVY=1 runs 1000 requests per client.
 */
import fs from "node:fs";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { CuratorClient } from "../../runtime/client/client.js";
import { isHushError } from "../../runtime/errors.js";
import type { QueryPlan, Receipt, Release } from "../../runtime/protocol/messages.js";
import { loadPublicKey, receiptHash, verifyReceipt } from "../../runtime/protocol/receipts.js";
import { CuratorProcess } from "../../bench/curator-process.js";
import { ledgerProblems, readLedger, sumOf } from "./checks.js";
import { makeRelWorkspace, mix32, plan, type RelWorkspace } from "./fixtures.js";

const HEAVY = process.env.HUSH_HEAVY === "1";
const CLIENTS = 8;
/** HUSH_HEAVY=1: 1000 requests per client and a cap 5 times larger. */
const QUERIES_PER_CLIENT = HEAVY ? 1000 : 100;
const CAP = HEAVY ? "5" : "1";

interface ClientLog {
  analyst: string;
  fresh: Release[];
  replays: Release[];
  refusedOverCap: number;
  refusedBad: number;
  previews: number;
  unexpected: string[];
}

/** The i-th request of client c: a deterministic mix of kinds from a fixed hash. */
function pickRequest(c: number, i: number, released: QueryPlan[]): { kind: string; plan?: QueryPlan } {
  const h = mix32(c * 1000 + i);
  const eps = ["0.02", "0.03", "0.05"][h % 3];
  // Fresh plans differ by filter so each is a new release (client and index in the bound).
  const where = { op: "ge" as const, column: "age", value: 18 + ((c * QUERIES_PER_CLIENT + i) % 70) };
  const tag = { op: "lt" as const, column: "amount", value: 100 + c + i / 1000 };
  const fresh = (m: QueryPlan["measure"], extra: Partial<QueryPlan> = {}) =>
    plan("visits", m, eps, { where: { op: "and", of: [where, tag] }, ...extra });
  switch ((h >>> 8) % 10) {
    case 0:
      return { kind: "ask", plan: fresh({ kind: "count" }) };
    case 1:
      return { kind: "ask", plan: fresh({ kind: "sum", column: "amount" }) };
    case 2:
      return { kind: "ask", plan: fresh({ kind: "mean", column: "amount" }) };
    case 3:
      return { kind: "ask", plan: fresh({ kind: "quantile", column: "amount", p: [0.5] }) };
    case 4:
      return { kind: "ask", plan: fresh({ kind: "mean", column: "age" }, { groupBy: [{ column: "region" }] }) };
    case 5:
      return { kind: "preview", plan: fresh({ kind: "count" }) };
    case 6:
      return released.length > 0 ? { kind: "replay", plan: released[h % released.length] } : { kind: "spend" };
    case 7:
      return { kind: "bad", plan: fresh({ kind: "sum", column: "no_such_column" }) };
    case 8:
      return { kind: "bad", plan: plan("visits", { kind: "count" }, ["-1", "0", "abc"][h % 3]) };
    default:
      return { kind: "spend" };
  }
}

async function runClient(ws: RelWorkspace, c: number, analyst: string): Promise<ClientLog> {
  const client = await CuratorClient.connect({ address: ws.listen, analyst, token: ws.tokens[analyst] });
  const log: ClientLog = { analyst, fresh: [], replays: [], refusedOverCap: 0, refusedBad: 0, previews: 0, unexpected: [] };
  const released: QueryPlan[] = [];
  try {
    for (let i = 0; i < QUERIES_PER_CLIENT; i++) {
      const req = pickRequest(c, i, released);
      try {
        if (req.kind === "spend") {
          const s = await client.spend(ws.dataset);
          if (sumOf([s.spentEpsilon]).gt(sumOf([CAP]))) log.unexpected.push(`spend ${s.spentEpsilon} over the cap`);
        } else if (req.kind === "preview") {
          const p = await client.preview(req.plan!);
          log.previews++;
          if (p.cost === "0") log.unexpected.push("preview of a fresh plan priced at 0");
        } else {
          const r = await client.ask(req.plan!);
          if (req.kind === "bad") log.unexpected.push(`bad plan was answered (${r.digest})`);
          if (r.replay) log.replays.push(r);
          else {
            log.fresh.push(r);
            released.push(req.plan!);
          }
        }
      } catch (e: unknown) {
        if (!isHushError(e)) throw e;
        if (e.kind === "over-cap") log.refusedOverCap++;
        else if (e.kind === "bad-input" && req.kind === "bad") log.refusedBad++;
        else log.unexpected.push(`${req.kind}: ${e.kind}: ${e.message}`);
      }
    }
  } finally {
    await client.close();
  }
  return log;
}

describe("reliability: load", () => {
  let ws: RelWorkspace;
  let curator: CuratorProcess;
  let logs: ClientLog[] = [];

  beforeAll(async () => {
    ws = makeRelWorkspace({ prefix: "load", analysts: 6, cap: CAP });
    curator = await CuratorProcess.start({ policyFile: ws.policyFile, listen: ws.listen });
    // Clients 0-3: analysts a1-a4; clients 4-7: a5, a5, a6, a6.
    const analystOf = (c: number) => (c < 4 ? ws.analysts[c] : ws.analysts[4 + ((c - 4) >> 1)]);
    logs = await Promise.all(Array.from({ length: CLIENTS }, (_, c) => runClient(ws, c, analystOf(c))));
    await curator.stop();
    if (process.env.HUSH_VERBOSE) console.log(logs.map((l) => ({ a: l.analyst, fresh: l.fresh.length, replays: l.replays.length, overCap: l.refusedOverCap, bad: l.refusedBad, previews: l.previews })));
  }, HEAVY ? 1_800_000 : 300_000);

  afterAll(async () => {
    await curator?.stop();
    if (ws) fs.rmSync(ws.dir, { recursive: true, force: true });
  });

  it("answers every request as expected (no unexpected errors)", () => {
    expect(logs.flatMap((l) => l.unexpected)).toEqual([]);
    // The mix did exercise every path: releases, replays, previews, refusals of both kinds.
    const total = (f: (l: ClientLog) => number) => logs.reduce((s, l) => s + f(l), 0);
    expect(total((l) => l.fresh.length)).toBeGreaterThan(50);
    expect(total((l) => l.replays.length)).toBeGreaterThan(0);
    expect(total((l) => l.previews)).toBeGreaterThan(0);
    expect(total((l) => l.refusedOverCap)).toBeGreaterThan(0);
    expect(total((l) => l.refusedBad)).toBeGreaterThan(0);
  });

  it("keeps a consistent ledger within the cap", () => {
    const rows = readLedger(ws.ledgerFile);
    expect(ledgerProblems(rows, loadPublicKey(ws.publicKeyB64), CAP)).toEqual([]);
  });

  it("has exactly one ledger row per fresh release, with the receipt the client got", () => {
    const rows = readLedger(ws.ledgerFile);
    const key = loadPublicKey(ws.publicKeyB64);
    const received = new Map<string, Receipt>();
    for (const l of logs) {
      for (const r of l.fresh) {
        expect(verifyReceipt(r.receipt, key)).toEqual({ ok: true });
        expect(r.receipt.analyst).toBe(l.analyst);
        const h = receiptHash(r.receipt);
        expect(received.has(h)).toBe(false);
        received.set(h, r.receipt);
      }
    }
    const ledgerHashes = rows.map((r) => r.receiptHash);
    expect(new Set(ledgerHashes).size).toBe(ledgerHashes.length);
    expect([...ledgerHashes].sort()).toEqual([...received.keys()].sort());
  });

  it("returns the stored receipt, at no cost, for a replay", () => {
    const byHash = new Set(readLedger(ws.ledgerFile).map((r) => r.receiptHash));
    for (const l of logs) {
      for (const r of l.replays) {
        expect(r.cost).toBe("0");
        expect(byHash.has(receiptHash(r.receipt))).toBe(true);
      }
    }
  });

  it("charges refusals nothing: each analyst's total is the sum of its fresh releases' costs", () => {
    const rows = readLedger(ws.ledgerFile);
    for (const a of ws.analysts) {
      const fresh = logs.filter((l) => l.analyst === a).flatMap((l) => l.fresh);
      const mine = rows.filter((r) => r.analyst === a);
      const last = mine[mine.length - 1];
      const total = last === undefined ? "0" : last.total;
      expect(sumOf(fresh.map((r) => r.cost)).eq(sumOf([total]))).toBe(true);
      expect(mine.length).toBe(fresh.length);
    }
  });
});
