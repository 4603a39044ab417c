/**
 * A refusal (or another failure the curator or the cell API reported) as a cell output: what
 * happened in words, where in the user's cell, and the curator's message with its amounts in
 * decimals. No stack frame: the frames are ours, not the analyst's. Depends on nothing but the
 * markup helpers, so the kernel can draw it whatever else failed to load.
 */
import { MUTED, box, esc } from "./markup.js";

export interface RefusalView {
  /** The error class's name ("OverCapError"). */
  name: string;
  /** The HushError kind ("over-cap", "bad-input", ...). */
  kind: string;
  message: string;
  /** "In [3], line 2", or null when the cell's line is not known. */
  where: string | null;
}

const TITLES: Record<string, string> = {
  "over-cap": "refused: over the cap",
  "bad-input": "refused: the ask was not accepted",
  "unknown-dataset": "refused: unknown dataset",
  unauthorized: "refused: not signed in",
  busy: "refused for now: the curator is busy, try again shortly",
  policy: "the steward's policy has a problem",
  protocol: "the curator's reply could not be read",
  unreachable: "the curator could not be reached",
  internal: "the curator failed",
};

/** Kinds after which nothing can have been spent (the curator refused before any work). */
export const REFUSAL_KINDS: ReadonlySet<string> = new Set(["over-cap", "bad-input", "unknown-dataset", "unauthorized", "busy", "policy"]);

export function refusalTitle(kind: string): string {
  return TITLES[kind] ?? "failed";
}

/** text/plain: the title and where, then the message indented. */
export function refusalText(r: RefusalView): string {
  const lines = r.message.split("\n").map((l) => `  ${l}`);
  return [`${refusalTitle(r.kind)}${r.where ? ` (${r.where})` : ""}`, ...lines].join("\n");
}

export function refusalHtml(r: RefusalView): string {
  const lines = r.message
    .split("\n")
    .map((l) => `<div>${esc(l)}</div>`)
    .join("");
  return box(
    `<div><b>${esc(refusalTitle(r.kind))}</b>${r.where ? ` <span style="${MUTED}">(${esc(r.where)})</span>` : ""}</div>${lines}`,
    "refusal",
    ";border-left:3px solid #c62828;padding-left:8px",
  );
}

export function refusalBundle(r: RefusalView): { data: Record<string, unknown>; metadata: Record<string, unknown> } {
  return { data: { "text/plain": refusalText(r), "text/html": refusalHtml(r) }, metadata: {} };
}
