/**
 * Checking an analyst's token so that a stranger with wrong tokens costs the curator little and
 * the analysts already signed in nothing.
 *
 * Order for each request:
 * 1. Recognised: the analyst's token already verified in this process (its sha256 is remembered):
 *    accepted at once, before any limit below, so no one else's failures slow or lock it out.
 * 2. Backoff: after `freeFailures` (5) failed checks from one connection (peer) or for one
 *    analyst name, further attempts are refused at once, without scrypt, for a time that doubles
 *    with each further failure, from 1 s up to `maxBackoffMs` (60 s). A connection is the ZeroMQ
 *    ROUTER routing id: anyone can open new connections, so the per-peer limit is only a courtesy
 *    (it stops a careless or single-connection client); the bounded queue in 3 is what holds
 *    against a real flood.
 * 3. Bounded queue: at most `maxChecking` (1) scrypt checks run at once (on libuv's thread pool,
 *    off the message loop) and at most `maxWaiting` (32) wait; one connection may hold at most
 *    `maxPendingPerPeer` (2) of those places. Past that a request is refused at once (BusyError):
 *    no scrypt, nothing spent. Identical checks in flight (same name, same token) share one.
 *
 * Names: an unknown analyst name goes through the same steps as a known one (a check against a
 * dummy hash with the default parameters, failures counted the same way), so neither the time to
 * answer nor a refusal tells which names exist.
 *
 * After a restart nothing is recognised yet: each analyst needs one check. Under a flood that
 * fills the queue, an analyst's first request may be refused as busy (at once; nothing spent) and
 * must be tried again; no check ever blocks the message loop. If the flood uses the analyst's own
 * name, the name's backoff refuses that analyst too (at most `maxBackoffMs` at a time) until the
 * flood stops: the price of limiting guesses per name. Once the analyst's check succeeds, the
 * flood no longer touches them.
 *
 * The limits are the fields of SIGN_IN_LIMITS below (constants, not policy: a steward has no
 * reason to tune them per deployment; values in brackets).
 *
 * Memory: failure records are kept per peer and per name, each map at most `maxRecords` entries
 * (the oldest dropped first; dropping one only forgets a limit, it never locks anyone out), and
 * forgotten `forgetAfterMs` (15 min) after their last failure.
 */
import { createHash, timingSafeEqual } from "node:crypto";
import { BusyError, UnauthorizedError } from "../errors.js";
import { verifyToken } from "./tokens.js";

/** The limits, in one place; SIGN_IN_LIMITS has the values the curator runs with. */
export interface SignInLimits {
  /** scrypt checks running at once. */
  maxChecking: number;
  /** Checks waiting for a running place; beyond running + waiting, requests are refused at once. */
  maxWaiting: number;
  /** Running or waiting places one connection may hold. */
  maxPendingPerPeer: number;
  /** Failed checks allowed (per peer, per name) before backoff starts. */
  freeFailures: number;
  /** The first backoff; each further failure doubles it. */
  firstBackoffMs: number;
  maxBackoffMs: number;
  /** A failure record with no new failure for this long is forgotten. */
  forgetAfterMs: number;
  /** Failure records kept per map (peers, names). */
  maxRecords: number;
}

export const SIGN_IN_LIMITS: Readonly<SignInLimits> = {
  // One check (~50–150 ms of one core, 16 MiB) at a time: a flood can take at most one core's worth
  // of scrypt, leaving the message loop its own core on a 2-core curator, and leaving libuv's other
  // pool threads (4 by default) free for file work.
  maxChecking: 1,
  // 32 waiting: a burst of analysts signing in together (a class starting its notebooks, a restart)
  // gets places; one that does waits at most 33 checks (a few seconds) before its own.
  maxWaiting: 32,
  // Two, not one: a client may send a request or two before its first check has finished.
  maxPendingPerPeer: 2,
  // Five: a few mistakes of one's own, and a hostile-input suite's handful, before any backoff.
  freeFailures: 5,
  firstBackoffMs: 1_000,
  maxBackoffMs: 60_000,
  forgetAfterMs: 15 * 60_000,
  // ~10,000 short records per map: well under a few MiB whatever names and connections arrive.
  maxRecords: 10_000,
};

