/**
 * Reaches the curator on first use: a configured one (address, analyst, token), or, with nothing
 * configured, the embedded default — demo data and policy made if missing, a curator started as a
 * separate local process, and a notice saying so, because an analyst must know where the data is.
 */
import { execFile } from "node:child_process";
import { existsSync } from "node:fs";
import { fileURLToPath } from "node:url";
import { CuratorClient, type CuratorClientOptions } from "../client/client.js";
import { type EmbeddedCurator, startEmbeddedCurator } from "../client/embedded.js";
import { HushError, UnreachableError } from "../errors.js";
import { type HushConfig } from "./config.js";
import type { CuratorPort } from "./context.js";

export interface DemoSetup {
  policyFile: string;
  analyst: string;
  token: string;
}

/** The pieces the connector uses; tests replace them with stand-ins. */
export interface ConnectDeps {
  connect(opts: CuratorClientOptions): Promise<CuratorPort>;
  startEmbedded(opts: { policyFile: string }): Promise<EmbeddedCurator>;
  ensureDemoData(opts: { dir?: string }): Promise<DemoSetup>;
}

export interface Connection {
  port: CuratorPort;
  analyst: string;
  address: string;
  /** Set in embedded mode: the local curator the session started. */
  embedded: { policyFile: string; pid: number; publicKeyB64: string } | null;
}

/**
 * The demo scenario, prepared in a child process (`notebooks/scenario/prepare.js`): the notebook side
 * never generates the data or holds the curator's key in its own memory, and the demo code is not
 * part of a steward's deployment.
 */
async function loadDemo(opts: { dir?: string }): Promise<DemoSetup> {
  // Beside this file when it runs compiled (dist/), or in dist/ when it runs from source (tests).
  const script = [
    fileURLToPath(new URL("../../notebooks/scenario/prepare.js", import.meta.url)),
    fileURLToPath(new URL("../../dist/notebooks/scenario/prepare.js", import.meta.url)),
  ].find((f) => existsSync(f));
  if (script === undefined) {
    throw new UnreachableError(
      "no curator is configured (HUSH_CURATOR / HUSH_CONFIG) and the demo scenario (notebooks/scenario/prepare.js) is not available to start a local one; set HUSH_CURATOR, HUSH_ANALYST and HUSH_TOKEN",
    );
  }
  const args = [script, ...(opts.dir !== undefined ? ["--dir", opts.dir] : [])];
  const out = await new Promise<string>((resolveOut, rejectOut) => {
    execFile(process.execPath, args, { encoding: "utf8", timeout: 120_000 }, (err, stdout, stderr) => {
      if (err) rejectOut(new UnreachableError(`could not prepare the demo data for the embedded curator: ${stderr.trim() || err.message}`));
      else resolveOut(stdout);
    });
  });
  const setup = JSON.parse(out.trim().split("\n").pop() ?? "") as Partial<DemoSetup>;
  if (typeof setup.policyFile !== "string" || typeof setup.analyst !== "string" || typeof setup.token !== "string") {
    throw new UnreachableError("the demo preparation printed no policy, analyst and token");
  }
  return { policyFile: setup.policyFile, analyst: setup.analyst, token: setup.token };
}

export const DEFAULT_DEPS: ConnectDeps = {
  connect: (opts) => CuratorClient.connect(opts),
  startEmbedded: (opts) => startEmbeddedCurator(opts),
  ensureDemoData: loadDemo,
};

/** The first output of an embedded session: where the data is and how to use a real curator instead. */
export function embeddedNotice(policyFile: string, analyst: string): string {
  return (
    `hush: no curator configured — started a local curator on the demo policy ${policyFile}, as analyst ${analyst}. ` +
    "(local embedded mode: the data lives on this machine, in a separate process; cells only receive noisy aggregates " +
    "and every release is debited and signed. It does not protect the data from anyone who can read its files under " +
    "this user account: for that, the curator must run on the steward's machine or account. " +
    "To use a steward's curator, install a kernel for your identity (hush install --analyst NAME --token-file FILE --curator ADDR) " +
    "or set HUSH_CURATOR, HUSH_ANALYST and HUSH_TOKEN (or HUSH_TOKEN_FILE), or HUSH_CONFIG.)"
  );
}

export class Connector {
  readonly #config: () => HushConfig;
  readonly #notice: (text: string) => void;
  readonly #deps: ConnectDeps;
  #pending: Promise<Connection> | null = null;
  #embedded: EmbeddedCurator | null = null;
  #closed = false;

  constructor(config: () => HushConfig, notice: (text: string) => void, deps: Partial<ConnectDeps> = {}) {
    this.#config = config;
    this.#notice = notice;
    this.#deps = { ...DEFAULT_DEPS, ...deps };
  }

  /** The connection, made on the first call; a failed attempt is retried on the next call. */
  connection(): Promise<Connection> {
    if (this.#closed) return Promise.reject(new UnreachableError("this hush session is closed"));
    this.#pending ??= this.#connect().catch((e: unknown) => {
      this.#pending = null;
      throw e;
    });
    return this.#pending;
  }

  /** The connection if one was made or is being made; null otherwise (never starts one). */
  established(): Promise<Connection> | null {
    return this.#closed ? null : this.#pending;
  }

  async #connect(): Promise<Connection> {
    const cfg = this.#config();
    if (cfg.mode === "remote") {
      const port = await this.#deps.connect({
        address: cfg.address,
        analyst: cfg.analyst,
        token: cfg.token,
        ...(cfg.curveServerKey !== undefined ? { curveServerKey: cfg.curveServerKey } : {}),
      });
      return { port, analyst: cfg.analyst, address: cfg.address, embedded: null };
    }
    const demo = await this.#deps.ensureDemoData(cfg.demoDir !== undefined ? { dir: cfg.demoDir } : {});
    const analyst = cfg.analyst ?? demo.analyst;
    const token = cfg.token ?? demo.token;
    const curator = await this.#deps.startEmbedded({ policyFile: demo.policyFile });
    this.#embedded = curator;
    try {
      const port = await this.#deps.connect({ address: curator.address, analyst, token });
      this.#notice(embeddedNotice(demo.policyFile, analyst));
      return {
        port,
        analyst,
        address: curator.address,
        embedded: { policyFile: demo.policyFile, pid: curator.pid, publicKeyB64: curator.publicKeyB64 },
      };
    } catch (e: unknown) {
      this.#embedded = null;
      await curator.stop();
      throw e;
    }
  }

  /** Closes the client and stops an embedded curator. */
  async close(): Promise<void> {
    this.#closed = true;
    const pending = this.#pending;
    this.#pending = null;
    let first: unknown = null;
    if (pending) {
      try {
        const c = await pending;
        await c.port.close();
      } catch (e: unknown) {
        if (!(e instanceof HushError)) first = e;
      }
    }
    if (this.#embedded) {
      await this.#embedded.stop();
      this.#embedded = null;
    }
    if (first !== null) throw first;
  }
}
