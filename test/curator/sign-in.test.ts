/**
 * The sign-in's limits on their own: an injected clock and an injected check that the test
 * resolves by hand, so backoff, queue bound and recognition are exact and nothing sleeps. One test
 * runs the real scrypt check to show it leaves the event loop free.
 */
import { describe, expect, it } from "vitest";
import { BusyError, UnauthorizedError } from "../../runtime/errors.js";
import { BoundedQueue, FailureBackoff, SIGN_IN_LIMITS, SignIn, type SignInLimits } from "../../runtime/curator/sign-in.js";
import { hashToken, verifyToken } from "../../runtime/curator/tokens.js";

const ADA_HASH = "stored-hash-of-ada";
/** Small limits so each case is short; the production values are checked in the first test. */
const LIMITS: SignInLimits = { ...SIGN_IN_LIMITS, freeFailures: 3, maxWaiting: 8 };
let wrongCount = 0;

/** A check the test answers: each call waits until `answer` is called for it. */
function manualCheck() {
  const calls: { stored: string; token: string; resolve: (good: boolean) => void }[] = [];
  const verify = (stored: string, token: string) => new Promise<boolean>((resolve) => calls.push({ stored, token, resolve }));
  /** Answers the oldest open call as a real check would: the right token for ada matches. */
  const answer = async () => {
    const c = calls.shift();
    if (c === undefined) throw new Error("no check is running");
    c.resolve(c.stored === ADA_HASH && c.token === "ada-right");
    // Let the settled check's continuations (settle, release, next in queue) run.
    for (let i = 0; i < 5; i++) await Promise.resolve();
  };
  return { calls, verify, answer };
}

function setup(limits: Partial<SignInLimits> = {}) {
  const clock = { t: 1_000_000 };
  const check = manualCheck();
  const signIn = new SignIn({
    analysts: new Map([["ada", { tokenHash: ADA_HASH }]]),
    limits: { ...LIMITS, ...limits },
    now: () => clock.t,
    verify: check.verify,
  });
  return { clock, check, signIn };
}

/** Starts a sign-in and lets it reach its check (or its refusal). */
function attempt(signIn: SignIn, analyst: string, token: string, peer: string): Promise<unknown> {
  return signIn.check(analyst, token, peer).then(
    () => "ok",
    (e: unknown) => e,
  );
}

/** One failed check for `analyst` from `peer`, run to its end. */
async function failOnce(s: ReturnType<typeof setup>, analyst: string, peer: string): Promise<unknown> {
  const p = attempt(s.signIn, analyst, `wrong-${++wrongCount}`, peer);
  if (s.check.calls.length > 0) await s.check.answer();
  return p;
}

