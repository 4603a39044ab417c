/**
 * The notebook side's connection to a curator: one zeromq DEALER socket, JSON request frames matched
 * to replies by id, several requests may be in flight. Curator errors come back as the matching
 * HushError subclass; no reply within the timeout is an UnreachableError. Every reply is checked
 * against the reply schema first (reply-frame.ts): a malformed one fails the request it names at
 * once with a MalformedReplyError (a ProtocolError), and one that names no pending request is
 * logged and dropped without touching the others.
 */
import { randomUUID } from "node:crypto";
import { curveKeyPair, Dealer } from "zeromq";
import { BadInputError, HushError, UnreachableError } from "../errors.js";
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
  type ResponseBody,
  type SpendSummary,
} from "../protocol/messages.js";
import { MAX_REPLY_BYTES } from "../protocol/reply-schema.js";
import { errorFromWire } from "./errors.js";
import { MalformedReplyError, readReply } from "./reply-frame.js";

const LOST = (address: string): string =>
  `the connection to the curator at ${address} dropped while the request was in flight ` +
  "(asking again is safe: a release already paid for comes back as a free replay)";

/** How long after a drop to wait for libzmq's own reconnect (its first retry comes after ~100 ms). */
const REVIVE_AFTER_MS = 1_000;

/** The most a caller may raise maxReplyBytes to (the socket then holds up to twice this). */
const HARD_REPLY_CEILING = 1024 * 1024 * 1024;

export interface CuratorClientOptions {
  /** "ipc:///path/curator.sock" or "tcp://127.0.0.1:5555". */
  address: string;
  analyst: string;
  token: string;
  /** The curator's CURVE public key (z85); required for tcp, where it pins the server. */
  curveServerKey?: string;
  /** How long to wait for each reply; default 60 s. */
  timeoutMs?: number;
  /** Largest reply frame read; larger ones fail their request unread. Default MAX_REPLY_BYTES (32 MiB). */
  maxReplyBytes?: number;
}

interface Waiting {
  id: string;
  op: RequestBody["op"];
  resolve(body: ResponseBody): void;
  reject(e: Error): void;
  timer: NodeJS.Timeout;
  /** The request as sent, kept for a resend after a reconnect. */
  frame: Buffer;
}

