/**
 * Set-up for the curator integration tests: a steward workspace in a short temp folder (ipc paths
 * are limited to ~107 bytes) built from test/fixtures/service/clinic.csv, a real curator process
 * started from dist/, and a raw DEALER socket for frames the typed client would never send.
 *
 * clinic.csv is invented for these tests (60 rows, 20 units). Its unit ids all start with
 * "pt-canary-": no reply may ever contain that text. Only accounting and shapes are asserted on.
 */
import { spawn, type ChildProcess } from "node:child_process";
import { randomBytes } from "node:crypto";
import { copyFileSync, existsSync, mkdirSync, mkdtempSync } from "node:fs";
import { writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { dirname, join, resolve } from "node:path";
import { createInterface } from "node:readline";
import { fileURLToPath } from "node:url";
import { stringify } from "yaml";
import { curveKeyPair, Dealer } from "zeromq";
import { generateCuratorKey } from "../../runtime/curator/keys.js";
import { hashToken } from "../../runtime/curator/tokens.js";
import type { QueryPlan } from "../../runtime/protocol/messages.js";

export const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), "../..");
export const CURATOR_MAIN = join(ROOT, "dist/runtime/curator/main.js");
export const CLIENT_JS = join(ROOT, "dist/runtime/client/client.js");
export const CLINIC_CSV = join(ROOT, "test/fixtures/service/clinic.csv");
export const CANARY = "pt-canary-";
export const DISTRICTS = ["Northgate", "Riverside", "Eastfield"];

export function requireBuild(): void {
  if (!existsSync(CURATOR_MAIN) || !existsSync(CLIENT_JS)) {
    throw new Error(`integration tests run the built curator: ${CURATOR_MAIN} is missing; run \`npx tsc -p .\` first`);
  }
}

export interface Workspace {
  dir: string;
  policyFile: string;
  ledgerFile: string;
  publicKeyB64: string;
  tokens: Record<string, string>;
}

/**
 * Analysts ada and ben on dataset "clinic" (pure epsilon, cap `cap`), and ada alone on "clinic_z"
 * (zCDP, epsilon 1 at delta 1e-6). "hidden" is granted to ben only. clinic_z and hidden read copies
 * of clinic.csv: separate files are separate populations, so each dataset is its own account here
 * (over one file the analysts' datasets would share one cap; see population.test.ts).
 */
export function makeWorkspace(prefix: string, cap = "1"): Workspace {
  const dir = mkdtempSync(join(tmpdir(), `hs-${prefix}-`));
  mkdirSync(join(dir, "keys"));
  const { publicKeyB64 } = generateCuratorKey(join(dir, "keys", "curator.key"));
  const tokens = { ada: randomBytes(18).toString("base64url"), ben: randomBytes(18).toString("base64url") };
  const columns = {
    age: { type: "integer", range: [0, 100], step: "1" },
    wait_minutes: { type: "number", range: [0, 240], step: "0.5" },
    district: { type: "category", values: DISTRICTS },
    insured: { type: "boolean" },
  };
  copyFileSync(CLINIC_CSV, join(dir, "clinic-z.csv"));
  copyFileSync(CLINIC_CSV, join(dir, "hidden.csv"));
  const dataset = (accounting: unknown, analysts: string[], source = CLINIC_CSV) => ({
    description: "Invented clinic visits for curator tests",
    source,
    unit: { column: "patient_id", maxRows: 4, maxGroups: 2 },
    accounting,
    analysts,
    columns,
  });
  const policy = {
    curator: { key: "keys/curator.key", ledger: "state/ledger.sqlite" },
    analysts: { ada: { token: hashToken(tokens.ada) }, ben: { token: hashToken(tokens.ben) } },
    datasets: {
      clinic: dataset({ mode: "pure", cap: { epsilon: cap } }, ["ada", "ben"]),
      clinic_z: dataset({ mode: "zcdp", cap: { epsilon: "1", delta: "1e-6" } }, ["ada"], "clinic-z.csv"),
      hidden: dataset({ mode: "pure", cap: { epsilon: "1" } }, ["ben"], "hidden.csv"),
    },
  };
  const policyFile = join(dir, "policy.yaml");
  writeFileSync(policyFile, stringify(policy));
  return { dir, policyFile, ledgerFile: join(dir, "state", "ledger.sqlite"), publicKeyB64, tokens };
}

export function countPlan(epsilon: string, extra: Partial<QueryPlan> = {}, dataset = "clinic"): QueryPlan {
  return { v: 1, dataset, measure: { kind: "count" }, privacy: { epsilon }, ...extra };
}

export interface Ready {
  ready: true;
  address: string;
  publicKey: string;
  curvePublicKey?: string;
  pid: number;
}

export interface CuratorChild {
  child: ChildProcess;
  ready: Ready;
  /** Resolves when the process has exited. */
  exited: Promise<void>;
  stderr(): string;
  stop(): Promise<void>;
  kill(): Promise<void>;
}

/** Starts `node dist/runtime/curator/main.js` and waits for its ready line. */
export async function startCuratorChild(args: string[]): Promise<CuratorChild> {
  const child = spawn(process.execPath, [CURATOR_MAIN, ...args], { stdio: ["ignore", "pipe", "pipe"] });
  let err = "";
  child.stderr!.on("data", (c: Buffer) => {
    err = (err + c.toString("utf8")).slice(-20_000);
  });
  const exited = new Promise<void>((done) => child.once("exit", () => done()));
  const ready = await new Promise<Ready>((ok, fail) => {
    const lines = createInterface({ input: child.stdout! });
    lines.once("line", (line) => {
      const msg = JSON.parse(line) as Ready | { ready: false; error: { message: string } };
      if (msg.ready) ok(msg);
      else fail(new Error(`curator did not start: ${msg.error.message}`));
    });
    void exited.then(() => fail(new Error(`curator exited before ready: ${err}`)));
  });
  const signal = async (sig: NodeJS.Signals) => {
    if (child.exitCode === null && child.signalCode === null) child.kill(sig);
    await exited;
  };
  return { child, ready, exited, stderr: () => err, stop: () => signal("SIGTERM"), kill: () => signal("SIGKILL") };
}

export type Transport = "ipc" | "tcp";

/** Listen arguments for a transport: ipc in the workspace (0700), tcp on port 0 with a CURVE key file. */
export function listenArgs(ws: Workspace, transport: Transport): string[] {
  if (transport === "ipc") return ["--policy", ws.policyFile, "--listen", `ipc://${join(ws.dir, "c.sock")}`];
  return ["--policy", ws.policyFile, "--listen", "tcp://127.0.0.1:0", "--curve-key", join(ws.dir, "keys", "curve.json")];
}

/** A DEALER that sends arbitrary frames and waits for one reply (or reports none). */
export class RawSpeaker {
  private constructor(private readonly socket: Dealer) {}

  static connect(ready: Ready): RawSpeaker {
    const own = ready.curvePublicKey ? curveKeyPair() : undefined;
    const socket = new Dealer({
      linger: 0,
      receiveTimeout: 20_000,
      ...(own ? { curveServerKey: ready.curvePublicKey, curvePublicKey: own.publicKey, curveSecretKey: own.secretKey } : {}),
    });
    socket.connect(ready.address);
    return new RawSpeaker(socket);
  }

  async exchange(frames: (Buffer | string)[]): Promise<Record<string, unknown>> {
    await this.socket.send(frames);
    const got = await this.socket.receive();
    const reply = got[got.length - 1];
    return JSON.parse(reply.toString("utf8")) as Record<string, unknown>;
  }

  close(): void {
    this.socket.close();
  }
}
