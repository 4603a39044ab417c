#!/usr/bin/env node
/**
 * Kernel entry: `node dist/kernel/main.js --connection-file FILE` (the kernelspec's argv).
 */
import { readConnectionFile } from "./connection.js";
import { startKernel } from "./kernel.js";
import { errorText, kernelLog } from "./log.js";

function connectionFileArg(argv: readonly string[]): string | null {
  for (let i = 0; i < argv.length; i++) {
    const a = argv[i];
    if (a === "--connection-file" || a === "-f") return argv[i + 1] ?? null;
    if (a.startsWith("--connection-file=")) return a.slice("--connection-file=".length);
  }
  return null;
}

async function main(): Promise<void> {
  const file = connectionFileArg(process.argv.slice(2));
  if (!file) {
    kernelLog("usage: main.js --connection-file FILE");
    process.exit(2);
  }
  const kernel = await startKernel(readConnectionFile(file));
  await kernel.closed;
  process.exit(0);
}

main().catch((e: unknown) => {
  kernelLog(`failed to start: ${errorText(e)}`);
  process.exit(1);
});
