/**
 * A wrong-token flood against a real curator process over tcp+CURVE on 127.0.0.1: 1,000 requests
 * per second for 10 s from 8 connections (bench/flood-driver.ts), half of them naming the analyst
 * who is working meanwhile. That analyst keeps asking `spend` the whole time.
 *
 * Pass: every one of the analyst's requests is answered, none refused; every flood request sent is
 * answered or refused (none dropped), none accepted; the curator's resident memory stays under a
 * stated bound; an analyst who had not signed in before can sign in once the flood is over.
 * Latency is not asserted here (bench/flood.ts measures it).
 *
 * Then an analyst's own flood: the second analyst, signed in, sends previews (free: they read no
 * data) at a fresh epsilon each, with an assumed count so each also computes a std's expected
 * error. Pass: the first analyst is answered throughout; every preview is answered or refused as
 * busy, and some are refused (the curator holds at most MAX_QUEUED_PREVIEWS of one analyst's
 * previews; before that bound every one was taken and computed on the curator's loop).
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import fs from "node:fs";
import { CuratorProcess } from "../../bench/curator-process.js";
import { runFlood, type FloodOptions, type FloodResult } from "../../bench/flood-driver.js";
import { CuratorClient } from "../../runtime/client/client.js";
import { MAX_QUEUED_PREVIEWS } from "../../runtime/curator/service.js";
import { makeRelWorkspace, type RelWorkspace } from "./fixtures.js";

const RATE = 1_000;
const DURATION_MS = 10_000;
/**
 * The curator's resident memory during the flood must stay below this. Measured: ~140 MiB before
 * the flood and a peak of ~210 MiB during it (bench/flood.ts on the 2-core test machine); the
 * bound leaves room for a busier machine but not for a backlog that grows with the flood.
 */
const RSS_BOUND_BYTES = 400 * 2 ** 20;

let ws: RelWorkspace;
let proc: CuratorProcess;

beforeAll(async () => {
  ws = makeRelWorkspace({ prefix: "flood", analysts: 2, cap: "10", rows: 300 });
  proc = await CuratorProcess.start({ policyFile: ws.policyFile, listen: "tcp://127.0.0.1:0" });
});

afterAll(async () => {
  await proc?.stop();
  if (ws) fs.rmSync(ws.dir, { recursive: true, force: true });
});

/**
 * Runs a flood while `worker` keeps asking `spend` (calling `onTick` after each answer); resolves
 * with the flood's result and the worker's answers and failures once both have stopped.
 */
async function workWhile(
  client: CuratorClient,
  worker: string,
  opts: FloodOptions,
  onTick: () => void = () => undefined,
): Promise<{ flood: FloodResult; legit: { answered: number; failed: string[] } }> {
  let flooding = true;
  const legit = { answered: 0, failed: [] as string[] };
  const work = (async () => {
    while (flooding) {
      try {
        expect((await client.spend(ws.dataset)).analyst).toBe(worker);
        legit.answered++;
      } catch (e: unknown) {
        legit.failed.push(e instanceof Error ? `${e.name}: ${e.message}` : String(e));
      }
      onTick();
    }
  })();
  try {
    return { flood: await runFlood(opts), legit };
  } finally {
    flooding = false;
    await work;
  }
}

