/**
 * Shared set-up for the reliability tests: a short temp folder (ipc paths have a ~107-byte limit),
 * a small deterministic CSV, a policy with N analysts and a tight cap, and a raw DEALER speaker for
 * frames the typed client would never send.
 *
 * The CSV is generated from a fixed integer hash (no Math.random), so every run sees the same rows;
 * its values are invented and only the accounting is asserted on, never the numbers released.
 */
import fs from "node:fs";
import os from "node:os";
import path from "node:path";
import { spawn, type ChildProcess } from "node:child_process";
import { curveKeyPair, Dealer } from "zeromq";
import { repoRoot } from "../../bench/curator-process.js";
import { writeWorkspace, type Workspace } from "../../bench/workspace.js";
import type { QueryPlan, Request, RequestBody, Response } from "../../runtime/protocol/messages.js";

export const REGIONS = ["north", "south", "east", "west"] as const;

export function shortTempDir(prefix: string): string {
  return fs.mkdtempSync(path.join(os.tmpdir(), `h-${prefix}-`));
}

/** A 32-bit integer hash (lowbias32 by C. Wellons, "common practice"): deterministic pseudo-data. */
export function mix32(x: number): number {
  x = (x ^ (x >>> 16)) >>> 0;
  x = Math.imul(x, 0x7feb352d) >>> 0;
  x = (x ^ (x >>> 15)) >>> 0;
  x = Math.imul(x, 0x846ca68b) >>> 0;
  return (x ^ (x >>> 16)) >>> 0;
}

/** Writes `rows` rows of pid, age, amount, region, day, member; about 3 rows per pid. */
export function writeCsv(file: string, rows: number): void {
  const lines = ["pid,age,amount,region,day,member"];
  const units = Math.max(1, Math.floor(rows / 3));
  for (let i = 0; i < rows; i++) {
    const h = (k: number) => mix32(i * 7 + k);
    const day = new Date(Date.UTC(2025, 0, 1) + (h(5) % 365) * 86_400_000).toISOString().slice(0, 10);
    lines.push(
      [h(1) % units, 18 + (h(2) % 73), ((h(3) % 24000) / 100).toFixed(2), REGIONS[h(4) % REGIONS.length], day, h(6) % 3 === 0].join(","),
    );
  }
  fs.writeFileSync(file, lines.join("\n") + "\n");
}

export const REL_COLUMNS = {
  age: { type: "integer", range: [18, 90], step: "1" },
  amount: { type: "number", range: [0, 200], step: "0.01" },
  region: { type: "category", values: [...REGIONS] },
  day: { type: "date", range: ["2025-01-01", "2025-12-31"] },
  member: { type: "boolean" },
};

export interface RelWorkspace extends Workspace {
  analysts: string[];
  dataset: string;
  cap: string;
  listen: string;
}

/**
 * A workspace with `analysts` analysts (a1..aN), one dataset "visits" with a pure-epsilon cap,
 * granted to the first `granted` analysts (default all).
 */
export function makeRelWorkspace(opts: { prefix: string; analysts: number; cap: string; rows?: number; granted?: number }): RelWorkspace {
  const dir = shortTempDir(opts.prefix);
  fs.mkdirSync(path.join(dir, "data"));
  writeCsv(path.join(dir, "data", "visits.csv"), opts.rows ?? 3000);
  const analysts = Array.from({ length: opts.analysts }, (_, i) => `a${i + 1}`);
  const ws = writeWorkspace(dir, {
    analysts,
    datasets: {
      visits: {
        description: "Generated rows for reliability tests",
        source: "data/visits.csv",
        unit: { column: "pid", maxRows: 4, maxGroups: 2 },
        accounting: { mode: "pure", cap: { epsilon: opts.cap } },
        analysts: analysts.slice(0, opts.granted ?? analysts.length),
        columns: REL_COLUMNS,
      },
    },
  });
  return { ...ws, analysts, dataset: "visits", cap: opts.cap, listen: `ipc://${path.join(dir, "c.sock")}` };
}

let idCounter = 0;
export function request(analyst: string, token: string, body: RequestBody): Request {
  return { v: 1, id: `r${++idCounter}`, analyst, token, body };
}

/**
 * One DEALER connection speaking raw frames. One request at a time; `exchange` resolves with the
 * parsed reply, or with null when `abandon` is called (the curator was killed mid-request).
 */
export class RawSpeaker {
  private readonly sock: Dealer;
  private closed = false;

  constructor(address: string) {
    this.sock = new Dealer({ linger: 0, receiveTimeout: -1, maxMessageSize: -1 });
    this.sock.connect(address);
  }

