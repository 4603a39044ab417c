/**
 * Runs the curator as a child process (`node dist/runtime/curator/main.js --policy F --listen A`),
 * waits for its JSON ready line, and kills or stops it. Used by the memory and kernel benches and
 * by the reliability tests (which SIGKILL it at random moments and start it again).
 */
import { spawn, type ChildProcess } from "node:child_process";
import fs from "node:fs";
import path from "node:path";
import { fileURLToPath } from "node:url";

/** The repository root, found from this file whether it runs from bench/ (vitest) or dist/bench/. */
export function repoRoot(): string {
  let dir = path.dirname(fileURLToPath(import.meta.url));
  while (!fs.existsSync(path.join(dir, "package.json"))) {
    const up = path.dirname(dir);
    if (up === dir) throw new Error("repository root not found above " + fileURLToPath(import.meta.url));
    dir = up;
  }
  return dir;
}

/** The curator's ready line: {"ready":true,"address","publicKey","pid",...}. */
export interface ReadyLine {
  address: string;
  publicKey?: string;
  curvePublicKey?: string;
  [k: string]: unknown;
}

/** The curator printed {"ready":false,"error":{kind,message}}: it refused to start. */
export class CuratorStartError extends Error {
  constructor(
    readonly kind: string,
    readonly reason: string,
    readonly stderr: string,
  ) {
    super(`curator refused to start (${kind}): ${reason}`);
    this.name = "CuratorStartError";
  }
}

export class CuratorProcess {
  private constructor(
    readonly child: ChildProcess,
    readonly ready: ReadyLine,
    private readonly exitPromise: Promise<{ code: number | null; signal: NodeJS.Signals | null }>,
    private readonly stderrRef: { text: string },
  ) {}

  get pid(): number {
    if (this.child.pid === undefined) throw new Error("curator process has no pid");
    return this.child.pid;
  }

  get address(): string {
    return this.ready.address;
  }

  get stderr(): string {
    return this.stderrRef.text;
  }

  get exited(): boolean {
    return this.child.exitCode !== null || this.child.signalCode !== null;
  }

  /**
   * Starts the curator and resolves once it prints its ready line (a JSON object with `address`).
   * Rejects with its stderr if it exits first, or after `startTimeoutMs` (a bound, not a measurement).
   */
  static async start(opts: {
    policyFile: string;
    listen: string;
    env?: NodeJS.ProcessEnv;
    nodeArgs?: string[];
    startTimeoutMs?: number;
  }): Promise<CuratorProcess> {
    const main = path.join(repoRoot(), "dist", "runtime", "curator", "main.js");
    if (!fs.existsSync(main)) throw new Error(`${main} is missing: run \`npx tsc -p .\` first`);
    const child = spawn(process.execPath, [...(opts.nodeArgs ?? []), main, "--policy", opts.policyFile, "--listen", opts.listen], {
      stdio: ["ignore", "pipe", "pipe"],
      env: { ...process.env, ...opts.env },
    });
    const stderrRef = { text: "" };
    child.stderr!.setEncoding("utf8");
    child.stderr!.on("data", (d: string) => {
      // Keep the tail only: a long-running curator must not grow the test's memory.
      stderrRef.text = (stderrRef.text + d).slice(-20_000);
    });
    const exitPromise = new Promise<{ code: number | null; signal: NodeJS.Signals | null }>((resolve) => {
      child.once("exit", (code, signal) => resolve({ code, signal }));
    });
    const ready = await new Promise<ReadyLine>((resolve, reject) => {
      let buf = "";
      const timer = setTimeout(() => {
        child.kill("SIGKILL");
        reject(new Error(`curator did not print a ready line within ${opts.startTimeoutMs ?? 120_000} ms; stderr:\n${stderrRef.text}`));
      }, opts.startTimeoutMs ?? 120_000);
      const onData = (d: string) => {
        buf += d;
        let nl: number;
        while ((nl = buf.indexOf("\n")) >= 0) {
          const line = buf.slice(0, nl).trim();
          buf = buf.slice(nl + 1);
          if (!line.startsWith("{")) continue;
          try {
            const parsed = JSON.parse(line) as ReadyLine & { ready?: boolean; error?: { kind?: string; message?: string } };
            if (parsed.ready === false) {
              clearTimeout(timer);
              reject(new CuratorStartError(parsed.error?.kind ?? "unknown", parsed.error?.message ?? "", stderrRef.text));
              return;
            }
            if (typeof parsed.address === "string") {
              clearTimeout(timer);
              child.stdout!.off("data", onData);
              child.stdout!.resume(); // keep draining so the child never blocks on a full pipe
              resolve(parsed);
              return;
            }
          } catch {
            // Not the ready line; keep reading.
          }
        }
      };
      child.stdout!.setEncoding("utf8");
      child.stdout!.on("data", onData);
      void exitPromise.then(({ code, signal }) => {
        clearTimeout(timer);
        reject(new Error(`curator exited (code ${code}, signal ${signal}) before it was ready; stderr:\n${stderrRef.text}`));
      });
    });
    return new CuratorProcess(child, ready, exitPromise, stderrRef);
  }

  /** SIGKILL: no chance to flush or clean up, as a power cut would be. Resolves once it is gone. */
  async kill9(): Promise<void> {
    if (!this.exited) this.child.kill("SIGKILL");
    await this.exitPromise;
  }

  /** SIGTERM and wait; SIGKILL if it has not gone after `graceMs`. */
  async stop(graceMs = 10_000): Promise<{ code: number | null; signal: NodeJS.Signals | null }> {
    if (this.exited) return this.exitPromise;
    this.child.kill("SIGTERM");
    const timer = setTimeout(() => this.child.kill("SIGKILL"), graceMs);
    const r = await this.exitPromise;
    clearTimeout(timer);
    return r;
  }

  waitExit(): Promise<{ code: number | null; signal: NodeJS.Signals | null }> {
    return this.exitPromise;
  }

  /** VmRSS and VmHWM (peak resident set) from /proc, in bytes; null off Linux. */
  memory(): { rss: number; hwm: number } | null {
    try {
      const status = fs.readFileSync(`/proc/${this.pid}/status`, "utf8");
      const kb = (field: string) => {
        const m = new RegExp(`^${field}:\\s+(\\d+) kB`, "m").exec(status);
        return m ? Number(m[1]) * 1024 : NaN;
      };
      return { rss: kb("VmRSS"), hwm: kb("VmHWM") };
    } catch {
      return null;
    }
  }
}
