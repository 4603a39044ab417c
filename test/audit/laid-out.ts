/** A notebook laid out as the kernel leaves it after runs and re-runs: one release cell per entry. */
import type { NbCell, Notebook } from "../../cli/audit/notebook.js";
import type { Receipt } from "../../runtime/protocol/messages.js";
import { releaseOutput, releaseSource } from "./signed-notebook.js";

/** One release cell as the notebook shows it: the receipt of its last run (a replay shows an earlier one), and its In [n]. */
export interface Shown {
  r: Receipt;
  replay?: boolean;
  n: number;
}

export function notebookOf(cells: Shown[]): Notebook {
  const code: NbCell[] = cells.map((c) => ({
    cell_type: "code",
    // The code that asked for the receipt shown (receipts sign it): a cell re-run after an edit
    // shows the new code with its new receipt; a replay shows the code of the first ask.
    source: releaseSource(c.r.seq),
    execution_count: c.n,
    outputs: [releaseOutput(c.r, c.replay === true)],
    metadata: {},
  }));
  return { nbformat: 4, nbformat_minor: 5, metadata: {}, cells: [{ cell_type: "markdown", source: "# Assignment", metadata: {} }, ...code] };
}