const UNAUTHORIZED = "unauthorized: unknown analyst or wrong token";
const BUSY = "the curator is busy checking other sign-ins; try again shortly (nothing was done)";

/** A well-formed stored hash (default parameters, as hashToken writes) that no token matches. */
const DUMMY_HASH = `scrypt$16384$8$1$${Buffer.alloc(16, 7).toString("base64")}$${createHash("sha256").update("no token").digest("base64")}`;

function sha256(text: string): Buffer {
  return createHash("sha256").update(text, "utf8").digest();
}

interface FailureRecord {
  failures: number;
  lastFailure: number;
  blockedUntil: number;
}

/** Failed attempts per key (a peer, or a name), with exponential backoff; bounded in size. */
export class FailureBackoff {
  private readonly records = new Map<string, FailureRecord>();

  constructor(
    private readonly limits: SignInLimits,
    private readonly now: () => number,
  ) {}

  /** Milliseconds until `key` may try again; 0 when it may now. */
  waitFor(key: string): number {
    const r = this.current(key);
    return r === undefined ? 0 : Math.max(0, r.blockedUntil - this.now());
  }

  fail(key: string): void {
    const now = this.now();
    const r = this.current(key) ?? { failures: 0, lastFailure: now, blockedUntil: 0 };
    r.failures++;
    r.lastFailure = now;
    const over = r.failures - this.limits.freeFailures;
    if (over > 0) {
      // Capped exponent: 2^30 s is far past any cap, and keeps the arithmetic exact.
      const backoff = Math.min(this.limits.firstBackoffMs * 2 ** Math.min(over - 1, 30), this.limits.maxBackoffMs);
      r.blockedUntil = now + backoff;
    }
    // Re-inserting moves the key to the newest end, so the oldest is dropped first when full.
    this.records.delete(key);
    this.records.set(key, r);
    while (this.records.size > this.limits.maxRecords) {
      const oldest = this.records.keys().next().value as string;
      this.records.delete(oldest);
    }
  }

  succeed(key: string): void {
    this.records.delete(key);
  }

  get size(): number {
    return this.records.size;
  }

  private current(key: string): FailureRecord | undefined {
    const r = this.records.get(key);
    if (r !== undefined && this.now() - r.lastFailure >= this.limits.forgetAfterMs) {
      this.records.delete(key);
      return undefined;
    }
    return r;
  }
}

/** At most `running` tasks at once and `waiting` queued; refuses (returns false) beyond that. */
export class BoundedQueue {
  private active = 0;
  private readonly queue: (() => void)[] = [];

  constructor(
    private readonly running: number,
    private readonly waiting: number,
  ) {}

  /** Whether a new task would be accepted now. */
  get hasRoom(): boolean {
    return this.active < this.running || this.queue.length < this.waiting;
  }

  get counts(): { running: number; waiting: number } {
    return { running: this.active, waiting: this.queue.length };
  }

  /** Runs `task` when a place is free; null (and `task` never runs) when there is no room. */
  run<T>(task: () => Promise<T>): Promise<T> | null {
    if (!this.hasRoom) return null;
    const go = async (): Promise<T> => {
      try {
        return await task();
      } finally {
        const next = this.queue.shift();
        // The finished task's running place passes straight to the next waiting one.
        if (next !== undefined) next();
        else this.active--;
      }
    };
    if (this.active < this.running) {
      this.active++;
      return go();
    }
    return new Promise<void>((resolve) => this.queue.push(resolve)).then(go);
  }
}

export interface SignInOptions {
  /** Known analysts and their stored token hashes (the policy's). */
  analysts: ReadonlyMap<string, { tokenHash: string }>;
  limits?: SignInLimits;
  /** Milliseconds on a monotonic clock; tests inject their own. */
  now?: () => number;
  /** The scrypt check; tests inject one they resolve by hand. */
  verify?: (stored: string, token: string) => Promise<boolean>;
}

