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
import { Dealer } from "zeromq";
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
