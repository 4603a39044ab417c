/**
 * The smallest HTML building blocks, with no dependencies: escaping and the outer box of every
 * hush view. Inline styles only (no scripts, no external resources), so outputs render the same
 * after a notebook is reopened untrusted. The classes are the kernel's own (the audit's allow-list,
 * cli/audit/html-text.ts KERNEL_CLASSES).
 */

export function esc(s: string): string {
  return s.replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;").replace(/"/g, "&quot;").replace(/'/g, "&#39;");
}

/** The kinds of view the kernel draws; each box has the class `hush-<kind>`. */
export type BoxKind = "release" | "preview" | "dataset" | "budget" | "ledger" | "loss" | "help" | "refusal";

/** The outer box of every hush view. */
export function box(inner: string, kind: BoxKind, extraStyle = ""): string {
  return `<div class="hush-${kind}" style="font-family:system-ui,-apple-system,'Segoe UI',sans-serif;font-size:13px;line-height:1.45;max-width:760px${extraStyle}">${inner}</div>`;
}

export const MUTED = "opacity:0.75";
