/**
 * The notebook side's connection to a curator: one zeromq DEALER socket, JSON request frames matched
 * to replies by id, several requests may be in flight. Curator errors come back as the matching
 * HushError subclass; no reply within the timeout is an UnreachableError.
 */
import { randomUUID } from "node:crypto";
import { curveKeyPair, Dealer } from "zeromq";
import { BadInputError, HushError, ProtocolError, UnreachableError } from "../errors.js";
import {
  MAX_FRAME_BYTES,
  PROTOCOL_VERSION,
  type DatasetInfo,
  type LedgerEntry,
  type Preview,
  type QueryPlan,
  type Release,
  type Request,
  type RequestBody,
  type Response,
  type ResponseBody,
  type SpendSummary,
} from "../protocol/messages.js";
import { errorFromWire } from "./errors.js";

export interface CuratorClientOptions {
  /** "ipc:///path/curator.sock" or "tcp://127.0.0.1:5555". */
  address: string;
  analyst: string;
  token: string;
  /** The curator's CURVE public key (z85); required for tcp, where it pins the server. */
  curveServerKey?: string;
  /** How long to wait for each reply; default 60 s. */
  timeoutMs?: number;
}

interface Waiting {
  resolve(body: ResponseBody): void;
  reject(e: Error): void;
  timer: NodeJS.Timeout;
}

const Z85_KEY = /^[0-9a-zA-Z.\-:+=^!/*?&<>()[\]{}@%$#]{40}$/;

export class CuratorClient {
  private readonly waiting = new Map<string, Waiting>();
  private sendTail: Promise<void> = Promise.resolve();
  private closed = false;

  private constructor(
    private readonly socket: Dealer,
    private readonly opts: Required<Omit<CuratorClientOptions, "curveServerKey">>,
  ) {
    void this.receiveLoop();
  }

  static async connect(opts: CuratorClientOptions): Promise<CuratorClient> {
    const tcp = /^tcp:\/\/[^/]+:\d+$/.test(opts.address);
    if (!tcp && !/^ipc:\/\/.+/.test(opts.address)) {
      throw new BadInputError(`curator address ${JSON.stringify(opts.address)} must be ipc://PATH or tcp://HOST:PORT`);
    }
    if (tcp && opts.curveServerKey === undefined) {
      throw new BadInputError("a tcp curator address needs curveServerKey (the curator's CURVE public key, z85)");
    }
    if (opts.curveServerKey !== undefined && !Z85_KEY.test(opts.curveServerKey)) {
      throw new BadInputError("curveServerKey must be a 40-character z85 CURVE public key");
    }
    const timeoutMs = opts.timeoutMs ?? 60_000;
    if (!Number.isFinite(timeoutMs) || timeoutMs <= 0) throw new BadInputError("timeoutMs must be a positive number");
    // A fresh client key pair per connection: identity is the analyst token, CURVE gives encryption
    // and pins the server.
    const own = opts.curveServerKey !== undefined ? curveKeyPair() : undefined;
    const socket = new Dealer({
      linger: 0,
      ...(own ? { curveServerKey: opts.curveServerKey, curvePublicKey: own.publicKey, curveSecretKey: own.secretKey } : {}),
    });
    try {
      socket.connect(opts.address);
    } catch (e: unknown) {
      socket.close();
      throw new UnreachableError(`cannot connect to the curator at ${opts.address}`, { cause: e });
    }
    return new CuratorClient(socket, { address: opts.address, analyst: opts.analyst, token: opts.token, timeoutMs });
  }

  private async receiveLoop(): Promise<void> {
    try {
      for await (const frames of this.socket) {
        const reply = this.decode(frames[frames.length - 1]);
        if (reply === null) continue;
        let id = reply.id;
        // A reply without an id answers a frame the curator could not read (too large, not JSON):
        // it belongs to the oldest request still waiting.
        if (id === "" && !this.waiting.has(id)) id = this.waiting.keys().next().value ?? "";
        const w = this.waiting.get(id);
        if (w === undefined) continue;
        this.waiting.delete(id);
        clearTimeout(w.timer);
        if (reply.ok) w.resolve(reply.body);
        else w.reject(errorFromWire(reply.error));
      }
    } catch (e: unknown) {
      if (!this.closed) this.failAll(new UnreachableError(`connection to the curator at ${this.opts.address} failed`, { cause: e }));
    }
  }

  private decode(frame: Buffer | undefined): Response | null {
    if (frame === undefined) return null;
    try {
      const r = JSON.parse(frame.toString("utf8")) as Response;
      if (typeof r !== "object" || r === null || typeof r.id !== "string" || typeof r.ok !== "boolean") return null;
      return r;
    } catch {
      return null;
    }
  }

  private failAll(e: Error): void {
    for (const [id, w] of this.waiting) {
      clearTimeout(w.timer);
      this.waiting.delete(id);
      w.reject(e);
    }
  }

  private request<Op extends ResponseBody["op"]>(body: RequestBody & { op: Op }): Promise<Extract<ResponseBody, { op: Op }>> {
    if (this.closed) return Promise.reject(new UnreachableError("the curator client is closed"));
    const id = randomUUID();
    const req: Request = { v: PROTOCOL_VERSION, id, analyst: this.opts.analyst, token: this.opts.token, body };
    const frame = Buffer.from(JSON.stringify(req), "utf8");
    if (frame.length > MAX_FRAME_BYTES) {
      return Promise.reject(new BadInputError(`request of ${frame.length} bytes is over the ${MAX_FRAME_BYTES}-byte limit`));
    }
    return new Promise<Extract<ResponseBody, { op: Op }>>((resolve, reject) => {
      const timer = setTimeout(() => {
        this.waiting.delete(id);
        reject(new UnreachableError(`no reply from the curator at ${this.opts.address} within ${this.opts.timeoutMs} ms`));
      }, this.opts.timeoutMs);
      this.waiting.set(id, {
        resolve: (b) => {
          if (b.op !== body.op) reject(new ProtocolError(`curator answered a ${body.op} request with ${String(b.op)}`));
          else resolve(b as Extract<ResponseBody, { op: Op }>);
        },
        reject,
        timer,
      });
      // One send at a time per socket (a zeromq rule); the queue keeps order.
      this.sendTail = this.sendTail.then(() =>
        this.socket.send(frame).catch((e: unknown) => {
          const w = this.waiting.get(id);
          if (w === undefined) return;
          this.waiting.delete(id);
          clearTimeout(w.timer);
          w.reject(e instanceof HushError ? e : new UnreachableError(`cannot send to the curator at ${this.opts.address}`, { cause: e }));
        }),
      );
    });
  }

  async catalogue(): Promise<{ datasets: { name: string; description: string }[]; publicKey: string }> {
    const b = await this.request({ op: "catalogue" });
    return { datasets: b.datasets, publicKey: b.publicKey };
  }

  async open(dataset: string): Promise<DatasetInfo> {
    return (await this.request({ op: "open", dataset })).info;
  }

  async ask(plan: QueryPlan): Promise<Release> {
    return (await this.request({ op: "ask", plan })).release;
  }

  async preview(plan: QueryPlan): Promise<Preview> {
    return (await this.request({ op: "preview", plan })).preview;
  }

  async spend(dataset: string): Promise<SpendSummary> {
    return (await this.request({ op: "spend", dataset })).spend;
  }

  async ledger(dataset?: string): Promise<LedgerEntry[]> {
    return (await this.request(dataset === undefined ? { op: "ledger" } : { op: "ledger", dataset })).entries;
  }

  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    this.failAll(new UnreachableError("the curator client was closed"));
    await this.sendTail;
    this.socket.close();
  }
}
