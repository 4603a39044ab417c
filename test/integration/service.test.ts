/**
 * The curator as a real process (dist/runtime/curator/main.js) on real sockets; the same suite runs
 * over ipc and over tcp with CURVE.
 */
import { rmSync } from "node:fs";
import Database from "better-sqlite3";
import { curveKeyPair } from "zeromq";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { CuratorClient } from "../../runtime/client/client.js";
import { Rational } from "../../runtime/core/index.js";
import { BadInputError, OverCapError, UnknownDatasetError, UnreachableError, isHushError } from "../../runtime/errors.js";
import { MAX_FRAME_BYTES, type QueryPlan, type Receipt, type Release } from "../../runtime/protocol/messages.js";
import { loadPublicKey, receiptHash, verifyReceipt } from "../../runtime/protocol/receipts.js";
import { checkReceiptChains } from "../../cli/audit/chain.js";
import {
  CANARY,
  DISTRICTS,
  countPlan,
  listenArgs,
  makeWorkspace,
  RawSpeaker,
  requireBuild,
  startCuratorChild,
  type CuratorChild,
  type Transport,
  type Workspace,
} from "./helpers.js";

function sumOf(xs: string[]): string {
  return xs.reduce((a, x) => a.add(Rational.parse(x)), Rational.ZERO).toString();
}