describe("sign-in backoff", () => {
  it("allows the free failures, then refuses without a check for 1 s, 2 s, 4 s ... capped at 60 s", () => {
    const clock = { t: 0 };
    const b = new FailureBackoff(LIMITS, () => clock.t);
    const waits: number[] = [];
    for (let i = 0; i < 12; i++) {
      b.fail("peer-1");
      waits.push(b.waitFor("peer-1"));
      clock.t += b.waitFor("peer-1"); // the next attempt arrives just as the block ends
    }
    expect(SIGN_IN_LIMITS).toMatchObject({ maxChecking: 1, maxWaiting: 32, maxPendingPerPeer: 2, freeFailures: 5, firstBackoffMs: 1_000, maxBackoffMs: 60_000 });
    expect(waits).toEqual([0, 0, 0, 1_000, 2_000, 4_000, 8_000, 16_000, 32_000, 60_000, 60_000, 60_000]);
    // Still capped after very many failures (no overflow to Infinity or NaN).
    for (let i = 0; i < 2_000; i++) b.fail("peer-1");
    expect(b.waitFor("peer-1")).toBe(60_000);
  });

  it("forgets a record after 15 minutes without failures, and on success", () => {
    const clock = { t: 0 };
    const b = new FailureBackoff(LIMITS, () => clock.t);
    for (let i = 0; i < 6; i++) b.fail("x");
    expect(b.waitFor("x")).toBeGreaterThan(0);
    clock.t += LIMITS.forgetAfterMs;
    expect(b.waitFor("x")).toBe(0);
    b.fail("x"); // counts from zero again: free
    expect(b.waitFor("x")).toBe(0);
    for (let i = 0; i < 5; i++) b.fail("y");
    b.succeed("y");
    expect(b.waitFor("y")).toBe(0);
  });

  it("keeps at most maxRecords records, dropping the oldest", () => {
    const b = new FailureBackoff({ ...LIMITS, maxRecords: 100 }, () => 0);
    for (let i = 0; i < 10_000; i++) b.fail(`peer-${i}`);
    expect(b.size).toBe(100);
    for (let i = 0; i < 4; i++) b.fail("peer-9999");
    expect(b.waitFor("peer-9999")).toBeGreaterThan(0);
  });

  it("refuses a peer in backoff at once, without a check, also for a correct token", async () => {
    const s = setup();
    for (let i = 0; i < 4; i++) expect(await failOnce(s, "nobody", "peer-1")).toBeInstanceOf(UnauthorizedError);
    const refused = await attempt(s.signIn, "ada", "ada-right", "peer-1");
    expect(refused).toBeInstanceOf(BusyError);
    expect((refused as Error).message).toMatch(/too many failed sign-ins from this connection; try again in 1 s/);
    expect(s.check.calls).toHaveLength(0);
    // Another connection is not held back by peer-1's failures.
    const elsewhere = attempt(s.signIn, "ada", "ada-right", "peer-2");
    expect(s.check.calls).toHaveLength(1);
    await s.check.answer();
    expect(await elsewhere).toBe("ok");
    // After the backoff, peer-1 is checked again.
    s.clock.t += 1_000;
    const later = attempt(s.signIn, "nobody", "x", "peer-1");
    expect(s.check.calls).toHaveLength(1);
    await s.check.answer();
    expect(await later).toBeInstanceOf(UnauthorizedError);
  });

  it("limits failures per name across connections, the same way for known and unknown names", async () => {
    for (const name of ["ada", "nobody"]) {
      const s = setup();
      // Each failure from a fresh connection: only the per-name limit can apply.
      for (let i = 0; i < 4; i++) expect(await failOnce(s, name, `peer-${i}`)).toBeInstanceOf(UnauthorizedError);
      const refused = await attempt(s.signIn, name, "anything", "peer-new");
      expect(refused).toBeInstanceOf(BusyError);
      expect((refused as Error).message).toBe(`too many failed sign-ins for analyst ${JSON.stringify(name)}; try again in 1 s (nothing was done)`);
      expect(s.check.calls).toHaveLength(0);
    }
  });

  it("answers an unknown name with a check against a dummy hash and the same refusal as a wrong token", async () => {
    const s = setup();
    const unknown = attempt(s.signIn, "nobody", "ada-right", "p1");
    expect(s.check.calls).toHaveLength(1);
    expect(s.check.calls[0].stored).toMatch(/^scrypt\$16384\$8\$1\$/);
    await s.check.answer();
    const wrong = attempt(s.signIn, "ada", "ada-wrong", "p2");
    expect(s.check.calls).toHaveLength(1);
    await s.check.answer();
    const [e1, e2] = [await unknown, await wrong];
    expect(e1).toBeInstanceOf(UnauthorizedError);
    expect(e2).toBeInstanceOf(UnauthorizedError);
    expect((e1 as Error).message).toBe((e2 as Error).message);
  });
});

describe("sign-in queue", () => {
  it("runs one check, holds eight waiting, and refuses the tenth at once without a check", async () => {
    const s = setup();
    const started = Array.from({ length: 9 }, (_, i) => attempt(s.signIn, "nobody", `t${i}`, `peer-${i}`));
    expect(s.check.calls).toHaveLength(1);
    expect(s.signIn.state).toMatchObject({ running: 1, waiting: 8 });
    const tenth = await attempt(s.signIn, "nobody", "t9", "peer-9");
    expect(tenth).toBeInstanceOf(BusyError);
    expect((tenth as Error).message).toBe("the curator is busy checking other sign-ins; try again shortly (nothing was done)");
    // Each finished check lets exactly the next one start.
    for (let i = 0; i < 9; i++) {
      expect(s.check.calls).toHaveLength(1);
      await s.check.answer();
    }
    expect(s.check.calls).toHaveLength(0);
    for (const p of started) expect(await p).toBeInstanceOf(UnauthorizedError);
    expect(s.signIn.state).toMatchObject({ running: 0, waiting: 0 });
  });

  it("lets one connection hold at most two places", async () => {
    const s = setup();
    const a = attempt(s.signIn, "nobody", "t1", "greedy");
    const b = attempt(s.signIn, "nobody", "t2", "greedy");
    expect(await attempt(s.signIn, "nobody", "t3", "greedy")).toBeInstanceOf(BusyError);
    expect(s.signIn.state).toMatchObject({ running: 1, waiting: 1 });
    await s.check.answer();
    await s.check.answer();
    expect(await a).toBeInstanceOf(UnauthorizedError);
    expect(await b).toBeInstanceOf(UnauthorizedError);
  });

  it("shares one check between identical attempts in flight", async () => {
    const s = setup();
    const first = attempt(s.signIn, "ada", "ada-right", "p1");
    const second = attempt(s.signIn, "ada", "ada-right", "p1");
    const third = attempt(s.signIn, "ada", "ada-right", "p2");
    expect(s.check.calls).toHaveLength(1);
    await s.check.answer();
    expect([await first, await second, await third]).toEqual(["ok", "ok", "ok"]);
  });

  it("BoundedQueue never runs a refused task", async () => {
    const q = new BoundedQueue(1, 0);
    let release: () => void = () => undefined;
    const ran: number[] = [];
    const first = q.run(() => new Promise<void>((r) => (release = r)).then(() => ran.push(1)));
    expect(first).not.toBeNull();
    expect(q.run(async () => ran.push(2))).toBeNull();
    release();
    await first;
    expect(ran).toEqual([1]);
    expect(q.hasRoom).toBe(true);
  });
});

