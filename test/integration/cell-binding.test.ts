/**
 * The asking cell's source digest on the wire (runtime/protocol/cell-source.ts): a real curator
 * process signs it into the receipt, a request without it still works (scripts outside a notebook)
 * and says so by leaving the receipt unbound, a malformed digest is refused before anything is
 * spent, and a replay returns the first receipt (naming the first code) whatever digest it carries,
 * with a signed statement when it was asked from other code (runtime/protocol/reasked.ts).
 */
import { rmSync } from "node:fs";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { CuratorClient } from "../../runtime/client/client.js";
import { ProtocolError } from "../../runtime/errors.js";
import { cellSourceDigest } from "../../runtime/protocol/cell-source.js";
import { loadPublicKey, receiptHash, verifyReceipt } from "../../runtime/protocol/receipts.js";
import { reaskedHolds } from "../../runtime/protocol/reasked.js";
import { parseRequest } from "../../runtime/protocol/schema.js";
import { countPlan, makeWorkspace, RawSpeaker, requireBuild, startCuratorChild, type CuratorChild, type Workspace } from "./helpers.js";

describe("cell source digest in asks and receipts", () => {
  let ws: Workspace;
  let cur: CuratorChild;
  let client: CuratorClient;
  beforeAll(async () => {
    requireBuild();
    ws = makeWorkspace("cell", "1");
    cur = await startCuratorChild(["--policy", ws.policyFile, "--listen", `ipc://${join(ws.dir, "c.sock")}`]);
    client = await CuratorClient.connect({ address: cur.ready.address, analyst: "ada", token: ws.tokens.ada, timeoutMs: 30_000 });
  }, 60_000);
  afterAll(async () => {
    await client?.close();
    await cur?.stop();
    if (ws) rmSync(ws.dir, { recursive: true, force: true });
  });

  it("defines the digest as sha256 of the UTF-8 source with line endings made LF, nothing else", () => {
    // sha256 of "", "a\nb" and "é" (UTF-8 c3 a9), from coreutils sha256sum.
    expect(cellSourceDigest("")).toBe("e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855");
    expect(cellSourceDigest("a\nb")).toBe("7e18f737311b2dc3b2f269dd78396b0351f14fb66efa879f768cb23181883c78");
    expect(cellSourceDigest("\u00e9")).toBe("4a99557e4033c3539de2eb65472017cad5f9557f7a0625a09f1c3f6e2ba69c4c");
    expect(cellSourceDigest("a\nb")).toBe(cellSourceDigest("a\r\nb"));
    expect(cellSourceDigest("a\nb")).toBe(cellSourceDigest("a\rb"));
    expect(cellSourceDigest("a\nb")).not.toBe(cellSourceDigest("a \nb"));
  });

  it("signs the digest sent with an ask into the receipt", async () => {
    const cell = cellSourceDigest('await visits.count({ epsilon: 0.1 })');
    const r = await client.ask(countPlan("0.1"), cell);
    expect(r.replay).toBe(false);
    expect(r.receipt.cell).toBe(cell);
    expect(verifyReceipt(r.receipt, loadPublicKey(ws.publicKeyB64))).toEqual({ ok: true });
    // The digest is signed: changing it breaks the signature.
    expect(verifyReceipt({ ...r.receipt, cell: cellSourceDigest("other") }, loadPublicKey(ws.publicKeyB64)).ok).toBe(false);
  });

  it("answers an ask without a digest, with a receipt that names no cell", async () => {
    const r = await client.ask(countPlan("0.05"));
    expect(r.replay).toBe(false);
    expect("cell" in r.receipt).toBe(false);
    expect(verifyReceipt(r.receipt, loadPublicKey(ws.publicKeyB64))).toEqual({ ok: true });
    // Asked again from a notebook cell: the same receipt, with the statement that this code asked.
    const cell = cellSourceDigest("await visits.count({ epsilon: 0.05 })");
    const again = await client.ask(countPlan("0.05"), cell);
    expect(again.receipt).toEqual(r.receipt);
    expect(reaskedHolds(again.reasked, r.receipt, cell, loadPublicKey(ws.publicKeyB64))).toBe(true);
  });

  it("replays the first receipt, naming the first code, when the same plan comes from other code", async () => {
    const first = cellSourceDigest("await visits.count({ epsilon: 0.2 })");
    const a = await client.ask(countPlan("0.2"), first);
    const same = await client.ask(countPlan("0.2"), first);
    const other = await client.ask(countPlan("0.2"), cellSourceDigest("// edited\nawait visits.count({ epsilon: 0.2 })"));
    const none = await client.ask(countPlan("0.2"));
    for (const r of [same, other, none]) {
      expect(r.replay).toBe(true);
      expect(r.receipt).toEqual(a.receipt);
    }
    expect(a.receipt.cell).toBe(first);
    // Only the ask from other code carries the curator's statement that this code asked again.
    expect(same.reasked).toBeUndefined();
    expect(none.reasked).toBeUndefined();
    const edited = cellSourceDigest("// edited\nawait visits.count({ epsilon: 0.2 })");
    const key = loadPublicKey(ws.publicKeyB64);
    expect(other.reasked).toMatchObject({ format: "hush-reasked/1", receipt: receiptHash(a.receipt), cell: edited });
    expect(reaskedHolds(other.reasked, a.receipt, edited, key)).toBe(true);
    // It holds for that code and that receipt only, and only as signed.
    expect(reaskedHolds(other.reasked, a.receipt, first, key)).toBe(false);
    expect(reaskedHolds(other.reasked, (await client.ask(countPlan("0.01"), first)).receipt, edited, key)).toBe(false);
    expect(reaskedHolds({ ...other.reasked!, cell: first }, a.receipt, first, key)).toBe(false);
  });

  it("refuses a malformed digest as a protocol error, and spends nothing", async () => {
    const before = await client.spend("clinic");
    const raw = RawSpeaker.connect(cur.ready);
    try {
      for (const cell of ["abc", "A".repeat(64), "g".repeat(64), 5, null, "0".repeat(65)]) {
        const reply = await raw.exchange([JSON.stringify({ v: 1, id: "x", analyst: "ada", token: ws.tokens.ada, body: { op: "ask", plan: countPlan("0.3"), cell } })]);
        expect(reply, JSON.stringify(cell)).toMatchObject({ ok: false, error: { kind: "protocol" } });
        expect((reply as { error: { message: string } }).error.message).toContain("request.body.cell");
      }
    } finally {
      raw.close();
    }
    expect(await client.spend("clinic")).toEqual(before);
  });

  it("accepts the field only on ask (schema)", () => {
    const env = (body: unknown) => ({ v: 1, id: "i", analyst: "ada", token: "t", body });
    const cell = "0".repeat(64);
    expect(parseRequest(env({ op: "ask", plan: countPlan("0.1"), cell })).body).toEqual({ op: "ask", plan: countPlan("0.1"), cell });
    expect(parseRequest(env({ op: "ask", plan: countPlan("0.1") })).body).toEqual({ op: "ask", plan: countPlan("0.1") });
    expect(() => parseRequest(env({ op: "preview", plan: countPlan("0.1"), cell }))).toThrow(ProtocolError);
    for (const bad of ["abc", "A".repeat(64), "0".repeat(63) + "\n", 7, null, ["0".repeat(64)]]) {
      expect(() => parseRequest(env({ op: "ask", plan: countPlan("0.1"), cell: bad })), JSON.stringify(bad)).toThrow(/request\.body\.cell/);
    }
  });
});
