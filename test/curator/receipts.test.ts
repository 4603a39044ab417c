import { createPrivateKey, generateKeyPairSync, sign, createHash } from "node:crypto";
import { mkdtempSync, readFileSync, statSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import type { Receipt } from "../../runtime/protocol/messages.js";
import {
  GENESIS_PREV,
  keyIdOf,
  loadPublicKey,
  receiptHash,
  receiptSigningBytes,
  verifyReceipt,
} from "../../runtime/protocol/receipts.js";
import { checkReceiptChains } from "../../cli/audit/chain.js";
import { generateCuratorKey, loadCuratorKey, type CuratorKey } from "../../runtime/curator/keys.js";
import { signReceipt, type UnsignedReceipt } from "../../runtime/curator/receipts.js";
import { createPublicKey } from "node:crypto";

const dir = mkdtempSync(join(tmpdir(), "hush-receipts-"));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

function freshKey(): CuratorKey {
  const { privateKey, publicKey } = generateKeyPairSync("ed25519");
  return { privateKey, publicKey, publicKeyB64: publicKey.export({ type: "spki", format: "der" }).toString("base64"), keyId: keyIdOf(publicKey) };
}

function fields(seq: number, cost: string, total: string, prev: string, cap = "1"): UnsignedReceipt {
  return {
    analyst: "ada",
    dataset: "visits",
    population: "patients",
    seq,
    digest: "ab".repeat(32),
    unit: "epsilon",
    cost,
    total,
    cap,
    result: [[[], "count", null, "41", "37", "45"]],
    mechanisms: [{ target: "count", family: "discrete-laplace", scale: "10", sensitivity: "1", step: "1", cost }],
    issuedAt: "2026-01-01T00:00:00.000Z",
    prev,
  };
}

/** Signs a chain with the given costs, each total the exact running sum. */
function chain(key: CuratorKey, costs: string[], totals: string[], cap = "1"): Receipt[] {
  const out: Receipt[] = [];
  costs.forEach((c, i) => {
    out.push(signReceipt(fields(i + 1, c, totals[i], i === 0 ? GENESIS_PREV : receiptHash(out[i - 1]), cap), key));
  });
  return out;
}

describe("Ed25519 against RFC 8032", () => {
  // RFC 8032 section 7.1, TEST 1: secret key, public key and the signature of the empty message.
  const seed = "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60";
  const pub = "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a";
  const sig =
    "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b";
  // PKCS#8 and SPKI DER prefixes for Ed25519 (RFC 8410 section 7 / 10.3).
  const priv = createPrivateKey({ key: Buffer.from(`302e020100300506032b657004220420${seed}`, "hex"), format: "der", type: "pkcs8" });
  const spkiB64 = Buffer.from(`302a300506032b6570032100${pub}`, "hex").toString("base64");

  it("the node:crypto signing used for receipts is pure Ed25519", () => {
    expect(sign(null, Buffer.alloc(0), priv).toString("hex")).toBe(sig);
  });

  it("loadPublicKey reads the base64 SPKI text and the PEM form of the same key", () => {
    const k = loadPublicKey(spkiB64);
    expect(k.export({ type: "spki", format: "der" }).toString("hex")).toBe(`302a300506032b6570032100${pub}`);
    const pem = createPublicKey(priv).export({ type: "spki", format: "pem" }).toString();
    expect(keyIdOf(loadPublicKey(pem))).toBe(keyIdOf(k));
    // keyId: first 16 hex of sha256 over the SPKI DER (messages.ts Receipt.keyId).
    expect(keyIdOf(k)).toBe(createHash("sha256").update(Buffer.from(`302a300506032b6570032100${pub}`, "hex")).digest("hex").slice(0, 16));
  });

  it("a receipt signed with the RFC key verifies against its public key", () => {
    const key: CuratorKey = { privateKey: priv, publicKey: loadPublicKey(spkiB64), publicKeyB64: spkiB64, keyId: keyIdOf(loadPublicKey(spkiB64)) };
    const r = signReceipt(fields(1, "1/10", "1/10", GENESIS_PREV), key);
    expect(verifyReceipt(r, loadPublicKey(spkiB64))).toEqual({ ok: true });
  });
});

describe("receipt bytes", () => {
  it("signs the canonical JSON without sig: sorted keys, no spaces", () => {
    const key = freshKey();
    const r = signReceipt(fields(1, "1/10", "1/10", GENESIS_PREV), key);
    const text = receiptSigningBytes(r).toString("utf8");
    expect(text.startsWith('{"analyst":"ada","cap":"1","cost":"1/10","dataset":"visits","digest":"')).toBe(true);
    expect(text).not.toContain('"sig"');
    expect(text).not.toContain(" ");
    expect(receiptHash(r)).toMatch(/^[0-9a-f]{64}$/);
    expect(receiptHash({ ...r, sig: "x" })).not.toBe(receiptHash(r));
  });

  it("refuses tampered values, tampered signatures and the wrong key", () => {
    const key = freshKey();
    const r = signReceipt(fields(1, "1/10", "1/10", GENESIS_PREV), key);
    expect(verifyReceipt(r, key.publicKey).ok).toBe(true);
    const changed: Receipt = { ...r, result: [[[], "count", null, "42", "37", "45"]] };
    expect(verifyReceipt(changed, key.publicKey)).toEqual({ ok: false, problem: "signature does not match the receipt's contents" });
    const badSig = { ...r, sig: Buffer.alloc(64).toString("base64") };
    expect(verifyReceipt(badSig, key.publicKey).ok).toBe(false);
    const other = freshKey();
    expect(verifyReceipt(r, other.publicKey).problem).toMatch(/signed by key/);
    expect(verifyReceipt({ ...r, seq: "1" } as unknown as Receipt, key.publicKey).problem).toMatch(/not a hush receipt/);
  });

  it("loadPublicKey refuses garbage and non-Ed25519 keys", () => {
    expect(() => loadPublicKey("not a key!")).toThrow(/not a PEM or base64 SPKI/);
    const rsa = generateKeyPairSync("rsa", { modulusLength: 1024 }).publicKey.export({ type: "spki", format: "pem" }).toString();
    expect(() => loadPublicKey(rsa)).toThrow(/expected an Ed25519 key/);
  });
});

describe("checkReceiptChains (the audit's chain checks over any set of receipts)", () => {
  const key = freshKey();

  it("accepts a chain whose totals are exact running sums (docs/methods.md [C1.4c]: ten 1/10 make 1)", () => {
    const costs = Array.from({ length: 10 }, () => "0.1");
    const totals = Array.from({ length: 10 }, (_, i) => `${i + 1}/10`);
    const rs = chain(key, costs, totals);
    expect(checkReceiptChains(rs, key.publicKey)).toEqual([]);
    // The binary64 running sum would be 0.9999999999999999 ([C1.4b]); the exact total equals the cap.
    expect(rs[9].total).toBe("10/10");
  });

  it("finds a gap, a broken prev link, a wrong total and a total over the cap", () => {
    const rs = chain(key, ["1/2", "1/4", "1/4"], ["1/2", "3/4", "1"]);
    expect(checkReceiptChains([rs[0], rs[2]], key.publicKey).map((f) => f.kind)).toEqual(["gap"]);
    expect(checkReceiptChains([rs[0], rs[2]], key.publicKey)[0].message).toMatch(/release 2 is missing/);

    const wrongPrev = signReceipt(fields(2, "1/4", "3/4", "00".repeat(32)), key);
    expect(checkReceiptChains([rs[0], wrongPrev], key.publicKey).map((f) => f.kind)).toEqual(["prev-link"]);

    const wrongTotal = signReceipt(fields(2, "1/4", "0.8", receiptHash(rs[0])), key);
    expect(checkReceiptChains([rs[0], wrongTotal], key.publicKey)[0]).toMatchObject({ kind: "total", message: expect.stringMatching(/not the previous total/) });

    const over = chain(key, ["1/2", "3/4"], ["1/2", "5/4"]);
    expect(checkReceiptChains(over, key.publicKey)[0]).toMatchObject({ kind: "cap", message: expect.stringMatching(/exceeds the cap/) });

    const unsorted = [rs[2], rs[0], rs[1]];
    expect(checkReceiptChains(unsorted, key.publicKey)).toEqual([]);
  });

  it("counts a repeated receipt once and flags two different receipts with one seq", () => {
    const rs = chain(key, ["1/2", "1/4"], ["1/2", "3/4"]);
    expect(checkReceiptChains([...rs, rs[1]], key.publicKey)).toEqual([]);
    const twin = signReceipt({ ...fields(2, "1/4", "3/4", receiptHash(rs[0])), issuedAt: "2026-02-02T00:00:00.000Z" }, key);
    expect(checkReceiptChains([...rs, twin], key.publicKey)[0]).toMatchObject({ kind: "duplicate-seq", message: expect.stringMatching(/two different receipts/) });
  });

  it("keeps one chain per (analyst, population), across the population's datasets", () => {
    const a = chain(key, ["1/2"], ["1/2"]);
    const b = [signReceipt({ ...fields(1, "1/3", "1/3", GENESIS_PREV), analyst: "ben" }, key)];
    expect(checkReceiptChains([...a, ...b], key.publicKey)).toEqual([]);
    const otherPeople = [signReceipt({ ...fields(1, "1/3", "1/3", GENESIS_PREV), population: "others" }, key)];
    expect(checkReceiptChains([...a, ...otherPeople], key.publicKey)).toEqual([]);
    // A second dataset of the same population continues ada's chain: seq 1 again is a duplicate.
    const sameSeq = [signReceipt({ ...fields(1, "1/3", "1/3", GENESIS_PREV), dataset: "visits-copy" }, key)];
    expect(checkReceiptChains([...a, ...sameSeq], key.publicKey).map((f) => f.kind)).toEqual(["duplicate-seq"]);
    const next = [signReceipt({ ...fields(2, "1/4", "3/4", receiptHash(a[0])), dataset: "visits-copy" }, key)];
    expect(checkReceiptChains([...a, ...next], key.publicKey)).toEqual([]);
  });

  it("reports a receipt signed by another key, an edited one and a malformed one", () => {
    const rs = chain(key, ["1/2"], ["1/2"]);
    const other = freshKey();
    expect(checkReceiptChains(rs, other.publicKey).map((f) => f.kind)).toEqual(["key"]);
    expect(checkReceiptChains([{ ...rs[0], cost: "1/4", total: "1/4" }], key.publicKey).map((f) => f.kind)).toEqual(["signature"]);
    expect(checkReceiptChains([{ seq: "one" } as unknown as Receipt], key.publicKey).map((f) => f.kind)).toEqual(["malformed"]);
  });
});

describe("curator keys", () => {
  it("writes a 0600 PKCS#8 key and its public PEM, refuses to overwrite, loads it back", () => {
    const path = join(dir, "keys", "curator.key");
    const { publicKeyB64 } = generateCuratorKey(path);
    expect(statSync(path).mode & 0o777).toBe(0o600);
    expect(readFileSync(path, "utf8")).toMatch(/BEGIN PRIVATE KEY/);
    const loaded = loadCuratorKey(path);
    expect(loaded.publicKeyB64).toBe(publicKeyB64);
    expect(keyIdOf(loadPublicKey(readFileSync(`${path}.pub`, "utf8")))).toBe(loaded.keyId);
    expect(() => generateCuratorKey(path)).toThrow(/already exists/);
  });
});
