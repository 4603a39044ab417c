/**
 * What a regression or correlation ask is refused for, and that a refusal reads no data and spends
 * nothing (runtime/protocol/limits.ts maxDesignColumns and maxCorrelationColumns; docs/methods.md §18).
 * Also the zCDP path: a rho ask gets discrete Gaussian noise on every sum, and at a huge rho the
 * coefficients still match numpy's least squares (Debian python3-numpy) on the penguins.
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { Bits, seededBytes } from "../../runtime/core/index.js";
import { PLAN_LIMITS } from "../../runtime/protocol/limits.js";
import type { QueryPlan } from "../../runtime/protocol/messages.js";
import { parsePlan } from "../../runtime/protocol/schema.js";
import { type Opened, open, policyWith, tempPolicy } from "../fixtures/curator-helpers.js";
import { clampedRows, numpyOls, penguinPolicy } from "../fixtures/penguins.js";

let o: Opened;
let z: Opened;
let wide: Opened;
beforeAll(async () => {
  o = await open(penguinPolicy());
  z = await open(penguinPolicy(`{ mode: zcdp, cap: { epsilon: "1000000000", delta: "1e-6" } }`));
  // 13 category levels: one predictor of 12 indicators (13 design columns with the intercept).
  const levels = Array.from({ length: 13 }, (_, i) => `L${i}`);
  wide = await open(
    tempPolicy(
      policyWith(`    source: data.csv
    accounting: { mode: pure, cap: { epsilon: "10" } }
    analysts: [ada]
    columns:
      y:    { type: number, range: [0, 10], step: "1" }
      when: { type: date, range: ["2025-01-01", "2025-12-31"] }
      k:    { type: category, values: [${levels.join(", ")}] }
      one:  { type: category, values: [only] }
`),
      { "data.csv": "y,when,k,one\n1,2025-01-02,L1,only\n2,2025-02-03,L2,only\n" },
    ),
  );
});
afterAll(async () => {
  for (const x of [o, z, wide]) await x.engine.close();
});

const plan = (measure: unknown, extra: Record<string, unknown> = {}): QueryPlan => ({ v: 1, dataset: "d", measure, privacy: { epsilon: "1" }, ...extra }) as QueryPlan;

function refused(x: Opened, p: QueryPlan, message: RegExp): void {
  x.statements.length = 0;
  expect(() => x.answerer.prepare("ada", p)).toThrow(message);
  expect(x.statements).toEqual([]);
}

describe("refusals at parse time (structure) and prepare time (policy), before any SQL or debit", () => {
  it("more predictors than the design limit allows is refused by the schema", () => {
    const predictors = Array.from({ length: PLAN_LIMITS.maxDesignColumns }, (_, i) => `c${i}`);
    expect(() => parsePlan(plan({ kind: "regression", response: "y", predictors }))).toThrow(/at most 11 predictors/);
    expect(() => parsePlan(plan({ kind: "regression", response: "y", predictors: [] }))).toThrow(/at least one predictor/);
    expect(() => parsePlan(plan({ kind: "correlation", columns: ["a"] }))).toThrow(/at least two columns/);
    expect(() => parsePlan(plan({ kind: "correlation", columns: Array.from({ length: 13 }, (_, i) => `c${i}`) }))).toThrow(/at most 12 columns/);
    expect(() => parsePlan(plan({ kind: "regression", response: "y", predictors: ["k"], extra: 1 }))).toThrow(/unknown key/);
  });

  it("a category whose levels push the design past the limit is refused at prepare", () => {
    refused(wide, plan({ kind: "regression", response: "y", predictors: ["k"] }), /design has 13 columns.*maxDesignColumns/);
  });

  it("bad predictors, responses and reference levels are refused", () => {
    refused(wide, plan({ kind: "regression", response: "y", predictors: ["when"] }), /date columns cannot be predictors/);
    refused(wide, plan({ kind: "regression", response: "k", predictors: ["y"] }), /numeric response/);
    refused(wide, plan({ kind: "regression", response: "y", predictors: ["one"] }), /fewer than two values/);
    refused(o, plan({ kind: "regression", response: "mass", predictors: ["flipper", "flipper"] }), /again/);
    refused(o, plan({ kind: "regression", response: "mass", predictors: ["mass"] }), /again/);
    refused(o, plan({ kind: "regression", response: "mass", predictors: ["species"], reference: [{ column: "species", value: "Emperor" }] }), /not a declared value/);
    refused(o, plan({ kind: "regression", response: "mass", predictors: ["flipper"], reference: [{ column: "species", value: "Gentoo" }] }), /not a predictor/);
    refused(o, plan({ kind: "regression", response: "mass", predictors: ["nope"] }), /unknown column/);
    refused(o, plan({ kind: "correlation", columns: ["mass", "species"] }), /numeric columns/);
    refused(o, plan({ kind: "correlation", columns: ["mass", "mass"] }), /twice/);
  });

  it("accuracy-first asks, grouping and confidences above 0.99 are refused", () => {
    refused(o, plan({ kind: "regression", response: "mass", predictors: ["flipper"] }, { privacy: { within: 1 } }), /accuracy-first/);
    refused(o, plan({ kind: "correlation", columns: ["mass", "flipper"] }, { groupBy: [{ column: "species" }] }), /cannot be grouped/);
    refused(o, plan({ kind: "correlation", columns: ["mass", "flipper"] }, { confidence: 0.995 }), /up to 0.99/);
  });

  it("a preview prices every released sum and reads no data", async () => {
    o.statements.length = 0;
    const p = await o.answerer.preview("ada", plan({ kind: "regression", response: "mass", predictors: ["flipper", "species"] }));
    // factors 1, flipper, Chinstrap, Gentoo, mass: 15 pairs less 1 structural zero and 2 aliases.
    expect(p.halfWidths).toHaveLength(12);
    expect(p.prepared.cost.toString()).toBe("1");
    expect(o.statements).toEqual([]);
  });
});

describe("zCDP: a rho ask is answered with discrete Gaussian noise on every sum", () => {
  it("mass on flipper and bill at rho 1e17 matches numpy.linalg.lstsq", async () => {
    const r = await z.answerer.prepare("ada", { v: 1, dataset: "d", measure: { kind: "regression", response: "mass", predictors: ["flipper", "bill"] }, privacy: { rho: "100000000000000000" } }).compute(new Bits(seededBytes(9)));
    expect(r.mechanisms.every((m) => m.family === "discrete-gaussian")).toBe(true);
    // 10 sums share rho evenly: each 1e16.
    expect(r.mechanisms.every((m) => m.cost === "10000000000000000")).toBe(true);
    const rows = clampedRows(["flipper", "bill", "mass"]);
    const ref = numpyOls(rows.map((x) => x.values.slice(0, 2)), rows.map((x) => x.values[2]));
    r.rows.filter((x) => x.stat === "coefficient").forEach((x, i) => {
      expect(Math.abs(Number(x.value) - ref[i])).toBeLessThanOrEqual(1e-6 * Math.max(1, Math.abs(ref[i])));
    });
  });
});
