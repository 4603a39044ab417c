/**
 * Outside-source check: with a very large epsilon the noise vanishes, so the released count, sum,
 * mean and variance of a public dataset must match exact values computed independently, and lie
 * within the released (noise-only) interval.
 *
 * Dataset: Palmer penguins as shipped by the vega-datasets package (data/penguins.json).
 * Reference library: simple-statistics (sum, mean, variance, quantile).
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { readFileSync } from "node:fs";
import { fileURLToPath } from "node:url";
import * as ss from "simple-statistics";
import { Bits, seededBytes } from "../../runtime/core/index.js";
import type { QueryPlan } from "../../runtime/protocol/messages.js";
import { type Opened, open, policyWith, tempPolicy } from "../fixtures/curator-helpers.js";

type Penguin = {
  Species: string;
  Island: string;
  "Beak Length (mm)": number | null;
  "Beak Depth (mm)": number | null;
  "Flipper Length (mm)": number | null;
  "Body Mass (g)": number | null;
  Sex: string | null;
};
const penguins = JSON.parse(
  readFileSync(fileURLToPath(new URL("../../node_modules/vega-datasets/data/penguins.json", import.meta.url)), "utf8"),
) as Penguin[];

const HEADER = ["Species", "Island", "Beak Length (mm)", "Flipper Length (mm)", "Body Mass (g)", "Sex"] as const;
const csv = [HEADER.join(","), ...penguins.map((p) => HEADER.map((h) => (p[h] === null ? "" : String(p[h]))).join(","))].join("\n");

const POLICY = policyWith(`    description: Palmer penguins (vega-datasets), each row its own unit
    source: penguins.csv
    accounting: { mode: pure, cap: { epsilon: "100000000" } }
    analysts: [ada]
    columns:
      species: { type: category, values: [Adelie, Chinstrap, Gentoo], from: Species }
      island:  { type: category, values: [Torgersen, Biscoe, Dream], from: Island }
      beak:    { type: number, range: [30, 60], step: "0.1", from: "Beak Length (mm)" }
      flipper: { type: integer, range: [150, 250], from: "Flipper Length (mm)" }
      mass:    { type: integer, range: [2000, 7000], from: "Body Mass (g)" }
      sex:     { type: category, values: [MALE, FEMALE], from: Sex }
`);

// Rows the policy keeps: the one row whose Sex is "." lies outside the declared list.
const kept = penguins.filter((p) => p.Sex !== ".");
const present = (f: (p: Penguin) => number | null, rows = kept) => rows.map(f).filter((v): v is number => v !== null);

let ctx: Opened;
beforeAll(async () => {
  ctx = await open(tempPolicy(POLICY, { "penguins.csv": csv }));
});
afterAll(async () => {
  await ctx.engine.close();
});

const HUGE = { epsilon: "1000000" };
const ask = (p: Omit<QueryPlan, "v" | "dataset" | "privacy">) =>
  ctx.answerer.prepare("ada", { v: 1, dataset: "d", privacy: HUGE, ...p }).compute(new Bits(seededBytes("penguins")));

function expectWithin(row: { value: string | null; low: string | null; high: string | null }, exact: number, tol: number): void {
  expect(row.value).not.toBeNull();
  expect(Math.abs(Number(row.value) - exact)).toBeLessThanOrEqual(tol);
  expect(Number(row.low)).toBeLessThanOrEqual(exact + 1e-9);
  expect(Number(row.high)).toBeGreaterThanOrEqual(exact - 1e-9);
}

describe("penguins (vega-datasets) against simple-statistics at epsilon = 1e6", () => {
  it("loads every row but the one with Sex '.'", () => {
    expect(penguins.length).toBe(344);
    expect(ctx.engine.loadReport("d")).toEqual({ rows: 343, rejected: 1, reasons: { "sex: value outside the declared list": 1 } });
  });

  it("count", async () => {
    const r = await ask({ measure: { kind: "count" } });
    expectWithin(r.rows[0], kept.length, 0);
  });

  it("sum of body mass", async () => {
    const r = await ask({ measure: { kind: "sum", column: "mass" } });
    expectWithin(r.rows[0], ss.sum(present((p) => p["Body Mass (g)"])), 0);
  });

  it("mean of beak length, overall and per species", async () => {
    const r = await ask({ measure: { kind: "mean", column: "beak" } });
    expectWithin(r.rows[0], ss.mean(present((p) => p["Beak Length (mm)"])), 1e-6);
    const g = await ask({ groupBy: [{ column: "species" }], measure: { kind: "mean", column: "beak" } });
    for (const row of g.rows) {
      const exact = ss.mean(present((p) => p["Beak Length (mm)"], kept.filter((p) => p.Species === row.key[0])));
      expectWithin(row, exact, 1e-6);
    }
  });

  it("variance and std of flipper length (population variance)", async () => {
    const exact = ss.variance(present((p) => p["Flipper Length (mm)"]));
    const v = await ask({ measure: { kind: "variance", column: "flipper" } });
    expectWithin(v.rows[0], exact, 1e-6);
    const s = await ask({ measure: { kind: "std", column: "flipper" } });
    expectWithin(s.rows[0], Math.sqrt(exact), 1e-6);
  });

  it("grouped count by island matches the data", async () => {
    const r = await ask({ groupBy: [{ column: "island" }], measure: { kind: "count" } });
    for (const row of r.rows) expectWithin(row, kept.filter((p) => p.Island === row.key[0]).length, 0);
  });

  it("median of body mass lies between the 45th and 55th percentiles", async () => {
    const masses = present((p) => p["Body Mass (g)"]);
    const r = await ask({ measure: { kind: "quantile", column: "mass", p: [0.5] } });
    const v = Number(r.rows[0].value);
    expect(v).toBeGreaterThanOrEqual(ss.quantile(masses, 0.45));
    expect(v).toBeLessThanOrEqual(ss.quantile(masses, 0.55));
  });
});
