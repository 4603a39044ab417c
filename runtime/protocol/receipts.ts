/**
 * Receipt verification: pure crypto over the canonical JSON of a receipt. The curator signs with the
 * same byte layout (runtime/curator/receipts.ts); the notebook audit verifies with this file alone, so
 * nothing here may import the curator.
 */
import { createHash, createPublicKey, verify, type KeyObject } from "node:crypto";
import { BadInputError } from "../errors.js";
import { Rational } from "../core/index.js";
import { canonicalJson } from "./canonical.js";
import type { Receipt } from "./messages.js";

/** `prev` of the first receipt in a chain. */
export const GENESIS_PREV = "0".repeat(64);

/** The bytes the signature covers: the canonical JSON of the receipt without `sig`. */
export function receiptSigningBytes(r: Receipt): Buffer {
  const { sig: _sig, ...unsigned } = r;
  return Buffer.from(canonicalJson(unsigned), "utf8");
}

/** sha256 hex of the canonical JSON of the whole receipt (with `sig`): the `prev` of the next one. */
export function receiptHash(r: Receipt): string {
  return createHash("sha256").update(canonicalJson(r)).digest("hex");
}

/** First 16 hex chars of sha256 over the SPKI DER encoding of the public key. */
export function keyIdOf(publicKey: KeyObject): string {
  const der = publicKey.export({ type: "spki", format: "der" });
  return createHash("sha256").update(der).digest("hex").slice(0, 16);
}

/** The base64 SPKI DER text the curator prints and the catalogue sends. */
export function publicKeyB64(publicKey: KeyObject): string {
  return publicKey.export({ type: "spki", format: "der" }).toString("base64");
}

/** Accepts a PEM public key (SPKI) or the bare base64 SPKI DER string; only Ed25519 keys. */
export function loadPublicKey(text: string): KeyObject {
  const trimmed = text.trim();
  let key: KeyObject;
  try {
    if (trimmed.includes("-----BEGIN")) {
      key = createPublicKey({ key: trimmed, format: "pem" });
    } else {
      if (!/^[A-Za-z0-9+/=\s]+$/.test(trimmed)) throw new Error("not base64");
      key = createPublicKey({ key: Buffer.from(trimmed, "base64"), format: "der", type: "spki" });
    }
  } catch (e: unknown) {
    throw new BadInputError("curator public key: not a PEM or base64 SPKI public key", { cause: e });
  }
  if (key.asymmetricKeyType !== "ed25519") {
    throw new BadInputError(`curator public key: expected an Ed25519 key, got ${key.asymmetricKeyType ?? "unknown"}`);
  }
  return key;
}

function hasReceiptShape(r: unknown): r is Receipt {
  if (typeof r !== "object" || r === null) return false;
  const o = r as Record<string, unknown>;
  return (
    o.format === "hush-receipt/1" &&
    typeof o.analyst === "string" &&
    typeof o.dataset === "string" &&
    typeof o.population === "string" &&
    typeof o.seq === "number" &&
    typeof o.digest === "string" &&
    (o.unit === "epsilon" || o.unit === "rho") &&
    typeof o.cost === "string" &&
    typeof o.total === "string" &&
    typeof o.cap === "string" &&
    Array.isArray(o.result) &&
    Array.isArray(o.mechanisms) &&
    typeof o.issuedAt === "string" &&
    typeof o.prev === "string" &&
    typeof o.keyId === "string" &&
    typeof o.sig === "string"
  );
}

/** Checks the shape, the key id and the Ed25519 signature of one receipt. */
export function verifyReceipt(r: Receipt, publicKey: KeyObject): { ok: boolean; problem?: string } {
  if (!hasReceiptShape(r)) return { ok: false, problem: "not a hush receipt (missing or mistyped fields)" };
  const expectedKeyId = keyIdOf(publicKey);
  if (r.keyId !== expectedKeyId) {
    return { ok: false, problem: `signed by key ${r.keyId}, but the given curator key is ${expectedKeyId}` };
  }
  let good: boolean;
  try {
    good = verify(null, receiptSigningBytes(r), publicKey, Buffer.from(r.sig, "base64"));
  } catch {
    good = false;
  }
  return good ? { ok: true } : { ok: false, problem: "signature does not match the receipt's contents" };
}