describe("sign-in recognition", () => {
  it("recognises an analyst whose token verified without a check, while its name and peer are blocked and the queue is full", async () => {
    const s = setup();
    const first = attempt(s.signIn, "ada", "ada-right", "ada-peer");
    await s.check.answer();
    expect(await first).toBe("ok");
    // Others fail for ada's name, and from ada's own connection id, until both are in backoff.
    for (let i = 0; i < 5; i++) await failOnce(s, "ada", `attacker-${i}`);
    for (let i = 0; i < 5; i++) await failOnce(s, "nobody", "ada-peer");
    // ... and fill the queue.
    const flood = Array.from({ length: 9 }, (_, i) => attempt(s.signIn, `n${i}`, "x", `f${i}`));
    expect(s.signIn.state).toMatchObject({ running: 1, waiting: 8 });
    expect(await attempt(s.signIn, "zed", "x", "f-extra")).toBeInstanceOf(BusyError);
    const calls = s.check.calls.length;
    for (let i = 0; i < 100; i++) expect(await attempt(s.signIn, "ada", "ada-right", "ada-peer")).toBe("ok");
    expect(s.check.calls.length).toBe(calls);
    // A wrong token for ada is not recognised: it meets the name's backoff.
    expect(await attempt(s.signIn, "ada", "ada-wrong", "p-x")).toBeInstanceOf(BusyError);
    for (let i = 0; i < 9; i++) await s.check.answer();
    for (const p of flood) expect(await p).toBeInstanceOf(UnauthorizedError);
  });

  it("after a restart (nothing recognised), a flood on ada's name holds ada back only until the flood stops", async () => {
    const s = setup();
    // Wrong tokens for ada from many connections put the name in backoff.
    for (let i = 0; i < 6; i++) await failOnce(s, "ada", `attacker-${i}`);
    const blocked = await attempt(s.signIn, "ada", "ada-right", "ada-peer");
    expect(blocked).toBeInstanceOf(BusyError);
    expect(s.check.calls).toHaveLength(0);
    // The flood stops; once the block (8 s after the sixth failure) has passed, ada is checked and let in.
    s.clock.t += 8_000;
    const back = attempt(s.signIn, "ada", "ada-right", "ada-peer");
    expect(s.check.calls).toHaveLength(1);
    await s.check.answer();
    expect(await back).toBe("ok");
  });

  it("does not recognise a name the policy does not know, even after a check", async () => {
    const s = setup();
    for (let i = 0; i < 2; i++) {
      const p = attempt(s.signIn, "ghost", "ada-right", `p${i}`);
      expect(s.check.calls).toHaveLength(1);
      await s.check.answer();
      expect(await p).toBeInstanceOf(UnauthorizedError);
    }
    expect(s.signIn.state.recognised).toBe(0);
  });
});

describe("token check off the event loop", () => {
  it("lets the event loop run while scrypt works", async () => {
    const stored = hashToken("secret");
    let ticks = 0;
    let ticking = true;
    const tick = (): void => {
      ticks++;
      if (ticking) setImmediate(tick);
    };
    setImmediate(tick);
    const good = await verifyToken(stored, "not-the-secret");
    ticking = false;
    expect(good).toBe(false);
    // A synchronous scrypt (the code before) would hold the loop for the whole check: no tick.
    expect(ticks).toBeGreaterThan(3);
    expect(await verifyToken(stored, "secret")).toBe(true);
  });
});
