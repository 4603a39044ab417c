/**
 * Receipt signing. The byte layout lives in runtime/protocol/receipts.ts so that signing and the
 * notebook audit's verification can never drift apart.
 */
import { sign } from "node:crypto";
import type { MechanismRecord, Reasked, Receipt, ReleaseRow } from "../protocol/messages.js";
import { reaskedSigningBytes } from "../protocol/reasked.js";
import { receiptHash, receiptSigningBytes } from "../protocol/receipts.js";
import type { CuratorKey } from "./keys.js";

export type UnsignedReceipt = Omit<Receipt, "sig" | "keyId" | "format">;

/** The released rows in the compact form a receipt signs: [key, stat, column, value, low, high]. */
export function receiptResult(rows: ReleaseRow[]): Receipt["result"] {
  return rows.map((r) => [[...r.key], r.stat, r.column, r.value, r.low, r.high]);
}

export function signReceipt(fields: UnsignedReceipt, key: CuratorKey): Receipt {
  const body: Receipt = { format: "hush-receipt/1", ...fields, keyId: key.keyId, sig: "" };
  const sig = sign(null, receiptSigningBytes(body), key.privateKey).toString("base64");
  return { ...body, sig };
}

/** The statement that code with digest `cell` asked again for the release of `receipt` (protocol/reasked.ts). */
export function signReasked(receipt: Receipt, cell: string, key: CuratorKey): Reasked {
  const body: Reasked = { format: "hush-reasked/1", receipt: receiptHash(receipt), cell, keyId: key.keyId, sig: "" };
  return { ...body, sig: sign(null, reaskedSigningBytes(body), key.privateKey).toString("base64") };
}

/** Mechanism records are copied so that later mutation of a release cannot change what was signed. */
export function copyMechanisms(ms: MechanismRecord[]): MechanismRecord[] {
  return ms.map((m) => ({ ...m }));
}
