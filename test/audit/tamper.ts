/**
 * Tamperings of an executed notebook, each the kind of edit a reviewer must catch. They work on any
 * notebook whose release outputs carry receipts, so the same corpus runs on a notebook signed in
 * the test and on one executed through the real kernel.
 */
import type { KeyObject } from "node:crypto";
import { sign } from "node:crypto";
import type { Notebook, NbOutput } from "../../cli/audit/notebook.js";
import { Rational } from "../../runtime/core/index.js";
import { formatWithError } from "../../runtime/protocol/format.js";
import { OUTPUT_METADATA_KEY, type OutputMetadata, type Receipt } from "../../runtime/protocol/messages.js";
import { GENESIS_PREV, keyIdOf, receiptHash, receiptSigningBytes } from "../../runtime/protocol/receipts.js";

export const clone = (nb: Notebook): Notebook => JSON.parse(JSON.stringify(nb)) as Notebook;

export interface Located {
  cell: number;
  output: NbOutput;
  meta: OutputMetadata;
}

/** Release outputs in notebook order. */
export function releasesOf(nb: Notebook): Located[] {
  const found: Located[] = [];
  nb.cells.forEach((c, cell) => {
    for (const output of c.outputs ?? []) {
      const meta = output.metadata?.[OUTPUT_METADATA_KEY] as OutputMetadata | undefined;
      if (meta !== undefined) found.push({ cell, output, meta });
    }
  });
  return found;
}

/** The release with this seq (first showing); throws if absent so a test cannot pass vacuously. */
export function releaseWithSeq(nb: Notebook, seq: number): Located {
  return allWithSeq(nb, seq)[0];
}

/** Every showing of release `seq` (a repeated question shows the same receipt again). */
export function allWithSeq(nb: Notebook, seq: number): Located[] {
  const found = releasesOf(nb).filter((x) => x.meta.receipt.seq === seq);
  if (found.length === 0) throw new Error(`test notebook has no release with seq ${seq}`);
  return found;
}

function textOf(o: NbOutput): string {
  const t = o.data?.["text/plain"];
  return Array.isArray(t) ? t.join("") : String(t ?? "");
}

/** Changes the first shown number of release `seq` in every text view, leaving the receipt alone. */
export function editShownValue(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  const row = rel.meta.receipt.result.find((r) => r[3] !== null)!;
  // The edit keeps the error bar and changes the figure: the kind of change a reader would not notice.
  const shown = formatWithError(row[3], row[4], row[5]);
  const [value, ...rest] = shown.split(" ");
  const edited = [value.startsWith("9") ? `1${value}` : `9${value}`, ...rest].join(" ");
  if (!textOf(rel.output).includes(shown)) throw new Error(`release seq ${seq} does not show "${shown}"; cannot edit it`);
  for (const mime of Object.keys(rel.output.data ?? {})) {
    const v = rel.output.data![mime];
    if (typeof v === "string") rel.output.data![mime] = v.split(shown).join(edited);
    else if (Array.isArray(v)) rel.output.data![mime] = (v as string[]).map((s) => s.split(shown).join(edited));
  }
  return out;
}

/** Removes every cell showing release `seq`. */
export function deleteReleaseCell(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  const cells = new Set(allWithSeq(out, seq).map((x) => x.cell));
  out.cells = out.cells.filter((_, i) => !cells.has(i));
  return out;
}

/** Swaps the cells holding releases `a` and `b`. */
export function swapReleaseCells(nb: Notebook, a: number, b: number): Notebook {
  const out = clone(nb);
  const ia = releaseWithSeq(out, a).cell;
  const ib = releaseWithSeq(out, b).cell;
  [out.cells[ia], out.cells[ib]] = [out.cells[ib], out.cells[ia]];
  return out;
}

/** Puts `foreign` (a receipt of another analyst) in place of release `seq`'s receipt. */
export function substituteReceipt(nb: Notebook, seq: number, foreign: Receipt): Notebook {
  const out = clone(nb);
  const rel = releaseWithSeq(out, seq);
  rel.meta.receipt = JSON.parse(JSON.stringify(foreign)) as Receipt;
  return out;
}

/** Flips one byte of release `seq`'s signature. */
export function forgeSignature(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  for (const { meta } of allWithSeq(out, seq)) {
    const bytes = Buffer.from(meta.receipt.sig, "base64");
    bytes[0] ^= 0x01;
    meta.receipt.sig = bytes.toString("base64");
  }
  return out;
}

/** Lowers release `seq`'s cost to a tenth (what someone hiding spend would do); the signature is left as it was. */
export function changeCost(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  for (const { meta } of allWithSeq(out, seq)) meta.receipt.cost = Rational.parse(meta.receipt.cost).div(Rational.of(10)).toString();
  return out;
}

/**
 * Re-signs every receipt with another Ed25519 key, re-linking the chain: everything is consistent
 * except that the key is not the curator's.
 */
export function replaceKey(nb: Notebook, other: { privateKey: KeyObject; publicKey: KeyObject }): Notebook {
  const out = clone(nb);
  const located = releasesOf(out);
  const bySeq = new Map<number, Receipt>();
  for (const { meta } of located) bySeq.set(meta.receipt.seq, meta.receipt);
  let prev = GENESIS_PREV;
  const resigned = new Map<number, Receipt>();
  for (const seq of [...bySeq.keys()].sort((a, b) => a - b)) {
    const r: Receipt = { ...bySeq.get(seq)!, prev, keyId: keyIdOf(other.publicKey), sig: "" };
    r.sig = sign(null, receiptSigningBytes(r), other.privateKey).toString("base64");
    resigned.set(seq, r);
    prev = receiptHash(r);
  }
  for (const { meta } of located) meta.receipt = { ...resigned.get(meta.receipt.seq)! };
  return out;
}

/** Drops the receipt from release `seq`'s output(s), leaving the shown text: a release without a receipt. */
export function stripReceipt(nb: Notebook, seq: number): Notebook {
  const out = clone(nb);
  for (const { output } of allWithSeq(out, seq)) delete output.metadata![OUTPUT_METADATA_KEY];
  return out;
}