describe("wrong-token flood over tcp+CURVE", () => {
  it("answers the working analyst throughout and answers or refuses every flood request", { timeout: 180_000 }, async () => {
    const curveServerKey = proc.ready.curvePublicKey;
    expect(curveServerKey).toBeDefined();
    const [worker, latecomer] = ws.analysts;
    const client = await CuratorClient.connect({ address: proc.address, analyst: worker, token: ws.tokens[worker], curveServerKey, timeoutMs: 60_000 });
    try {
      await client.spend(ws.dataset); // signs in once before the flood

      let rssPeak = 0;
      const { flood, legit } = await workWhile(
        client,
        worker,
        {
          address: proc.address,
          curveServerKey,
          sockets: 8,
          rate: RATE,
          durationMs: DURATION_MS,
          drainMs: 30_000,
          targetAnalyst: worker,
          dataset: ws.dataset,
        },
        () => (rssPeak = Math.max(rssPeak, proc.memory()?.rss ?? 0)),
      );
      rssPeak = Math.max(rssPeak, proc.memory()?.rss ?? 0);

      expect(legit.failed).toEqual([]);
      expect(legit.answered).toBeGreaterThan(10);
      // RATE per second for DURATION_MS (paced; a late tick sends more), every one queued to the curator...
      expect(flood.notQueued).toBe(0);
      expect(flood.sent).toBe(RATE * (DURATION_MS / 1000));
      // ... and every one answered or refused, none accepted.
      expect(flood.unanswered).toBe(0);
      expect(flood.replies.ok ?? 0).toBe(0);
      const kinds = Object.keys(flood.replies).sort();
      expect(kinds.every((k) => k === "unauthorized" || k === "busy")).toBe(true);
      expect(Object.values(flood.replies).reduce((a, b) => a + b, 0)).toBe(flood.sent);
      expect(rssPeak).toBeGreaterThan(0);
      expect(rssPeak).toBeLessThan(RSS_BOUND_BYTES);
    } finally {
      await client.close();
    }

    // The flood has stopped: an analyst who never signed in is checked and let in.
    const late = await CuratorClient.connect({ address: proc.address, analyst: latecomer, token: ws.tokens[latecomer], curveServerKey, timeoutMs: 60_000 });
    try {
      expect((await late.spend(ws.dataset)).analyst).toBe(latecomer);
    } finally {
      await late.close();
    }
  });

  it("answers the working analyst while another analyst floods with previews, and bounds the flooder's queue", { timeout: 180_000 }, async () => {
    const curveServerKey = proc.ready.curvePublicKey;
    const [worker, flooder] = ws.analysts;
    const client = await CuratorClient.connect({ address: proc.address, analyst: worker, token: ws.tokens[worker], curveServerKey, timeoutMs: 60_000 });
    try {
      await client.spend(ws.dataset);
      const { flood, legit } = await workWhile(client, worker, {
        address: proc.address,
        curveServerKey,
        sockets: 8,
        rate: 400,
        durationMs: 3_000,
        drainMs: 60_000,
        targetAnalyst: flooder,
        dataset: ws.dataset,
        preview: { token: ws.tokens[flooder], measure: { kind: "std", column: "amount" }, assumeCount: 1_000_000 },
      });
      expect(legit.failed).toEqual([]);
      expect(legit.answered).toBeGreaterThan(10);
      expect(flood.notQueued).toBe(0);
      expect(flood.sent).toBe(1_200);
      expect(flood.unanswered).toBe(0);
      expect(Object.keys(flood.replies).every((k) => k === "ok" || k === "busy")).toBe(true);
      expect(Object.values(flood.replies).reduce((a, b) => a + b, 0)).toBe(flood.sent);
      // At least the first MAX_QUEUED_PREVIEWS were taken; a preview with its ratio search takes
      // far longer than 1/400 s, so the flooder's queue filled and the rest were refused.
      expect(flood.replies.ok ?? 0).toBeGreaterThanOrEqual(MAX_QUEUED_PREVIEWS);
      expect(flood.replies.busy ?? 0).toBeGreaterThan(0);
    } finally {
      await client.close();
    }
    // The flooder is served again once its queue has drained.
    const again = await CuratorClient.connect({ address: proc.address, analyst: flooder, token: ws.tokens[flooder], curveServerKey, timeoutMs: 60_000 });
    try {
      const pv = await again.preview({ v: 1, dataset: ws.dataset, measure: { kind: "std", column: "amount" }, privacy: { epsilon: "0.25" } }, 1000);
      expect(pv.ratioErrors?.length).toBe(1);
    } finally {
      await again.close();
    }
  });
});
