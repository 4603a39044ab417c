/**
 * `node dist/notebooks/scenario/prepare.js [--dir DIR]`: makes the demo data, curator key and demo
 * policy if missing, and prints one JSON line { policyFile, analyst, token }.
 *
 * The kernel's embedded default runs this as a child process instead of importing it, so the
 * notebook side never generates the data or holds the curator's key in its own memory.
 */
import { pathToFileURL } from "node:url";
import { ensureDemoData } from "./generate.js";

async function main(argv: string[]): Promise<void> {
  const i = argv.indexOf("--dir");
  const dir = i >= 0 ? argv[i + 1] : undefined;
  if (i >= 0 && (dir === undefined || dir.startsWith("--"))) throw new Error("--dir needs a directory");
  const demo = await ensureDemoData(dir !== undefined ? { dir } : {});
  process.stdout.write(`${JSON.stringify({ policyFile: demo.policyFile, analyst: demo.analyst, token: demo.token })}\n`);
}

if (process.argv[1] && import.meta.url === pathToFileURL(process.argv[1]).href) {
  main(process.argv.slice(2)).catch((e: unknown) => {
    process.stderr.write(`hush demo data: ${e instanceof Error ? e.message : String(e)}\n`);
    process.exit(1);
  });
}