function parseAmount(s: string): Rational | null {
  try {
    return Rational.parse(s);
  } catch {
    return null;
  }
}

/**
 * Checks a set of receipts as hash chains, one chain per (analyst, population): every signature, seq
 * consecutive from 1, each `prev` the hash of the receipt before, each total the previous total plus
 * this cost in exact rationals, and every total within the cap. The same receipt appearing twice (a
 * replayed release shown in two cells) counts once.
 */
export function verifyChain(
  rs: Receipt[],
  publicKey: KeyObject,
): { ok: boolean; problems: { seq: number; problem: string }[] } {
  const problems: { seq: number; problem: string }[] = [];
  const chains = new Map<string, Receipt[]>();
  for (const r of rs) {
    const check = verifyReceipt(r, publicKey);
    if (!check.ok) {
      problems.push({ seq: typeof r?.seq === "number" ? r.seq : 0, problem: check.problem ?? "invalid" });
      continue;
    }
    const key = canonicalJson([r.analyst, r.population]);
    const list = chains.get(key) ?? [];
    list.push(r);
    chains.set(key, list);
  }
  for (const list of chains.values()) {
    const bySeq = new Map<number, Receipt>();
    for (const r of list) {
      const seen = bySeq.get(r.seq);
      if (seen === undefined) bySeq.set(r.seq, r);
      else if (receiptHash(seen) !== receiptHash(r)) {
        problems.push({ seq: r.seq, problem: `two different receipts with seq ${r.seq} for ${r.analyst}/${r.population}` });
      }
    }
    const ordered = [...bySeq.values()].sort((a, b) => a.seq - b.seq);
    let prev: Receipt | null = null;
    let prevTotal: Rational = Rational.ZERO;
    for (const r of ordered) {
      const where = `${r.analyst}/${r.population} seq ${r.seq}`;
      const expectedSeq = prev === null ? 1 : prev.seq + 1;
      if (r.seq !== expectedSeq) {
        problems.push({ seq: r.seq, problem: `${where}: expected seq ${expectedSeq} (receipts missing from the chain)` });
      }
      const expectedPrev = prev === null ? (r.seq === 1 ? GENESIS_PREV : null) : receiptHash(prev);
      if (expectedPrev !== null && r.prev !== expectedPrev && r.seq === expectedSeq) {
        problems.push({ seq: r.seq, problem: `${where}: prev does not match the hash of the receipt before` });
      }
      const cost = parseAmount(r.cost);
      const total = parseAmount(r.total);
      const cap = parseAmount(r.cap);
      if (cost === null || total === null || cap === null) {
        problems.push({ seq: r.seq, problem: `${where}: cost, total or cap is not an exact rational` });
        prev = r;
        if (total !== null) prevTotal = total;
        continue;
      }
      if (cost.sign() <= 0) problems.push({ seq: r.seq, problem: `${where}: cost ${r.cost} is not positive` });
      // Only a link to the receipt directly before lets us check the running total exactly.
      if (r.seq === expectedSeq && !prevTotal.add(cost).eq(total)) {
        problems.push({
          seq: r.seq,
          problem: `${where}: total ${r.total} is not the previous total ${prevTotal.toString()} plus cost ${r.cost}`,
        });
      }
      if (total.gt(cap)) problems.push({ seq: r.seq, problem: `${where}: total ${r.total} exceeds the cap ${r.cap}` });
      prev = r;
      prevTotal = total;
    }
  }
  return { ok: problems.length === 0, problems };
}
