/**
 * Regression and correlation against outside references on open data (docs/methods.md §18, §19):
 * the penguins table of vega-datasets (test/fixtures/penguins.ts), coefficients by numpy's least
 * squares and correlations by numpy.corrcoef (Debian python3-numpy, run as a child process), on the
 * same clamped, gridded, complete rows. At a huge epsilon the noise is 0 except with negligible
 * probability, so the release must match numpy closely and numpy must lie inside the error bars.
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { Bits, seededBytes } from "../../runtime/core/index.js";
import type { QueryPlan } from "../../runtime/protocol/messages.js";
import { type Opened, open } from "../fixtures/curator-helpers.js";
import { SPECIES, clampedRows, numpyCorr, numpyOls, penguinPolicy } from "../fixtures/penguins.js";

let o: Opened;
beforeAll(async () => {
  o = await open(penguinPolicy());
});
afterAll(async () => {
  await o.engine.close();
});

const plan = (measure: QueryPlan["measure"], privacy: QueryPlan["privacy"] = { epsilon: "1000000000" }, confidence = 0.95): QueryPlan => ({
  v: 1,
  dataset: "d",
  measure,
  privacy,
  confidence,
});

function close(a: number, b: number, rel: number): boolean {
  return Math.abs(a - b) <= rel * Math.max(1, Math.abs(b));
}

describe("regression on the penguins of vega-datasets against numpy.linalg.lstsq", () => {
  it("mass on flipper and bill (numeric predictors): coefficients match and lie within their error bars", async () => {
    const r = await o.answerer.prepare("ada", plan({ kind: "regression", response: "mass", predictors: ["flipper", "bill"] })).compute(new Bits(seededBytes(1)));
    const rows = clampedRows(["flipper", "bill", "mass"]);
    // Source: numpy.linalg.lstsq (Debian python3-numpy) on the same clamped, gridded, complete rows.
    const ref = numpyOls(rows.map((x) => x.values.slice(0, 2)), rows.map((x) => x.values[2]));
    const coef = r.rows.filter((x) => x.stat === "coefficient");
    expect(coef.map((x) => x.key[0])).toEqual(["(intercept)", "flipper", "bill"]);
    coef.forEach((x, i) => {
      expect(close(Number(x.value), ref[i], 1e-6)).toBe(true);
      expect(Number(x.low)).toBeLessThanOrEqual(ref[i]);
      expect(Number(x.high)).toBeGreaterThanOrEqual(ref[i]);
    });
    const n = r.rows.find((x) => x.stat === "count")!;
    expect(Number(n.value)).toBe(rows.length);
  });

  it("mass on flipper and species (indicators against Adelie): coefficients match numpy", async () => {
    const r = await o.answerer.prepare("ada", plan({ kind: "regression", response: "mass", predictors: ["flipper", "species"] })).compute(new Bits(seededBytes(2)));
    const rows = clampedRows(["flipper", "mass"]);
    const x = rows.map((p) => [p.values[0], ...SPECIES.slice(1).map((s) => (p.species === s ? 1 : 0))]);
    const ref = numpyOls(x, rows.map((p) => p.values[1]));
    const coef = r.rows.filter((x) => x.stat === "coefficient");
    expect(coef.map((x) => x.key[0])).toEqual(["(intercept)", "flipper", "species: Chinstrap (vs Adelie)", "species: Gentoo (vs Adelie)"]);
    coef.forEach((row, i) => {
      expect(close(Number(row.value), ref[i], 1e-6)).toBe(true);
      expect(Number(row.low) <= ref[i] && ref[i] <= Number(row.high)).toBe(true);
    });
  });
});

describe("correlation on the penguins against numpy.corrcoef", () => {
  it("flipper, bill, depth, mass: every pair matches and lies within its error bar", async () => {
    const names = ["flipper", "bill", "depth", "mass"] as const;
    const r = await o.answerer.prepare("ada", plan({ kind: "correlation", columns: [...names] })).compute(new Bits(seededBytes(3)));
    const rows = clampedRows([...names]);
    // Source: numpy.corrcoef (Debian python3-numpy) on the same clamped, gridded, complete rows.
    const ref = numpyCorr(names.map((_, i) => rows.map((x) => x.values[i])));
    const pairs = r.rows.filter((x) => x.stat === "correlation");
    expect(pairs).toHaveLength(6);
    for (const p of pairs) {
      const i = names.indexOf(p.key[0] as (typeof names)[number]);
      const j = names.indexOf(p.key[1] as (typeof names)[number]);
      expect(close(Number(p.value), ref[i][j], 1e-9)).toBe(true);
      expect(Number(p.low) <= ref[i][j] + 1e-12 && ref[i][j] - 1e-12 <= Number(p.high)).toBe(true);
    }
  });
});
