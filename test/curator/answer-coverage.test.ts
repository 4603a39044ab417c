/**
 * Coverage of released intervals through the whole answering path (SQL, bounding, noise,
 * intervals), by the procedure of docs/methods.md §12.2: R releases with independent (seeded) noise on
 * data that needs no clamping; count how many intervals contain the noise-free value; accept when
 * the count is at least the one-sided 99.9% lower limit of Binomial(R, nominal), computed with
 * jstat. The discrete mechanisms over-cover (integer half-widths) and the pivot intervals cover at
 * least nominally, so "at least nominal" is the right test (docs/methods.md §12.2 cautions). Fixed seeds keep the test deterministic.
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { Bits, seededBytes } from "../../runtime/core/index.js";
import type { QueryPlan } from "../../runtime/protocol/messages.js";
import { jstat } from "../core/stats.js";
import { type Opened, open } from "../fixtures/curator-helpers.js";

const R = 300;
const NOMINAL = 0.95;

/** Smallest x with P(X < x) > 0.001 for X ~ Binomial(R, p): fail only when the count is below it. */
function lowerLimit(r: number, p: number): number {
  let x = 0;
  while (jstat.binomial.cdf(x, r, p) <= 0.001) x++;
  return x;
}

let ctx: Opened;
beforeAll(async () => {
  ctx = await open();
});
afterAll(async () => {
  await ctx.engine.close();
});

async function coverage(plan: QueryPlan, truth: number): Promise<number> {
  const prepared = ctx.answerer.prepare("ada", plan);
  let covered = 0;
  for (let i = 0; i < R; i++) {
    const row = (await prepared.compute(new Bits(seededBytes(`coverage-${i}`)))).rows[0];
    if (Number(row.low) <= truth && truth <= Number(row.high)) covered++;
  }
  return covered;
}

describe("interval coverage through the answering path (docs/methods.md §12.2)", () => {
  const limit = lowerLimit(R, NOMINAL);

  it("count on the row-level zCDP dataset (discrete Gaussian)", async () => {
    const truth = (await ctx.answerer.prepare("ada", { v: 1, dataset: "rows", measure: { kind: "count" }, privacy: { rho: "100000000" } }).compute(new Bits(seededBytes(0)))).rows[0];
    const covered = await coverage({ v: 1, dataset: "rows", measure: { kind: "count" }, privacy: { rho: "1/2" } }, Number(truth.value));
    expect(covered).toBeGreaterThanOrEqual(limit);
  });

  it("mean on the unit-bounded pure dataset (pivot interval)", async () => {
    // Every kept row's wait lies inside [0, 240] except one clamped row, which is clamped the same
    // way in the noise-free value; the noise-free mean is read at a huge epsilon.
    const exact = { v: 1, dataset: "visits", where: { op: "lt", column: "age", value: 101 }, measure: { kind: "mean", column: "wait_minutes" } } as const;
    const truth = (await ctx.answerer.prepare("ada", { ...exact, privacy: { epsilon: "100000000" } }).compute(new Bits(seededBytes(0)))).rows[0];
    const covered = await coverage({ ...exact, privacy: { epsilon: "2" } } as QueryPlan, Number(truth.value));
    expect(covered).toBeGreaterThanOrEqual(limit);
  });
});
