#!/usr/bin/env node
/**
 * The curator process: `main.js --policy FILE --listen ADDR [--curve-key FILE] [--exit-with-stdin]`.
 *
 * Prints exactly one JSON line on stdout once it serves, {"ready":true,"address",...}, or
 * {"ready":false,"error":{kind,message}} if it cannot start. SIGINT/SIGTERM give the requests in
 * progress a short grace, refuse what is still computing (nothing of it is debited), close the
 * ledger and exit, within a few seconds in every state (server.ts closeOnSignal). With --exit-with-stdin (used by the embedded spawner) it also exits when its stdin
 * closes, so a curator never outlives a parent that was killed without a chance to stop it.
 */
import { existsSync } from "node:fs";
import { BadInputError, isHushError } from "../errors.js";
import { generateCurveKey, loadCurveKey, type CurveKey } from "./keys.js";
import { closeOnSignal, startCurator, type RunningCurator } from "./server.js";

interface Args {
  policy: string;
  listen: string;
  curveKey?: string;
  exitWithStdin: boolean;
}

function parseArgs(argv: string[]): Args {
  const out: Partial<Args> = { exitWithStdin: false };
  for (let i = 0; i < argv.length; i++) {
    const a = argv[i];
    const value = (): string => {
      const v = argv[++i];
      if (v === undefined) throw new BadInputError(`${a} needs a value`);
      return v;
    };
    if (a === "--policy") out.policy = value();
    else if (a === "--listen") out.listen = value();
    else if (a === "--curve-key") out.curveKey = value();
    else if (a === "--exit-with-stdin") out.exitWithStdin = true;
    else throw new BadInputError(`unknown option ${a}; usage: --policy FILE --listen ADDR [--curve-key FILE] [--exit-with-stdin]`);
  }
  if (out.policy === undefined) throw new BadInputError("--policy FILE is required");
  if (out.listen === undefined) throw new BadInputError("--listen ADDR is required (ipc://PATH or tcp://HOST:PORT)");
  return out as Args;
}

function say(line: unknown): void {
  process.stdout.write(`${JSON.stringify(line)}\n`);
}

async function main(): Promise<void> {
  let running: RunningCurator | undefined;
  let stopping = false;
  const stop = async (why: string): Promise<void> => {
    if (stopping) return;
    stopping = true;
    process.stderr.write(`hush curator: stopping (${why})\n`);
    try {
      if (running !== undefined) await closeOnSignal(running, (line) => process.stderr.write(`hush curator: ${line}\n`));
    } catch (e: unknown) {
      process.stderr.write(`hush curator: while stopping: ${e instanceof Error ? (e.stack ?? e.message) : String(e)}\n`);
      process.exitCode = 1;
    } finally {
      process.exit();
    }
  };
  try {
    const args = parseArgs(process.argv.slice(2));
    let curve: CurveKey | undefined;
    if (args.curveKey !== undefined) {
      curve = existsSync(args.curveKey) ? loadCurveKey(args.curveKey) : generateCurveKey(args.curveKey);
    }
    running = await startCurator({ policyFile: args.policy, listen: args.listen, ...(curve ? { curve } : {}) });
    if (args.exitWithStdin) {
      process.stdin.on("end", () => void stop("stdin closed"));
      process.stdin.on("error", () => void stop("stdin closed"));
      process.stdin.resume();
    }
  } catch (e: unknown) {
    const kind = isHushError(e) ? e.kind : "internal";
    const message = e instanceof Error ? e.message : String(e);
    say({ ready: false, error: { kind, message } });
    process.stderr.write(`hush curator: cannot start: ${message}\n`);
    process.exitCode = 1;
    return;
  }
  // A stray rejection must not take down a curator that is serving others; the ledger is
  // transactional, so no half-written spend can be left behind by the failed request.
  process.on("unhandledRejection", (reason: unknown) => {
    process.stderr.write(`hush curator: unhandled rejection: ${reason instanceof Error ? (reason.stack ?? reason.message) : String(reason)}\n`);
  });
  process.on("SIGINT", () => void stop("SIGINT"));
  process.on("SIGTERM", () => void stop("SIGTERM"));
  say({
    ready: true,
    address: running.address,
    publicKey: running.publicKeyB64,
    ...(running.curvePublicKey ? { curvePublicKey: running.curvePublicKey } : {}),
    pid: process.pid,
  });
}

void main();