  async sendRaw(frames: Buffer[]): Promise<void> {
    await this.sock.send(frames);
  }

  /** Next reply frame parsed as JSON; null if the socket is closed while waiting. */
  async receive(): Promise<Response | null> {
    try {
      const [frame] = await this.sock.receive();
      return JSON.parse(frame.toString("utf8")) as Response;
    } catch (e: unknown) {
      if (this.closed) return null;
      throw e;
    }
  }

  async exchange(req: Request | Buffer): Promise<Response | null> {
    await this.sendRaw([Buffer.isBuffer(req) ? req : Buffer.from(JSON.stringify(req), "utf8")]);
    return this.receive();
  }

  close(): void {
    if (this.closed) return;
    this.closed = true;
    this.sock.close();
  }
}

export function plan(dataset: string, measure: QueryPlan["measure"], epsilon: string, extra: Partial<QueryPlan> = {}): QueryPlan {
  return { v: 1, dataset, measure, privacy: { epsilon }, ...extra };
}

// ---- hostile-input and fuzz suites (issue 9): a real `hush serve` over tcp+CURVE ------------------

/** 1000 declared values (the policy's MAX_CATEGORY_VALUES): the largest category a steward may declare. */
export const CODES = Array.from({ length: 1000 }, (_, i) => `c${String(i).padStart(3, "0")}`);
export const SITES = Array.from({ length: 1000 }, (_, i) => `s${String(i).padStart(3, "0")}`);

/**
 * writeCsv's columns plus `wide` (a number over [-500000, 500000] on a 0.001 grid: 10^9 grid points,
 * just under the policy's 2^30) and two 1000-value categories `code` and `site`. `salt` makes a second
 * file with different people for a second population.
 */
export function writeHostileCsv(file: string, rows: number, salt = 0): void {
  const lines = ["pid,age,amount,region,day,member,wide,code,site"];
  const units = Math.max(1, Math.floor(rows / 3));
  for (let i = 0; i < rows; i++) {
    const h = (k: number) => mix32((i + salt * 1_000_003) * 11 + k);
    const day = new Date(Date.UTC(2025, 0, 1) + (h(5) % 365) * 86_400_000).toISOString().slice(0, 10);
    const wide = ((h(7) % 1_000_000_001) - 500_000_000) / 1000;
    lines.push(
      [
        `${salt}-${h(1) % units}`,
        18 + (h(2) % 73),
        ((h(3) % 24000) / 100).toFixed(2),
        REGIONS[h(4) % REGIONS.length],
        day,
        h(6) % 3 === 0,
        wide.toFixed(3),
        CODES[h(8) % CODES.length],
        SITES[h(9) % SITES.length],
      ].join(","),
    );
  }
  fs.writeFileSync(file, lines.join("\n") + "\n");
}

export const HOSTILE_COLUMNS = {
  ...REL_COLUMNS,
  wide: { type: "number", range: ["-500000", "500000"], step: "0.001" },
  code: { type: "category", values: CODES },
  site: { type: "category", values: SITES },
};

export interface HostileWorkspace extends Workspace {
  /** a1 is the hostile analyst, a2 the watcher; both are granted both datasets. */
  analysts: ["a1", "a2"];
  /** Pure epsilon, unit pid with maxRows 4 / maxGroups 2. */
  pure: string;
  /** zCDP (cap given in epsilon at delta 1e-6), each row its own unit. */
  zcdp: string;
  /** Caps in each dataset's own terms: epsilon for pure, epsilon at `delta` for zCDP. */
  cap: { pure: string; zcdp: string; delta: string };
  curveKeyFile: string;
}

/**
 * The hostile suites' policy: two datasets over two different files (so they are two populations and
 * the population accounts of issue 9 do not join them), a wide number column, 1000-value categories,
 * a unit with maxRows > 1, and two analysts.
 */
export function makeHostileWorkspace(opts: { prefix: string; rows: number; capPure: string; capZcdp: string }): HostileWorkspace {
  const dir = shortTempDir(opts.prefix);
  fs.mkdirSync(path.join(dir, "data"));
  writeHostileCsv(path.join(dir, "data", "people.csv"), opts.rows, 1);
  writeHostileCsv(path.join(dir, "data", "others.csv"), opts.rows, 2);
  const analysts: ["a1", "a2"] = ["a1", "a2"];
  const ws = writeWorkspace(dir, {
    analysts,
    datasets: {
      people: {
        description: "Generated rows for hostile-input tests (pure epsilon)",
        source: "data/people.csv",
        unit: { column: "pid", maxRows: 4, maxGroups: 2 },
        accounting: { mode: "pure", cap: { epsilon: opts.capPure } },
        analysts,
        columns: HOSTILE_COLUMNS,
      },
      others: {
        description: "Generated rows for hostile-input tests (zCDP)",
        source: "data/others.csv",
        accounting: { mode: "zcdp", cap: { epsilon: opts.capZcdp, delta: "1e-6" } },
        analysts,
        columns: HOSTILE_COLUMNS,
      },
    },
  });
  return {
    ...ws,
    analysts,
    pure: "people",
    zcdp: "others",
    cap: { pure: opts.capPure, zcdp: opts.capZcdp, delta: "1e-6" },
    curveKeyFile: path.join(dir, "keys", "curve.json"),
  };
}

