/**
 * Coverage of the regression's and the correlation's simulated error bars (docs/methods.md §12.2,
 * §18, §19): 1,000 releases each with independent noise on the penguins of vega-datasets (each row
 * its own unit), at an epsilon where the intervals are informative. The true values are computed
 * outside the project, by numpy.linalg.lstsq and numpy.corrcoef (Debian python3-numpy) on the same
 * clamped, gridded, complete rows; the error bars are noise-only, so those are what they must cover.
 * The count of covering intervals must lie in the two-sided 99.9% binomial band around the nominal
 * confidence (binomialBand, test/core/stats.ts; the band's construction is docs/methods.md §12.2).
 *
 * Driven at the finisher level for speed (the same function the worker pool runs): the recipe and
 * the exact sums come from the real piece and its real SQL, captured once.
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { Bits, seededBytes } from "../../runtime/core/index.js";
import { Allocator } from "../../runtime/curator/aggregates/budget.js";
import type { Cpu, Piece } from "../../runtime/curator/aggregates/common.js";
import { FINISHERS, type MomentsRecipe } from "../../runtime/curator/aggregates/finishers.js";
import { correlationPiece, regressionPiece } from "../../runtime/curator/aggregates/regression.js";
import { schemaOf } from "../../runtime/curator/engines/types.js";
import type { ReleaseRow } from "../../runtime/protocol/messages.js";
import { binomialBand } from "../core/stats.js";
import { type Opened, open } from "../fixtures/curator-helpers.js";
import { SPECIES, clampedRows, numpyCorr, numpyOls, penguinPolicy } from "../fixtures/penguins.js";

const RELEASES = 1000;
const CONFIDENCE = 0.9;

let o: Opened;
beforeAll(async () => {
  o = await open(penguinPolicy(undefined, false));
});
afterAll(async () => {
  await o.engine.close();
});

/** The recipe and exact sums a piece hands to its finisher (real SQL, no noise). */
async function captured(piece: Piece): Promise<{ recipe: MomentsRecipe; data: bigint[][] }> {
  let got: { recipe: MomentsRecipe; data: bigint[][] } | undefined;
  const cpu = { finish: async (_: string, recipe: unknown, data: unknown) => ((got = { recipe: recipe as MomentsRecipe, data: data as bigint[][] }), []) } as unknown as Cpu;
  await piece.run(o.engine, cpu);
  return got!;
}

function covers(row: ReleaseRow, truth: number): boolean {
  if (row.value === null) return false;
  const lowOk = row.low === null || Number(row.low) <= truth;
  const highOk = row.high === null || truth <= Number(row.high);
  return lowOk && highOk;
}

describe(`coverage over ${RELEASES} releases at ${CONFIDENCE} confidence (binomial band, 99.9%)`, () => {
  it("regression of mass on flipper and species, epsilon 20: each coefficient and R^2", async () => {
    const d = o.policy.datasets.get("d")!;
    const alloc = new Allocator(d, { epsilon: "20" }, CONFIDENCE);
    const { recipe, data } = await captured(regressionPiece(alloc, { t: schemaOf(o.policy.datasets.get("d")!), where: undefined }, "mass", ["flipper", "species"], []));
    expect(recipe.draws).toBe(1000);
    const rows = clampedRows(["flipper", "mass"]);
    const x = rows.map((p) => [p.values[0], ...SPECIES.slice(1).map((s) => (p.species === s ? 1 : 0))]);
    // Source: numpy.linalg.lstsq; R^2 from numpy's residuals.
    const beta = numpyOls(x, rows.map((p) => p.values[1]));
    const yv = rows.map((p) => p.values[1]);
    const fit = x.map((xi) => beta[0] + xi.reduce((s, v, i) => s + v * beta[i + 1], 0));
    const mean = yv.reduce((s, v) => s + v, 0) / yv.length;
    const r2 = 1 - yv.reduce((s, v, i) => s + (v - fit[i]) ** 2, 0) / yv.reduce((s, v) => s + (v - mean) ** 2, 0);
    const truth = [...beta, r2];
    const hits = truth.map(() => 0);
    let unavailable = 0;
    for (let rep = 0; rep < RELEASES; rep++) {
      const out = FINISHERS.moments(recipe, data, new Bits(seededBytes(`reg-${rep}`)));
      if (out[0].value === null) unavailable++;
      truth.forEach((t, i) => {
        if (covers(out[i], t)) hits[i]++;
      });
    }
    const band = binomialBand(RELEASES, CONFIDENCE, 0.001);
    console.log(`regression coverage ${hits.join(", ")} of ${RELEASES} (band ${band.lo}-${band.hi}); unavailable ${unavailable}`);
    expect(unavailable).toBeLessThanOrEqual(5);
    for (const h of hits) {
      expect(h).toBeGreaterThanOrEqual(band.lo);
      expect(h).toBeLessThanOrEqual(band.hi);
    }
  }, 600_000);

  it("correlation of flipper, bill and mass, epsilon 5: each pair", async () => {
    const d = o.policy.datasets.get("d")!;
    const alloc = new Allocator(d, { epsilon: "5" }, CONFIDENCE);
    const names = ["flipper", "bill", "mass"] as const;
    const { recipe, data } = await captured(correlationPiece(alloc, { t: schemaOf(o.policy.datasets.get("d")!), where: undefined }, [...names]));
    const rows = clampedRows([...names]);
    // Source: numpy.corrcoef.
    const ref = numpyCorr(names.map((_, i) => rows.map((x) => x.values[i])));
    const truth = [ref[0][1], ref[0][2], ref[1][2]];
    const hits = truth.map(() => 0);
    for (let rep = 0; rep < RELEASES; rep++) {
      const out = FINISHERS.moments(recipe, data, new Bits(seededBytes(`corr-${rep}`)));
      truth.forEach((t, i) => {
        if (covers(out[i], t)) hits[i]++;
      });
    }
    const band = binomialBand(RELEASES, CONFIDENCE, 0.001);
    console.log(`correlation coverage ${hits.join(", ")} of ${RELEASES} (band ${band.lo}-${band.hi})`);
    for (const h of hits) {
      expect(h).toBeGreaterThanOrEqual(band.lo);
      expect(h).toBeLessThanOrEqual(band.hi);
    }
  }, 600_000);
});
