/**
 * `hush run NOTEBOOK [-o OUT] [--keep-going]`: executes a notebook headlessly through the hush
 * kernel over the real Jupyter protocol (kernel/client), one progress line per cell, and writes it
 * back as nbformat 4 with outputs and execution counts. Stops at the first failing cell unless
 * --keep-going; cells after a stop keep no outputs, as in JupyterLab's "run all".
 */
import { writeFileSync } from "node:fs";
import { basename, dirname, extname, join, resolve } from "node:path";
import { KernelProcess } from "../../kernel/client/index.js";
import { type NbCell, type NbOutput, type Notebook, joinText, readNotebook } from "../audit/notebook.js";

export interface CellEvent {
  index: number;
  /** 1-based position among the code cells, and their count. */
  position: number;
  of: number;
  status: "ok" | "error" | "skipped";
  executionCount: number | null;
  outputs: NbOutput[];
  /** "NameError: x is not defined" for a failing cell. */
  error?: string;
}

export interface ExecuteOptions {
  env?: Record<string, string>;
  cwd?: string;
  keepGoing?: boolean;
  onCell?: (e: CellEvent) => void;
}

/** Runs every code cell in order in a fresh kernel; fills in outputs and execution counts in place. */
export async function executeNotebook(nb: Notebook, opts: ExecuteOptions = {}): Promise<{ failed: number; ran: number }> {
  const code = nb.cells.map((c, i) => [c, i] as const).filter(([c]) => c.cell_type === "code");
  const kernel = await KernelProcess.start({ ...(opts.env ? { env: opts.env } : {}), ...(opts.cwd ? { cwd: opts.cwd } : {}) });
  let failed = 0;
  let ran = 0;
  let stopped = false;
  try {
    for (const [pos, [cell, index]] of code.entries()) {
      const base = { index, position: pos + 1, of: code.length };
      if (stopped || joinText(cell.source).trim() === "") {
        resetCell(cell);
        opts.onCell?.({ ...base, status: "skipped", executionCount: null, outputs: [] });
        continue;
      }
      const { reply, outputs } = await kernel.execute(joinText(cell.source), { stopOnError: !opts.keepGoing });
      ran++;
      const count = typeof reply.execution_count === "number" ? reply.execution_count : null;
      cell.outputs = outputs as NbCell["outputs"];
      cell.execution_count = count;
      if (reply.status === "ok") {
        opts.onCell?.({ ...base, status: "ok", executionCount: count, outputs: cell.outputs ?? [] });
        continue;
      }
      failed++;
      const error = `${String(reply.ename ?? "Error")}: ${String(reply.evalue ?? reply.status)}`;
      opts.onCell?.({ ...base, status: "error", executionCount: count, outputs: cell.outputs ?? [], error });
      if (!opts.keepGoing) stopped = true;
    }
  } finally {
    await kernel.shutdown().catch(() => kernel.kill());
  }
  nb.metadata.kernelspec = { name: "hush", display_name: "TypeScript (hush)", language: "typescript" };
  return { failed, ran };
}

function resetCell(cell: NbCell): void {
  cell.outputs = [];
  cell.execution_count = null;
}

export function defaultOutputPath(file: string): string {
  const ext = extname(file);
  return join(dirname(file), `${basename(file, ext)}.out${ext || ".ipynb"}`);
}

export function writeNotebook(file: string, nb: Notebook): void {
  // nbformat's own writer indents by one space and ends with a newline.
  writeFileSync(file, `${JSON.stringify(nb, null, 1)}\n`);
}

export function progressLine(e: CellEvent): string {
  const where = `cell ${e.position}/${e.of}`;
  if (e.status === "skipped") return `${where} skipped\n`;
  const count = e.executionCount === null ? "" : ` [${e.executionCount}]`;
  return e.status === "ok" ? `${where}${count} ok\n` : `${where}${count} FAILED ${e.error ?? ""}\n`;
}

export async function runNotebookCommand(
  file: string,
  o: { output?: string; keepGoing?: boolean },
  out: (s: string) => void,
): Promise<{ failed: number; ran: number; output: string }> {
  const nb = readNotebook(file);
  const output = o.output ?? defaultOutputPath(file);
  const result = await executeNotebook(nb, {
    cwd: dirname(resolve(file)),
    keepGoing: o.keepGoing === true,
    onCell: (e) => out(progressLine(e)),
  });
  writeNotebook(output, nb);
  out(`wrote ${output} (${result.ran} cell${result.ran === 1 ? "" : "s"} run, ${result.failed} failed)\n`);
  return { ...result, output };
}