/**
 * `hush serve --policy P --listen tcp://127.0.0.1:0 --curve-key K` as a child process: the command a
 * steward runs. Its address and CURVE public key are read from the lines it prints for analysts.
 */
export class ServeProcess {
  private constructor(
    readonly child: ChildProcess,
    readonly address: string,
    readonly curvePublicKey: string,
    readonly exit: Promise<{ code: number | null; signal: NodeJS.Signals | null }>,
    private readonly err: { text: string },
  ) {}

  static async start(ws: HostileWorkspace, startTimeoutMs = 120_000): Promise<ServeProcess> {
    const cli = path.join(repoRoot(), "dist", "cli", "main.js");
    if (!fs.existsSync(cli)) throw new Error(`${cli} is missing: run \`npm run build\` first`);
    const child = spawn(process.execPath, [cli, "serve", "--policy", ws.policyFile, "--listen", "tcp://127.0.0.1:0", "--curve-key", ws.curveKeyFile], {
      stdio: ["ignore", "pipe", "pipe"],
    });
    const err = { text: "" };
    child.stderr!.setEncoding("utf8");
    child.stderr!.on("data", (d: string) => {
      err.text = (err.text + d).slice(-20_000);
    });
    const exit = new Promise<{ code: number | null; signal: NodeJS.Signals | null }>((resolve) => {
      child.once("exit", (code, signal) => resolve({ code, signal }));
    });
    const { address, key } = await new Promise<{ address: string; key: string }>((resolve, reject) => {
      let out = "";
      const timer = setTimeout(() => {
        child.kill("SIGKILL");
        reject(new Error(`hush serve printed no address and CURVE key within ${startTimeoutMs} ms; stderr:\n${err.text}`));
      }, startTimeoutMs);
      child.stdout!.setEncoding("utf8");
      child.stdout!.on("data", (d: string) => {
        out += d;
        const a = /^\s*address\s+(tcp:\/\/127\.0\.0\.1:\d+)\s*$/m.exec(out);
        const k = /^\s*CURVE public key\s+(\S{40})\s*$/m.exec(out);
        if (a && k && /^ready/m.test(out)) {
          clearTimeout(timer);
          resolve({ address: a[1], key: k[1] });
        }
      });
      void exit.then(({ code, signal }) => {
        clearTimeout(timer);
        reject(new Error(`hush serve exited (code ${code}, signal ${signal}) before it was ready; stderr:\n${err.text}`));
      });
    });
    return new ServeProcess(child, address, key, exit, err);
  }

  get pid(): number {
    if (this.child.pid === undefined) throw new Error("hush serve has no pid");
    return this.child.pid;
  }

  get exited(): boolean {
    return this.child.exitCode !== null || this.child.signalCode !== null;
  }

  get stderr(): string {
    return this.err.text;
  }

  /** VmRSS from /proc (bytes): the resident memory of the serving process. */
  rss(): number {
    const m = /^VmRSS:\s+(\d+) kB/m.exec(fs.readFileSync(`/proc/${this.pid}/status`, "utf8"));
    if (m === null) throw new Error(`no VmRSS line in /proc/${this.pid}/status`);
    return Number(m[1]) * 1024;
  }

  /**
   * SIGTERM, then the time until the process is gone, or null if it is still there after `withinMs`
   * (it is then SIGKILLed, so a test never leaves a wedged curator behind).
   */
  async terminate(withinMs: number): Promise<number | null> {
    if (this.exited) return 0;
    const t0 = performance.now();
    this.child.kill("SIGTERM");
    let timer: NodeJS.Timeout | undefined;
    const gone = await Promise.race([
      this.exit.then(() => true),
      new Promise<boolean>((resolve) => {
        timer = setTimeout(() => resolve(false), withinMs);
      }),
    ]);
    clearTimeout(timer);
    const took = performance.now() - t0;
    if (gone) return took;
    this.child.kill("SIGKILL");
    await this.exit;
    return null;
  }

