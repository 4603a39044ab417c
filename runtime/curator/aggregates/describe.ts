/**
 * describe: a summary of every public column in one release. Parts: the row count; for each
 * numeric column its mean, std and median; for each category or boolean column the count of every
 * declared value. The budget is split evenly across the parts (sequential composition, docs/methods.md
 * §1) and the split is stated in the notes. Date columns are not summarised. With `withClamped`,
 * the clamped shares of every numeric column (clamped.ts, docs/methods.md §21) are one more part.
 *
 * Rows use groupColumns ["value"]: key [null] for whole-dataset statistics, [declared value] for
 * the per-value counts of a category or boolean column (named in `column`).
 */
import { Rational } from "../../core/index.js";
import type { ReleaseRow } from "../../protocol/messages.js";
import type { DataEngine } from "../engines/types.js";
import { countPiece, meanPiece, spreadPiece } from "./additive.js";
import { clampedPiece } from "./clamped.js";
import type { Allocator } from "./budget.js";
import type { Cpu, Piece, Source } from "./common.js";
import { quantilePiece } from "./quantile.js";

export function describePiece(alloc: Allocator, src: Source, withClamped = false): Piece {
  const cols = [...src.t.columns.values()];
  const numeric = cols.filter((c) => c.policy.type === "integer" || c.policy.type === "number");
  const keyed = cols.filter((c) => c.policy.type === "category" || c.policy.type === "boolean");
  const skipped = cols.filter((c) => c.policy.type === "date").map((c) => c.policy.name);
  // Clamped shares (docs/methods.md §21), when asked and there is a numeric column: one more part.
  const clamped = withClamped && numeric.length > 0;
  const parts = 1 + 3 * numeric.length + keyed.length + (clamped ? 1 : 0);
  const share = Rational.of(1n, BigInt(parts));

  type Part = { piece: Piece; column: string | null; keyed: boolean };
  const list: Part[] = [{ piece: countPiece(alloc, src, [], share), column: null, keyed: false }];
  for (const c of numeric) {
    list.push({ piece: meanPiece(alloc, src, [], c, share), column: c.policy.name, keyed: false });
    list.push({ piece: spreadPiece(alloc, src, [], c, share, "std"), column: c.policy.name, keyed: false });
    list.push({ piece: quantilePiece(alloc, src, c, [0.5], share), column: c.policy.name, keyed: false });
  }
  for (const c of keyed) {
    list.push({ piece: countPiece(alloc, src, [{ column: c.policy.name }], share), column: c.policy.name, keyed: true });
  }
  // Its rows name their own column; like the whole-dataset parts they get key [null].
  if (clamped) list.push({ piece: clampedPiece(alloc, src, numeric, share), column: null, keyed: false });

  const notes = [
    `describe splits its budget evenly over ${parts} parts: the row count${numeric.length ? `, mean, std and median of ${numeric.map((c) => c.policy.name).join(", ")}` : ""}${keyed.length ? `, value counts of ${keyed.map((c) => c.policy.name).join(", ")}` : ""}${clamped ? ", clamped shares of the numeric columns" : ""} (each part gets 1/${parts}).`,
  ];
  if (skipped.length) notes.push(`Date columns are not summarised: ${skipped.join(", ")}.`);
  for (const p of list) for (const n of p.piece.notes) if (!notes.includes(n)) notes.push(n);

  return {
    mechanisms: list.flatMap((p) => p.piece.mechanisms),
    cost: list.reduce((s, p) => s.add(p.piece.cost), Rational.ZERO),
    halfWidths: list.flatMap((p) => p.piece.halfWidths.map((h) => (p.keyed ? { ...h, column: p.column } : h))),
    notes,
    previewNotes: [...new Set(list.flatMap((p) => p.piece.previewNotes ?? []))],
    methods: [...new Set(list.flatMap((p) => p.piece.methods))],
    size: list.reduce((n, p) => n + p.piece.size, 0),
    steps: list.reduce((n, p) => n + p.piece.steps, 0),
    async run(engine: DataEngine, cpu: Cpu): Promise<ReleaseRow[]> {
      const out: ReleaseRow[] = [];
      for (const p of list) {
        const rows = await p.piece.run(engine, cpu);
        for (const r of rows) {
          out.push(p.keyed ? { ...r, column: p.column } : { ...r, key: [null] });
        }
      }
      return out;
    },
  };
}
