/**
 * The digest that binds a release to the code of the notebook cell that asked for it. The kernel
 * computes it from the code it runs and sends it with the ask; the curator signs it in the receipt
 * (`Receipt.cell`); the audit recomputes it from the saved notebook. All three use this function,
 * so the definition cannot drift.
 *
 * Definition: sha256, as 64 lowercase hex digits, of the UTF-8 bytes of the cell's source as
 * nbformat stores it once its lines are joined (`"".join(cell.source)`), with every CRLF and lone
 * CR turned into LF. Nothing else is normalised: spacing inside a line can change a string
 * literal (a category value, a column name), so a spacing-only edit is an edit. Line endings are
 * the one exception because editors and version control rewrite them without a person's doing.
 */
import { createHash } from "node:crypto";

/** The shape of a cell digest on the wire and in a receipt. */
export const CELL_DIGEST_PATTERN = /^[0-9a-f]{64}$/;

export function cellSourceDigest(source: string): string {
  return createHash("sha256").update(source.replace(/\r\n?/g, "\n"), "utf8").digest("hex");
}
