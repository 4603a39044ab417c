/**
 * Receipt verification: pure crypto over the canonical JSON of a receipt. The curator signs with the
 * same byte layout (runtime/curator/receipts.ts); the notebook audit verifies with this file alone, so
 * nothing here may import the curator. Chains of receipts are checked by the audit (cli/audit/chain.ts).
 */
import { createHash, createPublicKey, verify, type KeyObject } from "node:crypto";
import { BadInputError } from "../errors.js";
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
