/**
 * `hush serve --policy FILE [--listen ADDR] [--curve-key FILE]`: the curator for analysts on other
 * accounts or machines. Prints what analysts need to pin; stops cleanly on SIGINT/SIGTERM.
 */
import { existsSync } from "node:fs";
import { generateCurveKey, loadCurveKey, type CurveKey } from "../../runtime/curator/keys.js";
import { closeOnSignal, startCurator } from "../../runtime/curator/server.js";

export async function runServe(o: { policy: string; listen: string; curveKey?: string }, out: (s: string) => void): Promise<void> {
  let curve: CurveKey | undefined;
  if (o.curveKey !== undefined) curve = existsSync(o.curveKey) ? loadCurveKey(o.curveKey) : generateCurveKey(o.curveKey);
  const running = await startCurator({ policyFile: o.policy, listen: o.listen, ...(curve ? { curve } : {}) });
  out(`hush curator serving ${o.policy}\n`);
  out(`  address             ${running.address}\n`);
  out(`  receipt public key  ${running.publicKeyB64}\n`);
  if (running.curvePublicKey !== undefined) out(`  CURVE public key    ${running.curvePublicKey}\n`);
  out(`analysts set:\n  HUSH_CURATOR=${running.address}\n`);
  if (running.curvePublicKey !== undefined) out(`  HUSH_CURATOR_KEY=${running.curvePublicKey}\n`);
  out(`  HUSH_ANALYST=<name>  HUSH_TOKEN=<their token>\n`);
  out(`ready (Ctrl-C or SIGTERM stops it)\n`);
  await new Promise<void>((resolve) => {
    let stopping = false;
    const stop = (signal: string): void => {
      if (stopping) return;
      stopping = true;
      process.stderr.write(`hush serve: ${signal}: finishing requests in progress\n`);
      closeOnSignal(running, (line) => process.stderr.write(`hush serve: ${line}\n`)).then(resolve, (e: unknown) => {
        process.stderr.write(`hush serve: close failed: ${e instanceof Error ? e.message : String(e)}\n`);
        process.exitCode = 3;
        resolve();
      });
    };
    process.once("SIGINT", () => stop("SIGINT"));
    process.once("SIGTERM", () => stop("SIGTERM"));
  });
  out("stopped\n");
}