describe.each<Transport>(["ipc", "tcp"])("curator over %s", (transport) => {
  let ws: Workspace;
  let cur: CuratorChild;
  let ada: CuratorClient;
  const released: Release[] = [];
  /** Every release any client of this suite received, to hold against the ledger file at the end. */
  const received: Release[] = [];
  const keep = (r: Release): Release => {
    received.push(r);
    return r;
  };

  const connect = (analyst: "ada" | "ben", token?: string) =>
    CuratorClient.connect({
      address: cur.ready.address,
      analyst,
      token: token ?? ws.tokens[analyst],
      ...(cur.ready.curvePublicKey ? { curveServerKey: cur.ready.curvePublicKey } : {}),
      timeoutMs: 30_000,
    });

  beforeAll(async () => {
    requireBuild();
    ws = makeWorkspace(transport, "1");
    cur = await startCuratorChild(listenArgs(ws, transport));
    ada = await connect("ada");
  });

  afterAll(async () => {
    await ada?.close();
    await cur?.stop();
    if (ws) rmSync(ws.dir, { recursive: true, force: true });
  });

  it("announces the transport it serves", () => {
    if (transport === "tcp") {
      expect(cur.ready.address).toMatch(/^tcp:\/\/127\.0\.0\.1:\d+$/);
      expect(cur.ready.address).not.toMatch(/:0$/);
      expect(cur.ready.curvePublicKey).toMatch(/^.{40}$/);
    } else {
      expect(cur.ready.address).toMatch(/^ipc:\/\//);
      expect(cur.ready.curvePublicKey).toBeUndefined();
    }
    expect(cur.ready.publicKey).toBe(ws.publicKeyB64);
  });

  it("catalogue lists only the datasets granted to the analyst, and the signing key", async () => {
    const cat = await ada.catalogue();
    expect(cat.datasets.map((d) => d.name).sort()).toEqual(["clinic", "clinic_z"]);
    expect(cat.publicKey).toBe(ws.publicKeyB64);
  });

  it("open gives the public schema and the spend, never the unit column", async () => {
    const info = await ada.open("clinic");
    expect(info.columns.map((c) => c.name).sort()).toEqual(["age", "district", "insured", "wait_minutes"]);
    expect(info.unit).toEqual({ column: "patient_id", maxRows: 4, maxGroups: 2 });
    expect(info.spend).toMatchObject({ analyst: "ada", dataset: "clinic", mode: "pure", spentEpsilon: "0", capEpsilon: "1", releases: 0 });
    await expect(ada.open("hidden")).rejects.toBeInstanceOf(UnknownDatasetError);
  });

  it("releases carry receipts that verify, and the ledger matches them one for one", async () => {
    const key = loadPublicKey(cur.ready.publicKey);
    const plans: QueryPlan[] = [
      countPlan("0.1"),
      { v: 1, dataset: "clinic", measure: { kind: "sum", column: "wait_minutes" }, groupBy: [{ column: "district" }], privacy: { epsilon: "0.05" } },
      { v: 1, dataset: "clinic", measure: { kind: "mean", column: "age" }, privacy: { epsilon: "1/20" } },
    ];
    for (const p of plans) {
      const r = keep(await ada.ask(p));
      expect(r.replay).toBe(false);
      expect(verifyReceipt(r.receipt, key)).toEqual({ ok: true });
      expect(r.receipt.result).toEqual(r.rows.map((x) => [x.key, x.stat, x.column, x.value, x.low, x.high]));
      expect(r.receipt.cost).toBe(r.cost);
      released.push(r);
    }
    expect(released.map((r) => r.receipt.seq)).toEqual([1, 2, 3]);
    const entries = await ada.ledger("clinic");
    expect(entries.map((e) => e.receipt)).toEqual(released.map((r) => r.receipt));
    expect(checkReceiptChains(entries.map((e) => e.receipt), key)).toEqual([]);
    // 1/10 + 1/20 + 1/20 = 1/5, exactly.
    expect(entries[2].total).toBe("1/5");
    expect(sumOf(released.map((r) => r.cost))).toBe("1/5");
    expect((await ada.spend("clinic")).spentEpsilon).toBe("1/5");
  });

  it("answers an identical plan again from the ledger at no cost", async () => {
    const before = await ada.spend("clinic");
    const again = keep(await ada.ask(countPlan("0.1")));
    expect(again.replay).toBe(true);
    expect(again.cost).toBe("0");
    expect(again.rows).toEqual(released[0].rows);
    expect(again.receipt).toEqual(released[0].receipt);
    expect(await ada.spend("clinic")).toEqual(before);
    const preview = await ada.preview(countPlan("0.1"));
    expect(preview).toMatchObject({ replay: true, affordable: true });
  });

  it("refuses a query that would cross the cap, debits nothing, and says how much is left", async () => {
    const ben = await connect("ben");
    try {
      expect(keep(await ben.ask(countPlan("0.6"))).spend.spentEpsilon).toBe("3/5");
      const preview = await ben.preview(countPlan("0.5", { where: { op: "ge", column: "age", value: 30 } }));
      expect(preview).toMatchObject({ affordable: false, replay: false, cost: "1/2" });
      const err = await ben.ask(countPlan("0.5", { where: { op: "ge", column: "age", value: 30 } })).then(
        () => null,
        (e: unknown) => e,
      );
      expect(err).toBeInstanceOf(OverCapError);
      const e = err as OverCapError;
      expect(e.message).toMatch(/over the cap.*costs ε 0\.5.*ε 0\.4 left of the cap 1/);
      expect(e.spend).toMatchObject({ spentEpsilon: "3/5", remainingEpsilon: "2/5", releases: 1 });
      expect((await ben.spend("clinic")).spentEpsilon).toBe("3/5");
      // Exactly the remainder still fits: the cap is inclusive and the arithmetic exact.
      expect(keep(await ben.ask(countPlan("0.4", { where: { op: "ge", column: "age", value: 30 } }))).spend.spentEpsilon).toBe("1");
      expect((await ben.ledger("clinic")).map((x) => x.total)).toEqual(["3/5", "1"]);
    } finally {
      await ben.close();
    }
  });

  it("accounts zCDP datasets in rho and reports epsilon at delta", async () => {
    const r = keep(await ada.ask({ v: 1, dataset: "clinic_z", measure: { kind: "count" }, privacy: { rho: "0.01" } }));
    expect(r.receipt).toMatchObject({ unit: "rho", cost: "1/100", total: "1/100", delta: "0.000001" });
    expect(r.spend).toMatchObject({ mode: "zcdp", spentRho: "1/100", delta: "0.000001" });
    // Bun & Steinke 2016, Prop. 1.3: rho-zCDP gives (rho + 2 sqrt(rho ln(1/delta)), delta)-DP; any
    // tighter conversion lies between 0 and that bound.
    const bs = 0.01 + 2 * Math.sqrt(0.01 * Math.log(1e6));
    const eps = Rational.parse(r.spend.spentEpsilon).toNumber();
    expect(eps).toBeGreaterThan(0);
    expect(eps).toBeLessThanOrEqual(bs + 1e-12);
  });

  it("prices an accuracy-first plan at preview and charges exactly that", async () => {
    const plan: QueryPlan = { v: 1, dataset: "clinic_z", measure: { kind: "count" }, groupBy: [{ column: "insured" }], privacy: { within: 60 } };
    const before = await ada.spend("clinic_z");
    const preview = await ada.preview(plan);
    expect(preview).toMatchObject({ unit: "rho", replay: false, affordable: true });
    // Accuracy first spends only under a bound: the price the preview stated.
    const r = keep(await ada.ask({ ...plan, privacy: { within: 60, atMost: preview.cost } }));
    expect(r.cost).toBe(preview.cost);
    expect(r.receipt.digest).toBe(preview.digest);
    expect(Rational.parse(r.spend.spentRho!).eq(Rational.parse(before.spentRho!).add(Rational.parse(preview.cost)))).toBe(true);
    expect(verifyReceipt(r.receipt, loadPublicKey(cur.ready.publicKey))).toEqual({ ok: true });
  });

  it("rejects bad requests at the protocol level with clear errors, spends nothing, stays up", async () => {
    const before = await ada.spend("clinic");
    const raw = RawSpeaker.connect(cur.ready);
    const good = { v: 1, id: "r1", analyst: "ada", token: ws.tokens.ada, body: { op: "spend", dataset: "clinic" } };
    const ask = { ...good, body: { op: "ask", plan: countPlan("0.01", { where: { op: "lt", column: "age", value: 7 } }) } };
    const errorOf = async (frames: (Buffer | string)[]) => {
      const r = await raw.exchange(frames);
      expect(r.ok).toBe(false);
      expect(r.v).toBe(1);
      return r.error as { kind: string; message: string };
    };
    try {
      expect(await errorOf(["{not json"])).toMatchObject({ kind: "protocol", message: expect.stringMatching(/not valid UTF-8 JSON/) });
      expect(await errorOf([JSON.stringify(ask).slice(0, 40)])).toMatchObject({ kind: "protocol" });
      expect(await errorOf([Buffer.from([0xff, 0xfe, 0x7b])])).toMatchObject({ kind: "protocol" });
      expect(await errorOf(["[1,2]"])).toMatchObject({ kind: "protocol", message: expect.stringMatching(/JSON object/) });
      expect(await errorOf([JSON.stringify({ ...ask, v: 2 })])).toMatchObject({
        kind: "protocol",
        message: expect.stringMatching(/unsupported protocol version 2/),
      });
      expect(await errorOf([JSON.stringify({ ...good, body: { op: "drop" } })])).toMatchObject({
        kind: "protocol",
        message: expect.stringMatching(/unknown op "drop"/),
      });
      expect(await errorOf([JSON.stringify({ ...good, token: 5 })])).toMatchObject({ kind: "protocol" });
      const unknownAnalyst = await errorOf([JSON.stringify({ ...ask, analyst: "mallory" })]);
      const badToken = await errorOf([JSON.stringify({ ...ask, token: `${ws.tokens.ada}x` })]);
      expect(unknownAnalyst.kind).toBe("unauthorized");
      // The same words for both, so a reply does not tell which analyst names exist.
      expect(badToken).toEqual(unknownAnalyst);
      const oversized = Buffer.alloc(MAX_FRAME_BYTES + 1, 0x20);
      expect(await errorOf([oversized])).toMatchObject({ kind: "protocol", message: expect.stringMatching(/over the limit/) });
      expect(await errorOf([JSON.stringify(good), JSON.stringify(good)])).toMatchObject({
        kind: "protocol",
        message: expect.stringMatching(/expected one request frame, got 2/),
      });
      const badPlan = await errorOf([JSON.stringify({ ...good, body: { op: "ask", plan: countPlan("0.01", { where: { op: "eq", column: "patient_id", value: "x" } }) } })]);
      expect(badPlan.kind).toBe("bad-input");
      const hidden = await errorOf([JSON.stringify({ ...ask, body: { op: "ask", plan: countPlan("0.01", {}, "hidden") } })]);
      expect(hidden.kind).toBe("unknown-dataset");
      expect(hidden.message).not.toMatch(/ben/);
      // Still serving, and nothing was spent by any of it.
      const ok = await raw.exchange([JSON.stringify(good)]);
      expect(ok).toMatchObject({ ok: true, id: "r1" });
      expect(await ada.spend("clinic")).toEqual(before);
    } finally {
      raw.close();
    }
  });

  it("client-side errors come back as the matching classes", async () => {
    const big: QueryPlan = countPlan("0.01", { where: { op: "in", column: "district", values: Array.from({ length: 40_000 }, () => "Northgate") } });
    await expect(ada.ask(big)).rejects.toBeInstanceOf(BadInputError);
    const stranger = await connect("ada", "wrong-token");
    try {
      const e = await stranger.catalogue().then(() => null, (x: unknown) => x);
      expect(isHushError(e) && e.kind).toBe("unauthorized");
    } finally {
      await stranger.close();
    }
  });

  it.runIf(transport === "tcp")("a client pinning the wrong CURVE key never gets an answer", async () => {
    const wrong = await CuratorClient.connect({
      address: cur.ready.address,
      analyst: "ada",
      token: ws.tokens.ada,
      curveServerKey: curveKeyPair().publicKey, // a well-formed key of some other server
      timeoutMs: 1500,
    });
    try {
      await expect(wrong.catalogue()).rejects.toBeInstanceOf(UnreachableError);
    } finally {
      await wrong.close();
    }
  });

  it("no reply carries more values than the aggregate declares, or any unit id", async () => {
    const texts: string[] = [];
    const raw = RawSpeaker.connect(cur.ready);
    const send = async (body: unknown) => {
      const r = await raw.exchange([JSON.stringify({ v: 1, id: "x", analyst: "ada", token: ws.tokens.ada, body })]);
      texts.push(JSON.stringify(r));
      const typed = r as { ok: boolean; body?: { release?: Release } };
      if (typed.body?.release) keep(typed.body.release);
      return typed;
    };
    try {
      await send({ op: "catalogue" });
      await send({ op: "open", dataset: "clinic" });
      await send({ op: "spend", dataset: "clinic" });
      await send({ op: "ledger" });
      await send({ op: "preview", plan: countPlan("0.01", { groupBy: [{ column: "district" }] }) });
      const cases: { plan: QueryPlan; rows: number }[] = [
        { plan: countPlan("0.01", { where: { op: "gt", column: "age", value: 3 } }), rows: 1 },
        { plan: countPlan("0.01", { groupBy: [{ column: "district" }] }), rows: DISTRICTS.length },
        { plan: countPlan("0.01", { groupBy: [{ column: "district" }, { column: "insured" }] }), rows: DISTRICTS.length * 2 },
        { plan: { v: 1, dataset: "clinic", measure: { kind: "histogram", column: "age", bins: 5 }, privacy: { epsilon: "0.01" } }, rows: 5 },
        { plan: { v: 1, dataset: "clinic", measure: { kind: "quantile", column: "wait_minutes", p: [0.5] }, privacy: { epsilon: "0.01" } }, rows: 1 },
      ];
      for (const c of cases) {
        const r = await send({ op: "ask", plan: c.plan });
        expect(r.ok).toBe(true);
        const rel = r.body!.release!;
        // Exactly the declared output: one row per declared group (or bin), never one per data row.
        expect(rel.rows.length).toBe(c.rows);
        expect(rel.receipt.result).toHaveLength(rel.rows.length);
        for (const row of rel.rows) {
          for (const k of row.key) expect(k === null || DISTRICTS.includes(k) || /^(true|false)$/.test(k) || /\d/.test(k)).toBe(true);
        }
      }
      await send({ op: "ask", plan: countPlan("100") });
      await send({ op: "ask", plan: countPlan("0.01", { where: { op: "eq", column: "district", value: "Southport" } }) });
      await send({ op: "ledger", dataset: "clinic" });
      for (const t of texts) expect(t).not.toContain(CANARY);
    } finally {
      raw.close();
    }
  });

  it("leaves a ledger file that matches the received receipts one for one", () => {
    // Read with plain SQL, not the curator's Ledger class, so a bug there cannot hide a bad row.
    const db = new Database(ws.ledgerFile, { readonly: true, fileMustExist: true });
    let rows: { analyst: string; dataset: string; seq: number; receipt: string; receipt_hash: string }[];
    try {
      rows = db.prepare("SELECT analyst, dataset, seq, receipt, receipt_hash FROM releases ORDER BY analyst, dataset, seq").all() as typeof rows;
    } finally {
      db.close();
    }
    const stored = rows.map((r) => JSON.parse(r.receipt) as Receipt);
    rows.forEach((r, i) => expect(receiptHash(stored[i])).toBe(r.receipt_hash));
    const got = new Map(received.map((r) => [receiptHash(r.receipt), r.receipt]));
    expect(stored.map((r) => receiptHash(r)).sort()).toEqual([...got.keys()].sort());
    expect(checkReceiptChains(stored, loadPublicKey(ws.publicKeyB64))).toEqual([]);
  });
});
