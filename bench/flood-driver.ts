/**
 * A sign-in flood against a running curator: several DEALER sockets (each its own peer, each with
 * its own CURVE key pair on tcp) send requests with wrong tokens at a paced total rate for a fixed
 * time, then wait a bounded time for the replies. Used by bench/flood.ts (run as a child process,
 * so the flood's own work does not sit on the measuring process's event loop) and by the flood
 * test (in-process). Every loop stops by itself: sending at `durationMs`, draining at `drainMs`.
 *
 * Half the requests name `targetAnalyst` (a real analyst, so the flood tries to lock it out), half
 * a made-up name, so both the known-name and the unknown-name paths are exercised. With `preview`,
 * the flood is an authenticated analyst's own: previews (free, they read no data) at a fresh epsilon
 * each, the heaviest asks an analyst can send without spending.
 */
import { randomBytes } from "node:crypto";
import { setTimeout as delay } from "node:timers/promises";
import { pathToFileURL } from "node:url";
import { curveKeyPair, Dealer } from "zeromq";

export interface FloodOptions {
  address: string;
  /** The curator's CURVE public key (z85) for tcp; absent for ipc. */
  curveServerKey?: string;
  sockets: number;
  /** Total requests per second over all sockets. */
  rate: number;
  durationMs: number;
  /** How long to wait for outstanding replies after the last send. */
  drainMs: number;
  targetAnalyst: string;
  dataset: string;
  /**
   * Instead of wrong tokens: every request signs in as `targetAnalyst` with this (valid) token and
   * asks a preview of `preview.measure` at a fresh epsilon (so no cache of an earlier law helps),
   * with `assumeCount` (a mean, variance or std's own expected error is then computed too).
   */
  preview?: { token: string; measure: Record<string, unknown>; assumeCount?: number; accuracyFirst?: { confidence: number } };
}

export interface FloodResult {
  /** Requests handed to zeromq (rate × duration of them are tried, paced to the rate). */
  sent: number;
  /** Sends zeromq refused at once (its queue to the curator was full): never reached the curator. */
  notQueued: number;
  /** Replies by error kind ("ok" for a success, which a wrong token must never get). */
  replies: Record<string, number>;
  /** Sent requests with no reply by the end of the drain. */
  unanswered: number;
  sendMs: number;
}

/** Sends the flood and collects every reply; resolves once all are in or the drain time is over. */
export async function runFlood(opts: FloodOptions): Promise<FloodResult> {
  const replies: Record<string, number> = {};
  let sent = 0;
  let notQueued = 0;
  let received = 0;
  const sockets = Array.from({ length: opts.sockets }, () => {
    const own = opts.curveServerKey !== undefined ? curveKeyPair() : undefined;
    const s = new Dealer({
      linger: 0,
      // A full queue refuses the send at once instead of blocking the pacing loop.
      sendTimeout: 0,
      ...(own ? { curveServerKey: opts.curveServerKey, curvePublicKey: own.publicKey, curveSecretKey: own.secretKey } : {}),
    });
    s.connect(opts.address);
    return s;
  });
  let allIn: () => void = () => undefined;
  const done = new Promise<void>((resolve) => (allIn = resolve));
  let sending = true;
  const receivers = sockets.map(async (s) => {
    try {
      for await (const frames of s) {
        const reply = JSON.parse(frames[frames.length - 1].toString("utf8")) as { ok: boolean; error?: { kind: string } };
        const kind = reply.ok ? "ok" : (reply.error?.kind ?? "?");
        replies[kind] = (replies[kind] ?? 0) + 1;
        received++;
        if (!sending && received >= sent) allIn();
      }
    } catch (e: unknown) {
      // Closing the socket ends the loop; anything else is a real failure of the flood.
      if (!s.closed) throw e;
    }
  });

  const t0 = performance.now();
  const tickMs = 10;
  const perTick = Math.max(1, Math.round((opts.rate * tickMs) / 1000));
  // A fixed number of requests, so the total does not depend on how busy the machine is.
  const total = Math.round((opts.rate * opts.durationMs) / 1000);
  let n = 0;
  while (n < total) {
    // Catch up to the schedule (a late tick sends more), so the rate holds on a busy machine.
    const due = Math.min(total, Math.floor(((performance.now() - t0) / tickMs + 1) * perTick));
    while (n < due) {
      const s = sockets[n % sockets.length];
      const analyst = n % 2 === 0 || opts.preview !== undefined ? opts.targetAnalyst : `nobody-${n % 97}`;
      const pv = opts.preview;
      const req =
        pv === undefined
          ? { v: 1, id: `f${n}`, analyst, token: randomBytes(18).toString("base64url"), body: { op: "spend", dataset: opts.dataset } }
          : {
              v: 1,
              id: `f${n}`,
              analyst,
              token: pv.token,
              body: {
                op: "preview",
                // A fresh epsilon for every request: 0.0100001, 0.0100002, ...
                plan:
                  pv.accuracyFirst === undefined
                    ? { v: 1, dataset: opts.dataset, measure: pv.measure, privacy: { epsilon: `0.01${String(n + 1).padStart(7, "0")}` } }
                    : // accuracy first at a fresh half-width each: every preview searches for its cost
                      { v: 1, dataset: opts.dataset, measure: pv.measure, privacy: { within: 2 + n / 1000, atMost: "1e9" }, confidence: pv.accuracyFirst.confidence },
                ...(pv.assumeCount !== undefined ? { assumeCount: pv.assumeCount } : {}),
              },
            };
      n++;
      try {
        await s.send(Buffer.from(JSON.stringify(req), "utf8"));
        sent++;
      } catch (e: unknown) {
        if (e instanceof Error && (e as { code?: string }).code === "EAGAIN") notQueued++;
        else throw e;
      }
    }
    if (n < total) await delay(tickMs);
  }
  const sendMs = performance.now() - t0;
  sending = false;
  if (received >= sent) allIn();
  await Promise.race([done, delay(opts.drainMs)]);
  for (const s of sockets) s.close();
  await Promise.all(receivers);
  return { sent, notQueued, replies, unanswered: sent - received, sendMs };
}

// Run as a child process: `node flood-driver.js '<FloodOptions as JSON>'` prints one JSON result line.
if (import.meta.url === pathToFileURL(process.argv[1] ?? "").href) {
  runFlood(JSON.parse(process.argv[2] ?? "{}") as FloodOptions).then(
    (r) => process.stdout.write(`${JSON.stringify(r)}\n`),
    (e: unknown) => {
      process.stderr.write(`flood failed: ${e instanceof Error ? (e.stack ?? e.message) : String(e)}\n`);
      process.exitCode = 1;
    },
  );
}
