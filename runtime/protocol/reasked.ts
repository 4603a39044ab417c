/**
 * The curator's signed statement that a question was asked again from other code. A replay returns
 * the stored receipt unchanged (the chain cannot be rewritten), and that receipt names the code of
 * the first ask (`Receipt.cell`). When the same question comes again from a cell whose source digest
 * differs (a comment added, the ask moved into a new cell and re-run), the curator adds this
 * statement to the replay, so a notebook re-run honestly after such an edit still shows, under each
 * release, code that is known to have asked for it. The curator signs it (runtime/curator/receipts.ts)
 * and the audit verifies it (cli/audit/source-binding.ts) with the byte layout here.
 *
 * It names the receipt by hash, so it cannot be moved to another release, and the code by digest,
 * so it cannot be moved to another cell. Its `format` differs from a receipt's, so neither can be
 * passed off as the other.
 */
import { verify, type KeyObject } from "node:crypto";
import { canonicalJson } from "./canonical.js";
import { CELL_DIGEST_PATTERN } from "./cell-source.js";
import type { Reasked, Receipt } from "./messages.js";
import { keyIdOf, receiptHash } from "./receipts.js";

/** The bytes the signature covers: the canonical JSON of the statement without `sig`. */
export function reaskedSigningBytes(r: Reasked): Buffer {
  const { sig: _sig, ...unsigned } = r;
  return Buffer.from(canonicalJson(unsigned), "utf8");
}

/** Whether `r` is a good statement, by this key, that code with digest `cell` asked for the release of `receipt`. */
export function reaskedHolds(r: unknown, receipt: Receipt, cell: string, publicKey: KeyObject): boolean {
  if (r === null || typeof r !== "object") return false;
  const o = r as Record<string, unknown>;
  if (o.format !== "hush-reasked/1" || typeof o.receipt !== "string" || typeof o.cell !== "string" || typeof o.keyId !== "string" || typeof o.sig !== "string") {
    return false;
  }
  if (!CELL_DIGEST_PATTERN.test(o.cell) || o.cell !== cell || o.keyId !== keyIdOf(publicKey) || o.receipt !== receiptHash(receipt)) return false;
  const statement: Reasked = { format: "hush-reasked/1", receipt: o.receipt, cell: o.cell, keyId: o.keyId, sig: o.sig };
  try {
    return verify(null, reaskedSigningBytes(statement), publicKey, Buffer.from(statement.sig, "base64"));
  } catch {
    // A malformed signature is a statement that does not hold, not an error of the audit.
    return false;
  }
}
