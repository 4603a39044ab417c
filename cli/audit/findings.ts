/** What the audit reports: one finding per problem, each located at a cell when it has one. */
export type FindingKind =
  | "malformed" // not a receipt at all
  | "signature" // signature does not match the contents
  | "key" // signed by another key
  | "mixed" // another analyst or population
  | "owner" // not the analyst or dataset the reviewer expected (--analyst, --dataset)
  | "label" // output metadata names another dataset than its receipt
  | "no-receipt" // looks like a release, has no receipt
  | "shown-value" // the text shown is not the signed value, or cannot be read as a person sees it
  | "bundle-value" // a structured bundle disagrees with the signed result
  | "spend-order" // a receipt shown below one with a later seq (a note unless --strict)
  | "superseded" // seqs the notebook does not show, spend vouched by the totals (a note unless --strict)
  | "code-mismatch" // the cell showing a release does not hold the code that asked for it (source-binding.ts)
  | "not-bound" // a receipt that names no code: asked from outside a notebook kernel
  | "duplicate-seq" // two different receipts with one seq
  | "chain-start" // a set of receipts (a ledger's) lacks seq 1
  | "gap" // a set of receipts (a ledger's) lacks seqs
  | "prev-link" // prev is not the hash of the receipt before
  | "total" // running total does not add up
  | "cost" // cost not a positive exact rational
  | "cap" // over the cap, or the cap changed
  | "epsilon-statement" // a zCDP release states an epsilon at delta its receipts do not give (docs/methods.md §22)
  | "epsilon-statement-unverified" // claims plain composition over seqs the notebook does not show (a note)
  | "copied" // class audit: the same signed receipt in two students' notebooks
  | "roster"; // class audit: a notebook no roster student matches, or a student with no notebook

export interface Finding {
  /** Index of the cell in the notebook's `cells` list (0-based), or null for whole-notebook findings. */
  cell: number | null;
  kind: FindingKind;
  message: string;
}
