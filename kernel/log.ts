/**
 * Kernel diagnostics go to the process's real stderr (the terminal or the Jupyter server log),
 * never to a cell's output: the writer is captured before cells' stdio is redirected.
 */
const write = process.stderr.write.bind(process.stderr);

export function kernelLog(message: string): void {
  write(`hush kernel: ${message}\n`);
}

export function errorText(e: unknown): string {
  return e instanceof Error ? e.message : String(e);
}