  async kill9(): Promise<void> {
    if (!this.exited) this.child.kill("SIGKILL");
    await this.exit;
  }
}

/** A raw DEALER over CURVE, pinned to the server key: frames the typed client would never send. */
export class CurveSpeaker {
  private readonly sock: Dealer;
  private closed = false;

  constructor(address: string, serverKey: string, replyTimeoutMs: number) {
    const own = curveKeyPair();
    this.sock = new Dealer({
      linger: 0,
      receiveTimeout: replyTimeoutMs,
      maxMessageSize: -1,
      curveServerKey: serverKey,
      curvePublicKey: own.publicKey,
      curveSecretKey: own.secretKey,
    });
    this.sock.connect(address);
  }

  async send(frames: Buffer[]): Promise<void> {
    await this.sock.send(frames);
  }

  /** The next reply's frames, or null when none came within the reply timeout. */
  async receive(): Promise<Buffer[] | null> {
    try {
      return await this.sock.receive();
    } catch (e: unknown) {
      if (e instanceof Error && (e as { code?: string }).code === "EAGAIN") return null;
      throw e;
    }
  }

  close(): void {
    if (this.closed) return;
    this.closed = true;
    this.sock.close();
  }
}

export interface WatchLog {
  /** Latency of each answered `spend`, ms. */
  latencies: number[];
  /** Polls not answered within the bound (or answered with an error), with when they started. */
  misses: { atMs: number; why: string }[];
  /** Largest VmRSS seen, bytes. */
  peakRss: number;
  /** The watcher's own spend at the last answered poll (must stay "0": it never asks). */
  lastSpent: string | null;
}

/**
 * A second analyst polling `spend` every `everyMs` while the suite runs, each poll bounded by the
 * client's own timeout, and the curator's VmRSS sampled at each poll. `stop()` ends the loop.
 */
export function watchCurator(opts: {
  spend: () => Promise<{ spentEpsilon: string }>;
  rss: () => number;
  everyMs: number;
}): { stop(): Promise<WatchLog>; wedged(): boolean } {
  const log: WatchLog = { latencies: [], misses: [], peakRss: 0, lastSpent: null };
  const start = performance.now();
  let running = true;
  let wake: (() => void) | null = null;
  const loop = (async () => {
    while (running) {
      const t0 = performance.now();
      try {
        log.peakRss = Math.max(log.peakRss, opts.rss());
      } catch (e: unknown) {
        log.misses.push({ atMs: t0 - start, why: `RSS unreadable: ${e instanceof Error ? e.message : String(e)}` });
      }
      try {
        const s = await opts.spend();
        log.latencies.push(performance.now() - t0);
        log.lastSpent = s.spentEpsilon;
      } catch (e: unknown) {
        log.misses.push({ atMs: t0 - start, why: e instanceof Error ? `${e.name}: ${e.message}` : String(e) });
      }
      if (!running) break;
      // The poll interval (not a wait for some event): a tick every everyMs, cut short by stop().
      await new Promise<void>((resolve) => {
        wake = resolve;
        setTimeout(resolve, Math.max(0, opts.everyMs - (performance.now() - t0)));
      });
    }
  })();
  return {
    wedged: () => log.misses.length > 0,
    async stop() {
      running = false;
      (wake as (() => void) | null)?.();
      await loop;
      return log;
    },
  };
}

/**
 * Bounds the hostile and fuzz suites hold a curator to (issue 9), stated once:
 * - requestMs: the curator's per-request deadline will default to 30 s; 5 s more covers the transport.
 * - watchEveryMs / watchMs: a second analyst's `spend` is polled every 200 ms and must be answered
 *   within 5 s each time. A `spend` is a ledger read of a few rows, so 5 s only fails when the message
 *   loop is blocked (generous for two shared CI cores; a bound that catches a freeze, not a speed target).
 * - rssBytes: an idle curator over a few thousand rows sits near 150-250 MiB (Node, DuckDB, SQLite;
 *   measured here: 194 MiB peak through the fuzzer); worker threads each add a V8 heap and DuckDB may
 *   buffer a query's groups. 1 GiB leaves room for that and still catches the declared-cell explosion
 *   of issue 9 (10^9 cells took RSS from 300 MB past 2 GB).
 * - sigtermMs: SIGTERM must stop the process within 5 s in every state.
 */
export const HOSTILE_BOUNDS = {
  requestMs: 35_000,
  watchEveryMs: 200,
  watchMs: 5_000,
  rssBytes: 1024 * 1024 * 1024,
  sigtermMs: 5_000,
} as const;
