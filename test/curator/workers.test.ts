/**
 * The worker pool (runtime/curator/workers/): finishers run on real worker threads (the built
 * dist/ entry), a job past its deadline is refused and its worker replaced, and the pool keeps
 * serving afterwards. Needs `npm run build` (the test suite's script builds first).
 */
import { afterEach, describe, expect, it } from "vitest";
import { Rational } from "../../runtime/core/index.js";
import { TimeLimitError, UnreachableError } from "../../runtime/errors.js";
import type { CellsRecipe, QuantileRecipe } from "../../runtime/curator/aggregates/finishers.js";
import { WorkerPool } from "../../runtime/curator/workers/pool.js";
import type { RatioShape } from "../../runtime/curator/aggregates/ratio-preview.js";
import { fromWire, toWire } from "../../runtime/curator/workers/wire.js";
import { firstSlot, replySlot } from "../../runtime/curator/workers/pacing.js";

const pools: WorkerPool[] = [];
afterEach(async () => {
  for (const p of pools.splice(0)) await p.close();
});

const COUNT: CellsRecipe = {
  labels: [["a", "b"]],
  stat: "count",
  column: null,
  law: { family: "discrete-laplace", scale: Rational.of(1n) },
  step: Rational.ONE,
  h: Rational.of(3n),
};

/**
 * A quantile draw at a small epsilon: 2001 candidates 10^7 rows apart at epsilon 2 x 10^-6, so the
 * dyadic base is beta = 1 - 2^-20, the median's cost (10^7) is under the cost cap (about 4.8 x 10^7)
 * and every other candidate is 2 x 10^7 or more above it. Each of ~2001 expected proposals would be
 * rejected only after ~10^6 Bernoulli trials, so the draw takes the power path (quantile.ts
 * drawByPowers), about 10 ms (before it, minutes).
 */
const ENDLESS: QuantileRecipe = {
  column: "x",
  candidates: Array.from({ length: 2001 }, (_, j) => BigInt(j)),
  step: Rational.ONE,
  parts: [{ p: Rational.of(1n, 2n), stat: "p50", epsilon: Rational.parse("2e-6") }],
  // the value-interval tree (docs/methods.md §20): 4095 quick draws, a small part of the job
  treeLaw: { family: "discrete-laplace", scale: Rational.of(12n) },
  confidence: 0.95,
};
/**
 * Two thousand such draws in one job (a test recipe; a plan may ask for 20): each makes its padded
 * work whatever the luck, so the job takes many seconds (about 18 s on an idle machine here) and
 * the tests below stop it at their deadlines.
 */
const ENDLESS_MANY: QuantileRecipe = { ...ENDLESS, parts: Array.from({ length: 2000 }, (_, i) => ({ ...ENDLESS.parts[0], stat: `p50 #${i + 1}` })) };
const ENDLESS_DATA: [bigint, bigint][] = Array.from({ length: 2001 }, (_, j) => [BigInt(j + 1), 10_000_000n]);

