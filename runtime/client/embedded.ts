/**
 * Starts a curator as a child process on an ipc socket in a private (0700) temporary directory, for
 * notebooks that run against local data. The child is a separate process so that the data, the
 * DuckDB engine and the signing key never live in the kernel that runs cell code.
 */
import { spawn, type ChildProcess } from "node:child_process";
import { existsSync, mkdtempSync, rmSync, writeSync } from "node:fs";
import { tmpdir } from "node:os";
import { dirname, join, resolve } from "node:path";
import { createInterface } from "node:readline";
import { fileURLToPath } from "node:url";
import { BadInputError, UnreachableError } from "../errors.js";
import { errorFromWire } from "./errors.js";

export interface EmbeddedCurator {
  address: string;
  publicKeyB64: string;
  pid: number;
  stop(): Promise<void>;
}

/** dist/runtime/curator/main.js, found from this file whether it runs compiled (dist/) or from source. */
function curatorEntry(): string {
  const here = dirname(fileURLToPath(import.meta.url));
  const beside = resolve(here, "../curator/main.js");
  if (existsSync(beside)) return beside;
  const fromSource = resolve(here, "../../dist/runtime/curator/main.js");
  if (existsSync(fromSource)) return fromSource;
  throw new UnreachableError(`curator entry not found at ${beside}; run the build (npx tsc -p .) first`);
}

const STARTUP_LIMIT_MS = 60_000;

export async function startEmbeddedCurator(opts: { policyFile: string; stateDir?: string }): Promise<EmbeddedCurator> {
  if (!existsSync(opts.policyFile)) throw new BadInputError(`policy file ${opts.policyFile} does not exist`);
  // mkdtemp creates the directory with mode 0700: only this user can reach the socket.
  const dir = mkdtempSync(join(opts.stateDir ?? tmpdir(), "hush-"));
  const address = `ipc://${join(dir, "curator.sock")}`;
  const child: ChildProcess = spawn(
    process.execPath,
    [curatorEntry(), "--policy", resolve(opts.policyFile), "--listen", address, "--exit-with-stdin"],
    { stdio: ["pipe", "pipe", "pipe"] },
  );
  const cleanup = (): void => rmSync(dir, { recursive: true, force: true });
  // If the parent exits without stop(), take the child down with it (the closed stdin does the same
  // when the parent is killed outright).
  const onExit = (): void => {
    if (child.exitCode === null && child.signalCode === null) child.kill("SIGTERM");
    cleanup();
  };
  process.on("exit", onExit);

  let stderrTail = "";
  child.stderr?.on("data", (chunk: Buffer) => {
    // The curator's log (load reports for the steward) goes to this process's own stderr file
    // descriptor, below any capture of process.stderr: a kernel shows it in its server log, never
    // in a cell's output, where an analyst would read it.
    try {
      writeSync(2, chunk);
    } catch {
      // stderr closed: the log is lost, the curator keeps running
    }
    stderrTail = (stderrTail + chunk.toString("utf8")).slice(-2000);
  });

  const ready = await new Promise<{ address: string; publicKey: string }>((resolveReady, rejectReady) => {
    const lines = createInterface({ input: child.stdout! });
    const timer = setTimeout(() => {
      child.kill("SIGKILL");
      rejectReady(new UnreachableError(`the embedded curator did not start within ${STARTUP_LIMIT_MS} ms`));
    }, STARTUP_LIMIT_MS);
    const finish = (): void => {
      clearTimeout(timer);
      lines.removeAllListeners("line");
      child.removeListener("exit", onEarlyExit);
    };
    const onEarlyExit = (code: number | null, signal: string | null): void => {
      finish();
      rejectReady(
        new UnreachableError(
          `the embedded curator exited before it was ready (${signal ?? `code ${code}`})${stderrTail ? `: ${stderrTail.trim()}` : ""}`,
        ),
      );
    };
    child.once("exit", onEarlyExit);
    lines.on("line", (line) => {
      let msg: { ready?: boolean; address?: string; publicKey?: string; error?: { kind: string; message: string } };
      try {
        msg = JSON.parse(line) as typeof msg;
      } catch {
        return;
      }
      if (msg.ready === true && typeof msg.address === "string" && typeof msg.publicKey === "string") {
        finish();
        resolveReady({ address: msg.address, publicKey: msg.publicKey });
      } else if (msg.ready === false && msg.error) {
        finish();
        rejectReady(errorFromWire(msg.error));
      }
    });
  }).catch((e: unknown) => {
    process.removeListener("exit", onExit);
    cleanup();
    throw e;
  });

  let stopped: Promise<void> | null = null;
  return {
    address: ready.address,
    publicKeyB64: ready.publicKey,
    pid: child.pid ?? -1,
    stop(): Promise<void> {
      stopped ??= new Promise<void>((done) => {
        process.removeListener("exit", onExit);
        if (child.exitCode !== null || child.signalCode !== null) {
          cleanup();
          done();
          return;
        }
        child.once("exit", () => {
          cleanup();
          done();
        });
        child.kill("SIGTERM");
      });
      return stopped;
    },
  };
}
