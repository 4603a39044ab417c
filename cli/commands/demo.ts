/**
 * `hush demo`: the whole job in one command, on invented data. Makes the demo data if missing,
 * starts a local curator on the demo policy (a child process, as the kernel's embedded default
 * does), runs notebooks/exploration.ipynb headlessly as the researcher, prints each cell's output,
 * writes the executed notebook, then audits it with the curator's public key.
 *
 * Each demo run starts from an empty ledger in its own state directory, so the notebook's receipts
 * start at seq 1 and the audit can see all of its spend.
 */
import { rmSync } from "node:fs";
import { join } from "node:path";
import { startEmbeddedCurator } from "../../runtime/client/embedded.js";
import { loadPublicKey } from "../../runtime/protocol/receipts.js";
import { DEMO_ANALYSTS, ensureDemoData, repoRoot } from "../../notebooks/scenario/generate.js";
import { auditNotebook } from "../audit/checks.js";
import { type NbOutput, joinText, readNotebook } from "../audit/notebook.js";
import { formatReport } from "../audit/report.js";
import { type CellEvent, executeNotebook, progressLine, writeNotebook } from "./run.js";

function indent(text: string): string {
  return text
    .trimEnd()
    .split("\n")
    .map((l) => `    ${l}`)
    .join("\n");
}

/** What a reader of the notebook would see, as plain text. */
export function outputText(o: NbOutput): string {
  if (o.output_type === "stream") return joinText(o.text);
  if (o.output_type === "error") return `${o.ename ?? "Error"}: ${o.evalue ?? ""}`;
  const plain = o.data?.["text/plain"];
  if (typeof plain === "string" || Array.isArray(plain)) return joinText(plain as string | string[]);
  const kinds = Object.keys(o.data ?? {});
  return kinds.length > 0 ? `(${kinds.join(", ")})` : "";
}

export async function runDemo(o: { state?: string }, out: (s: string) => void): Promise<boolean> {
  const root = repoRoot();
  const dir = o.state ?? join(root, ".hush", "demo-run");
  out("hush demo: invented clinic visits of a fictional health cooperative (no real people)\n");
  const demo = await ensureDemoData({ dir });
  rmSync(join(dir, "state"), { recursive: true, force: true }); // fresh ledger, see above
  out(`  data     ${demo.dataFile}\n  policy   ${demo.policyFile}\n`);

  const curator = await startEmbeddedCurator({ policyFile: demo.policyFile, stateDir: dir });
  let executed: { failed: number; ran: number };
  const notebook = join(root, "notebooks", "exploration.ipynb");
  const outFile = join(dir, "exploration.out.ipynb");
  const nb = readNotebook(notebook);
  try {
    out(`  curator  ${curator.address} (pid ${curator.pid})\n  analyst  ${demo.analyst}\n\nrunning ${notebook}\n`);
    executed = await executeNotebook(nb, {
      cwd: join(root, "notebooks"),
      env: {
        HUSH_CURATOR: curator.address,
        HUSH_ANALYST: demo.analyst,
        HUSH_TOKEN: DEMO_ANALYSTS.rowan.token,
      },
      onCell: (e: CellEvent) => {
        const source = joinText(nb.cells[e.index].source).trim().split("\n");
        out(`\n${progressLine(e)}`);
        out(`${indent(source.map((l) => `> ${l}`).join("\n"))}\n`);
        for (const output of e.outputs) {
          const text = outputText(output);
          if (text.trim() !== "") out(`${indent(text)}\n`);
        }
      },
    });
  } finally {
    await curator.stop();
  }
  writeNotebook(outFile, nb);
  out(`\nwrote ${outFile} (${executed.ran} cells run, ${executed.failed} failed)\n\n`);

  const report = auditNotebook(nb, loadPublicKey(curator.publicKeyB64));
  out(formatReport(outFile, report));
  out(`\nreview it yourself: hush audit ${outFile} --key ${demo.publicKeyFile}\n`);
  return executed.failed === 0 && report.ok;
}