describe("curator worker pool", () => {
  it("keeps Rationals exact across the thread boundary", () => {
    const x = { a: [Rational.of(1n, 3n), 5n], b: { c: Rational.parse("-2.5") } };
    const back = fromWire(structuredClone(toWire(x))) as typeof x;
    expect(back.a[0]).toBeInstanceOf(Rational);
    expect((back.a[0] as Rational).eq(Rational.of(1n, 3n))).toBe(true);
    expect(back.a[1]).toBe(5n);
    expect(back.b.c.toString()).toBe("-5/2");
  });

  it("runs finishers on worker threads", async () => {
    const pool = new WorkerPool(2);
    pools.push(pool);
    const rows = await pool.run("cells", COUNT, [[10n], [20n]], performance.now() + 30_000, 30_000);
    expect(rows.map((r) => r.key)).toEqual([["a"], ["b"]]);
    for (const r of rows) expect(Number.isInteger(Number(r.value))).toBe(true);
  });

  it("refuses a job past its deadline, replaces its worker, and serves the next job", async () => {
    const pool = new WorkerPool(1);
    pools.push(pool);
    const t0 = performance.now();
    const refused = await pool.run("quantile", ENDLESS_MANY, ENDLESS_DATA, performance.now() + 300, 300).then(
      () => null,
      (e: unknown) => e,
    );
    expect(refused).toBeInstanceOf(TimeLimitError);
    expect((refused as Error).message).toBe("this release took longer than the curator's limit of 0.3 s; nothing was spent");
    // Refused at the deadline, not when the draw would have ended (generous bound: catches a hang).
    expect(performance.now() - t0).toBeLessThan(10_000);
    // The one worker was terminated and replaced: the pool still answers.
    const rows = await pool.run("cells", COUNT, [[1n], [2n]], performance.now() + 30_000, 30_000);
    expect(rows).toHaveLength(2);
  });

  it("refuses queued jobs whose deadline passes while they wait", async () => {
    const pool = new WorkerPool(1);
    pools.push(pool);
    const first = pool.run("quantile", ENDLESS_MANY, ENDLESS_DATA, performance.now() + 2000, 2000).catch((e: unknown) => e);
    const queued = await pool.run("cells", COUNT, [[1n], [2n]], performance.now() + 200, 200).catch((e: unknown) => e);
    expect(queued).toBeInstanceOf(TimeLimitError);
    expect(await first).toBeInstanceOf(TimeLimitError);
  });

  it("gives a waiting release the next worker before a preview's ratio job queued earlier", async () => {
    const pool = new WorkerPool(1);
    pools.push(pool);
    // Hold the one worker; its job is refused at its deadline and the worker replaced.
    const blocker = pool.run("quantile", ENDLESS_MANY, ENDLESS_DATA, performance.now() + 1500, 1500).catch((e: unknown) => e);
    const order: string[] = [];
    const shape: RatioShape = {
      stat: "mean",
      column: "x",
      lower: Rational.ZERO,
      upper: Rational.of(100n),
      centre: Rational.of(50n),
      half: Rational.of(1n, 2n),
      width: 100n,
      confidence: 0.95,
      countLaw: { family: "discrete-laplace", scale: Rational.of(10n) },
      sumLaw: { family: "discrete-laplace", scale: Rational.of(1000n) },
    };
    const preview = pool.ratioError({ shape, count: 1000, from: "analyst" }, performance.now() + 60_000, 60_000).then((r) => {
      order.push("preview");
      return r;
    });
    const release = pool.run("cells", COUNT, [[1n], [2n]], performance.now() + 60_000, 60_000).then((r) => {
      order.push("release");
      return r;
    });
    expect(await blocker).toBeInstanceOf(TimeLimitError);
    expect(await release).toHaveLength(2);
    expect((await preview).stat).toBe("mean");
    expect(order).toEqual(["release", "preview"]);
  });

  it("holds each owner to all workers but one: another analyst's job takes the free worker before the first owner's second job", async () => {
    const pool = new WorkerPool(2);
    pools.push(pool);
    expect(pool.share).toBe(1);
    // ada's two long jobs (on two datasets, say) and then bea's short one, all queued at once.
    const ada1 = pool.run("quantile", ENDLESS_MANY, ENDLESS_DATA, performance.now() + 1500, 1500, "ada").catch((e: unknown) => e);
    const ada2 = pool.run("quantile", ENDLESS_MANY, ENDLESS_DATA, performance.now() + 1500, 1500, "ada").catch((e: unknown) => e);
    expect(pool.busy()).toEqual(["ada"]); // the second worker stays free: ada holds her share
    const bea = pool.run("cells", COUNT, [[1n], [2n]], performance.now() + 1000, 1000, "bea");
    expect(pool.busy().sort()).toEqual(["ada", "bea"]);
    // bea is answered well inside her deadline; without the share ada's second job would hold the
    // second worker until 1.5 s and bea's job would be refused at 1 s.
    expect(await bea).toHaveLength(2);
    // ada's second job then runs on the freed worker (and both of hers stop at their deadline).
    expect(await ada1).toBeInstanceOf(TimeLimitError);
    expect(await ada2).toBeInstanceOf(TimeLimitError);
  });

  it("with one worker there is no share: one owner's jobs run one after another", async () => {
    const pool = new WorkerPool(1);
    pools.push(pool);
    expect(pool.share).toBe(1);
    const rows = await Promise.all([1, 2, 3].map(() => pool.run("cells", COUNT, [[1n], [2n]], performance.now() + 30_000, 30_000, "ada")));
    expect(rows.map((r) => r.length)).toEqual([2, 2, 2]);
  });

  it("refuses everything once closed", async () => {
    const pool = new WorkerPool(1);
    const running = pool.run("quantile", ENDLESS_MANY, ENDLESS_DATA, performance.now() + 60_000, 60_000).catch((e: unknown) => e);
    await pool.close();
    expect(await running).toBeInstanceOf(UnreachableError);
    await expect(pool.run("cells", COUNT, [[1n], [2n]], performance.now() + 1000, 1000)).rejects.toBeInstanceOf(UnreachableError);
  });

  it("paces replies on a public ladder of slots", () => {
    // Work inside the first slot leaves at the first slot; longer work at the next doubling.
    expect(replySlot(3, 50, 30_000)).toBe(50);
    expect(replySlot(49.9, 50, 30_000)).toBe(50);
    expect(replySlot(50.1, 50, 30_000)).toBe(100);
    expect(replySlot(20_000, 50, 30_000)).toBe(25_600);
    expect(replySlot(29_000, 50, 30_000)).toBe(30_000);
    expect(replySlot(7, 0, 30_000)).toBe(7); // pacing off
    // The first slot grows with public size only: rounds of work and released rows.
    expect(firstSlot(50, 1, 1)).toBe(50);
    expect(firstSlot(50, 9, 20)).toBe(450);
    expect(firstSlot(50, 1, 14_400)).toBe(750);
  });
});