const Z85_KEY = /^[0-9a-zA-Z.\-:+=^!/*?&<>()[\]{}@%$#]{40}$/;

export class CuratorClient {
  private readonly waiting = new Map<string, Waiting>();
  private sendTail: Promise<void> = Promise.resolve();
  private closed = false;
  private droppedCount = 0;
  /** Set while a dropped connection waits to hear that libzmq will reconnect by itself. */
  private revive: NodeJS.Timeout | undefined;

  private constructor(
    private readonly socket: Dealer,
    private readonly opts: Required<Omit<CuratorClientOptions, "curveServerKey">>,
  ) {
    // A dropped connection loses the replies to requests the curator had already read (a reconnect
    // gets a new routing id), and libzmq drops the connection itself when a reply frame is over the
    // socket's size limit. Either way those replies will never come: fail the requests now.
    socket.events.on("disconnect", () => this.connectionLost());
    socket.events.on("connect:retry", () => clearTimeout(this.revive));
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
    const maxReplyBytes = opts.maxReplyBytes ?? MAX_REPLY_BYTES;
    if (!Number.isSafeInteger(maxReplyBytes) || maxReplyBytes < 1024 || maxReplyBytes > HARD_REPLY_CEILING) {
      throw new BadInputError(`maxReplyBytes must be a whole number from 1024 to ${HARD_REPLY_CEILING}`);
    }
    // A fresh client key pair per connection: identity is the analyst token, CURVE gives encryption
    // and pins the server.
    const own = opts.curveServerKey !== undefined ? curveKeyPair() : undefined;
    const socket = new Dealer({
      linger: 0,
      // A frame past twice the limit makes libzmq drop the connection before the frame is held in
      // memory (the requests in flight then fail as unreachable); frames between the limit and that
      // are refused by readReply, which fails the request they name.
      maxMessageSize: 2 * maxReplyBytes,
      ...(own ? { curveServerKey: opts.curveServerKey, curvePublicKey: own.publicKey, curveSecretKey: own.secretKey } : {}),
    });
    try {
      socket.connect(opts.address);
    } catch (e: unknown) {
      socket.close();
      throw new UnreachableError(`cannot connect to the curator at ${opts.address}`, { cause: e });
    }
    return new CuratorClient(socket, { address: opts.address, analyst: opts.analyst, token: opts.token, timeoutMs, maxReplyBytes });
  }

  private async receiveLoop(): Promise<void> {
    try {
      for await (const frames of this.socket) this.deliver(frames);
    } catch (e: unknown) {
      if (!this.closed) this.failAll(new UnreachableError(`connection to the curator at ${this.opts.address} failed`, { cause: e }));
    }
  }

  private connectionLost(): void {
    if (this.closed) return;
    this.failAll(new UnreachableError(LOST(this.opts.address)));
    // libzmq schedules a reconnect after an ordinary drop (a curator restart) and says so with a
    // "connect:retry" event at once; after a protocol error, such as a frame over maxMessageSize,
    // it ends the connection for good and says nothing more. So: if no retry is heard soon,
    // connect afresh. (Doing it after an ordinary drop too would close the live connection
    // libzmq has made meanwhile, which is a disconnect again; the wait keeps that from looping.)
    clearTimeout(this.revive);
    this.revive = setTimeout(() => this.reconnect(), REVIVE_AFTER_MS);
    this.revive.unref();
  }

  private reconnect(): void {
    if (this.closed) return;
    try {
      this.socket.disconnect(this.opts.address);
      this.socket.connect(this.opts.address);
    } catch (e: unknown) {
      // Not expected (the same address was connected before); later requests meet their timeouts.
      process.stderr.write(`hush client: cannot reconnect to ${this.opts.address}: ${e instanceof Error ? e.message : String(e)}\n`);
      return;
    }
    // Requests made since the drop went into the dead connection's queue, which disconnect() has
    // just thrown away: send them again. Were one delivered after all (libzmq had reconnected
    // unheard), the curator answers it twice; the second reply names no pending request and is
    // dropped, and a repeated ask is a free replay of the same release.
    for (const w of this.waiting.values()) this.send(w.id, w.frame);
  }

  /** Settles the request a reply names; a reply that names none is logged and dropped. */
  private deliver(frames: Buffer[]): void {
    const read = readReply(frames, this.opts.maxReplyBytes);
    const id = read.ok ? read.reply.id : read.id;
    let w = id !== null && id !== "" ? this.waiting.get(id) : undefined;
    if (w === undefined && (id === null || id === "") && this.waiting.size === 1) {
      // A reply that names no request: the curator answers a request frame it could not read with
      // id "", and a damaged frame may hide its id. With exactly one request in flight it can only
      // be that request's reply (or a stray for one already given up on, which fails the newer one
      // early; a connection that sends garbage deserves no better). With several in flight we
      // cannot tell whose it is, so each keeps waiting for its own reply or timeout.
      w = this.waiting.values().next().value;
    }
    if (w === undefined) {
      const why = read.ok ? (id === "" ? "a reply that names no request" : "a reply for no pending request") : read.error.message;
      this.dropped(why);
      return;
    }
    this.waiting.delete(w.id);
    clearTimeout(w.timer);
    if (!read.ok) w.reject(read.error);
    else if (!read.reply.ok) w.reject(errorFromWire(read.reply.error));
    else if (read.reply.id === "") w.reject(new MalformedReplyError("no-id", "malformed reply from the curator: a result that names no request"));
    else if (read.reply.body.op !== w.op) {
      w.reject(new MalformedReplyError("wrong-op", `malformed reply from the curator: a ${read.reply.body.op} result for a ${w.op} request`));
    } else w.resolve(read.reply.body);
  }

  /** Logs a dropped reply: the first few, then one line per thousand, so a flood cannot fill the log. */
  private dropped(why: string): void {
    this.droppedCount++;
    if (this.droppedCount <= 10 || this.droppedCount % 1000 === 0) {
      process.stderr.write(`hush client: dropped reply ${this.droppedCount} from ${this.opts.address}: ${why}\n`);
    }
  }

  /** Replies that named no pending request and were dropped (for diagnostics and tests). */
  get droppedReplies(): number {
    return this.droppedCount;
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
        id,
        op: body.op,
        // deliver() has checked that the body's op is this request's op.
        resolve: (b) => resolve(b as Extract<ResponseBody, { op: Op }>),
        reject,
        timer,
        frame,
      });
      this.send(id, frame);
    });
  }

  /** Queues one request frame: one send at a time per socket (a zeromq rule); the queue keeps order. */
  private send(id: string, frame: Buffer): void {
    this.sendTail = this.sendTail.then(() =>
      this.socket.send(frame).catch((e: unknown) => {
        const w = this.waiting.get(id);
        if (w === undefined) return;
        this.waiting.delete(id);
        clearTimeout(w.timer);
        w.reject(e instanceof HushError ? e : new UnreachableError(`cannot send to the curator at ${this.opts.address}`, { cause: e }));
      }),
    );
  }

  async catalogue(): Promise<{ datasets: { name: string; description: string }[]; publicKey: string }> {
    const b = await this.request({ op: "catalogue" });
    return { datasets: b.datasets, publicKey: b.publicKey };
  }

  async open(dataset: string): Promise<DatasetInfo> {
    return (await this.request({ op: "open", dataset })).info;
  }

  /** `cell`: the asking notebook cell's source digest (runtime/protocol/cell-source.ts), if any. */
  async ask(plan: QueryPlan, cell?: string): Promise<Release> {
    return (await this.request(cell === undefined ? { op: "ask", plan } : { op: "ask", plan, cell })).release;
  }

  /** `assumeCount`: the count of values per group a mean's, variance's or std's expected error assumes (Preview.ratioErrors). */
  async preview(plan: QueryPlan, assumeCount?: number): Promise<Preview> {
    return (await this.request(assumeCount === undefined ? { op: "preview", plan } : { op: "preview", plan, assumeCount })).preview;
  }

  async spend(dataset: string): Promise<SpendSummary> {
    return (await this.request({ op: "spend", dataset })).spend;
  }

  /** The analyst's spend on every dataset they may use (no dataset opened, no data read). */
  async accounts(): Promise<SpendSummary[]> {
    return (await this.request({ op: "accounts" })).accounts;
  }

  /** The latest releases (at most LEDGER_PAGE per population; ledgerPage for the rest). */
  async ledger(dataset?: string): Promise<LedgerEntry[]> {
    return (await this.ledgerPage(dataset)).entries;
  }

  /**
   * A page of the ledger: per population the latest LEDGER_PAGE releases with seq below `before`
   * (default: the latest of all), and how many earlier releases were left out.
   */
  async ledgerPage(dataset?: string, before?: number): Promise<{ entries: LedgerEntry[]; earlier: number }> {
    const body = await this.request({ op: "ledger", ...(dataset !== undefined ? { dataset } : {}), ...(before !== undefined ? { before } : {}) });
    return { entries: body.entries, earlier: body.earlier ?? 0 };
  }

  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    clearTimeout(this.revive);
    this.failAll(new UnreachableError("the curator client was closed"));
    await this.sendTail;
    this.socket.close();
  }
}