/** The curator's sign-in: throws UnauthorizedError or BusyError, or returns when the analyst is who they say. */
export class SignIn {
  private readonly analysts: ReadonlyMap<string, { tokenHash: string }>;
  private readonly limits: SignInLimits;
  private readonly verify: (stored: string, token: string) => Promise<boolean>;
  /** sha256 of the token that last verified, per known analyst: one scrypt per analyst, not per request. */
  private readonly recognised = new Map<string, Buffer>();
  private readonly peers: FailureBackoff;
  private readonly names: FailureBackoff;
  private readonly queue: BoundedQueue;
  private readonly pendingPerPeer = new Map<string, number>();
  /** Checks in flight by name and token digest: a repeat waits for the same check. */
  private readonly inFlight = new Map<string, Promise<boolean>>();

  constructor(opts: SignInOptions) {
    this.analysts = opts.analysts;
    this.limits = opts.limits ?? SIGN_IN_LIMITS;
    const now = opts.now ?? (() => performance.now());
    this.verify = opts.verify ?? verifyToken;
    this.peers = new FailureBackoff(this.limits, now);
    this.names = new FailureBackoff(this.limits, now);
    this.queue = new BoundedQueue(this.limits.maxChecking, this.limits.maxWaiting);
  }

  /** `peer` is an opaque name for the connection (the ROUTER routing id). */
  async check(analyst: string, token: string, peer: string): Promise<void> {
    const entry = this.analysts.get(analyst);
    const presented = sha256(token);
    const known = this.recognised.get(analyst);
    if (entry !== undefined && known !== undefined && timingSafeEqual(known, presented)) return;

    const key = `${analyst}\u0000${presented.toString("hex")}`;
    let pending = this.inFlight.get(key);
    if (pending === undefined) {
      const peerWait = this.peers.waitFor(peer);
      const nameWait = this.names.waitFor(analyst);
      if (peerWait > 0 || nameWait > 0) {
        const who = peerWait >= nameWait ? "from this connection" : `for analyst ${JSON.stringify(analyst)}`;
        throw new BusyError(
          `too many failed sign-ins ${who}; try again in ${Math.ceil(Math.max(peerWait, nameWait) / 1000)} s (nothing was done)`,
        );
      }
      const held = this.pendingPerPeer.get(peer) ?? 0;
      if (held >= this.limits.maxPendingPerPeer) throw new BusyError(BUSY);
      // Unknown names are checked against a dummy hash, so they cost what a known name costs.
      const stored = entry?.tokenHash ?? DUMMY_HASH;
      const started = this.queue.run(() => this.verify(stored, token));
      if (started === null) throw new BusyError(BUSY);
      this.pendingPerPeer.set(peer, held + 1);
      // A check that throws (not a mismatch: a fault) counts as no failure and reaches the caller.
      pending = started
        .then((good) => this.settle(analyst, peer, presented, good && entry !== undefined))
        .finally(() => this.release(key, peer));
      this.inFlight.set(key, pending);
    }
    if (!(await pending)) throw new UnauthorizedError(UNAUTHORIZED);
  }

  /** Counts for tests and logs: failure records kept, checks running and waiting. */
  get state(): { peerRecords: number; nameRecords: number; running: number; waiting: number; recognised: number } {
    return { peerRecords: this.peers.size, nameRecords: this.names.size, ...this.queue.counts, recognised: this.recognised.size };
  }

  private settle(analyst: string, peer: string, presented: Buffer, good: boolean): boolean {
    if (good) {
      this.recognised.set(analyst, presented);
      this.names.succeed(analyst);
      this.peers.succeed(peer);
    } else {
      this.names.fail(analyst);
      this.peers.fail(peer);
    }
    return good;
  }

  private release(key: string, peer: string): void {
    this.inFlight.delete(key);
    const held = (this.pendingPerPeer.get(peer) ?? 1) - 1;
    if (held <= 0) this.pendingPerPeer.delete(peer);
    else this.pendingPerPeer.set(peer, held);
  }
}
