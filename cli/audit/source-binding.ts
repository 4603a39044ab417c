/**
 * Does each release sit under the code that made it? A receipt signs the digest of the source of
 * the cell that asked (`Receipt.cell`, runtime/protocol/cell-source.ts). The audit recomputes the
 * digest of the cell that shows the release and compares.
 *
 * The rule: a release must be shown in the cell whose code asked for it, with that code unchanged.
 * - Same digest: fine. Re-running unchanged code passes, also when the curator answered from its
 *   ledger (a replay carries the first receipt, whose digest is the same code's).
 * - The digest of another cell of the notebook: the code was moved, or the release was kept in a
 *   variable and displayed in a later cell. Both are reported (a reader takes the code above an
 *   output for the code that made it), worded without accusing, naming the cell whose code asked.
 * - Another digest, but the output carries the curator's signed statement that this cell's code
 *   asked the same question again (`reasked`, runtime/protocol/reasked.ts): fine. This is the
 *   honest re-run after an edit that left the question alone (a comment added): the replay returns
 *   the first receipt, which names the first code, and the statement names this code.
 * - No cell's digest: the code was changed after it ran. (A replay from an older curator, without
 *   the statement, lands here too: the wording says so and how to fix it.)
 * - No digest at all: the release was asked outside a hush notebook kernel (a script using the
 *   client directly), so nothing ties it to the code shown, unless the curator's statement says
 *   this cell's code asked for it again.
 *
 * What this cannot see: the digest is computed on the notebook side, so a modified kernel can claim
 * any code. It stops editing after the run, not a student who rewrites the kernel (README).
 */
import type { KeyObject } from "node:crypto";
import { cellSourceDigest, CELL_DIGEST_PATTERN } from "../../runtime/protocol/cell-source.js";
import { OUTPUT_METADATA_KEY, type Receipt } from "../../runtime/protocol/messages.js";
import { reaskedHolds } from "../../runtime/protocol/reasked.js";
import type { Finding } from "./findings.js";
import type { FoundRelease, NbCell, Notebook } from "./notebook.js";

/** The cell's source joined as nbformat stores it; a hostile non-text source reads as empty. */
function sourceOf(cell: NbCell): string {
  const s: unknown = cell.source;
  if (typeof s === "string") return s;
  if (Array.isArray(s) && s.every((x) => typeof x === "string")) return s.join("");
  return "";
}

type Where = (rel: { cell: number; executionCount: number | null }) => string;

/** The curator's statement on this output holds for this receipt and this code; hostile JSON is a statement that does not hold. */
function reaskedHere(rel: FoundRelease, cell: string, publicKey: KeyObject): boolean {
  // Read from the output itself: notebook.ts keeps only the receipt fields of the metadata.
  const meta = rel.out.metadata?.[OUTPUT_METADATA_KEY] as { reasked?: unknown } | undefined;
  if (meta?.reasked === undefined) return false;
  try {
    return reaskedHolds(meta.reasked, rel.meta.receipt as Receipt, cell, publicKey);
  } catch {
    return false;
  }
}

export function sourceBindingFindings(nb: Notebook, releases: FoundRelease[], publicKey: KeyObject, at: Where): Finding[] {
  const findings: Finding[] = [];
  // digest -> first code cell with that source, computed once: the notebook is already in memory
  // and each cell is hashed once, so the work is linear in its size.
  let byDigest: Map<string, number> | null = null;
  const cellWith = (digest: string): number | undefined => {
    if (byDigest === null) {
      byDigest = new Map();
      nb.cells.forEach((c, i) => {
        if (c.cell_type !== "code") return;
        const d = cellSourceDigest(sourceOf(c));
        if (!byDigest!.has(d)) byDigest!.set(d, i);
      });
    }
    return byDigest.get(digest);
  };
  for (const rel of releases) {
    const r: unknown = rel.meta.receipt;
    // Receipts that are not objects are reported as malformed by the signature check.
    if (r === null || typeof r !== "object") continue;
    const { cell, seq } = r as { cell?: unknown; seq?: unknown };
    const which = typeof seq === "number" ? `receipt seq ${seq}` : "its receipt";
    // A release is always shown in a cell (notebook.ts finds them in code cells).
    const hereDigest = cellSourceDigest(sourceOf(nb.cells[rel.cell]));
    if (cell === hereDigest) continue;
    // The curator's statement that this code asked again also covers a release first asked with no code.
    if (reaskedHere(rel, hereDigest, publicKey)) continue;
    if (cell === undefined) {
      findings.push({
        cell: rel.cell,
        kind: "not-bound",
        message: `${at(rel)}: this release is not bound to a cell: ${which} names no code, so it was asked from outside a hush notebook kernel (for example by a script using the client) and nothing shows it was made by the code above it`,
      });
      continue;
    }
    if (typeof cell !== "string" || !CELL_DIGEST_PATTERN.test(cell)) {
      findings.push({ cell: rel.cell, kind: "code-mismatch", message: `${at(rel)}: ${which} names its code with an unreadable digest` });
      continue;
    }
    const other = cellWith(cell);
    if (other !== undefined) {
      const there = { cell: other, executionCount: typeof nb.cells[other].execution_count === "number" ? nb.cells[other].execution_count! : null };
      findings.push({
        cell: rel.cell,
        kind: "code-mismatch",
        message: `${at(rel)}: this release was made by the code of ${at(there)}, not by the code of this cell: the code was moved, or the release was kept and shown here; show each release in the cell that asks for it (${which})`,
      });
      continue;
    }
    findings.push({
      cell: rel.cell,
      kind: "code-mismatch",
      message:
        `${at(rel)}: the code of this cell is not the code that made this release (${which}): it was changed after the release was made (any edit counts, even spacing). ` +
        "If the cell was run again after the change and asked the same question, the curator returned the first release, which names the first code, without its statement that this code asked again: restore that code, or run the cell again",
    });
  }
  return findings;
}
