/**
 * Previews of ratio estimates (issue 11): `preview.mean` gave the error of the mean's parts (its
 * noisy sum and count), not of the mean. The preview now gives the expected error of the estimate
 * itself for a count of values the analyst assumes (`assumeCount`) or the steward's public
 * `sizeHint`, computed without the data (runtime/curator/aggregates/ratio-preview.ts).
 *
 * Outside check for the mean at the range's midpoint: the corner interval (docs/methods.md §8) of a
 * centred sum 0 over a count n is ±g·h_S/(n - h_N), with h_S, h_N the parts' half-widths at
 * confidence 1 - a/2 each. Those come here from the published discrete Laplace tail
 * (Inusah & Kozubowski 2006): P(|X| > h) = 2 exp(-(h+1)/t) / (1 + exp(-1/t)), with t = Δ/ε per
 * part (ε/2 each; Δ = k for the count and k·((U - L)/2)/g' for the sum centred at the midpoint, in
 * half-steps g' = g/2). The
 * project's own half-widths are proven upper bounds, at most one unit wider (DEVELOPERS.md), so the
 * check allows one unit.
 */
import { copyFileSync, mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { CuratorService } from "../../runtime/curator/service.js";
import type { Preview, QueryPlan, Response } from "../../runtime/protocol/messages.js";
import { ADA_HASH, FIXTURES } from "../fixtures/curator-helpers.js";

const POLICY = `analysts:
  ada: { token: "${ADA_HASH}" }
datasets:
  d:
    source: a.csv
    unit: { column: patient_id, maxRows: 4 }
    accounting: { mode: pure, cap: { epsilon: "3" } }
    sizeHint: 5000
    analysts: [ada]
    columns:
      age:          { type: integer, range: [0, 100], step: "1" }
      wait_minutes: { type: number, range: [0, 240], step: "0.5" }
      district:     { type: category, values: [Northgate, Riverside, Old Town] }
      visit_date:   { type: date, range: ["2025-01-01", "2025-12-31"] }
      insured:      { type: boolean }
`;

const dirs: string[] = [];
const services: CuratorService[] = [];
async function start(tiny = false): Promise<(body: unknown) => Promise<Preview>> {
  const dir = mkdtempSync(join(tmpdir(), "hush-ratio-"));
  dirs.push(dir);
  if (tiny) writeFileSync(join(dir, "a.csv"), "patient_id,age,wait_minutes,district,visit_date,insured\nq1,50,10,Northgate,2025-03-01,false\n");
  else copyFileSync(join(FIXTURES, "visits.csv"), join(dir, "a.csv"));
  writeFileSync(join(dir, "policy.yaml"), POLICY);
  const s = await CuratorService.open(join(dir, "policy.yaml"));
  services.push(s);
  let n = 0;
  return async (body: unknown) => {
    const r = JSON.parse((await s.handleFrame(Buffer.from(JSON.stringify({ v: 1, id: `r${++n}`, analyst: "ada", token: "ada-token", body })), "t")).toString("utf8")) as Response;
    if (!r.ok) throw new Error(`${r.error.kind}: ${r.error.message}`);
    return (r.body as { preview: Preview }).preview;
  };
}

const plan = (measure: QueryPlan["measure"], epsilon: string, extra: Partial<QueryPlan> = {}): QueryPlan => ({ v: 1, dataset: "d", measure, privacy: { epsilon }, ...extra });

/** Smallest h with P(|X| > h) <= tail for discrete Laplace of scale t (the published closed form). */
function dlapHalfWidth(t: number, tail: number): number {
  let h = 0;
  while ((2 * Math.exp(-(h + 1) / t)) / (1 + Math.exp(-1 / t)) > tail) h++;
  return h;
}

let preview: (body: unknown) => Promise<Preview>;
beforeAll(async () => {
  preview = await start();
});
afterAll(async () => {
  for (const s of services) await s.close();
  for (const d of dirs) rmSync(d, { recursive: true, force: true });
});

describe("the expected error of a mean, variance or std itself", () => {
  it("mean at an assumed count: between the published discrete Laplace half-width of the sum over n and the corner interval", async () => {
    for (const [n, eps] of [
      [1000, "0.2"],
      [200, "1"],
      [50_000, "0.05"],
    ] as const) {
      const p = await preview({ op: "preview", plan: plan({ kind: "mean", column: "wait_minutes" }, eps), assumeCount: n });
      expect(p.ratioErrors).toHaveLength(1);
      const r = p.ratioErrors![0];
      expect(r).toMatchObject({ stat: "mean", column: "wait_minutes", assumedCount: n, assumedFrom: "analyst" });
      expect(r.typicalAt).toContain("mean at the midpoint 120");
      const e = Number(eps) / 2;
      const k = 4;
      // A value's centred distance from the midpoint is at most (U - L)/2 = 120, i.e. 480 half-steps of 0.25:
      // adding or removing one of a unit's k rows moves the centred sum by at most that.
      const widthHalfSteps = (240 - 0) / 2 / 0.25;
      const hN = dlapHalfWidth(k / e, 0.025);
      const hS = dlapHalfWidth((k * widthHalfSteps) / e, 0.025);
      // The release's interval is the pivot of docs/methods.md §8: at the midpoint (centred sum 0,
      // count n) it holds the means m with |0 - m n| within the joint quantile, which is at least the
      // 95% half-width of the sum's noise alone, so it is at least that over n; and it lies inside the
      // old corner interval (a/2 to each part), which bounds it from above.
      const lo = (0.25 * dlapHalfWidth((k * widthHalfSteps) / e, 0.05)) / n;
      const hi = (0.25 * (hS + 1)) / (n - hN - 1);
      const typical = Number(r.typical);
      expect(typical, `n=${n} eps=${eps}`).toBeGreaterThanOrEqual(lo * (1 - 1e-9));
      expect(typical, `n=${n} eps=${eps}`).toBeLessThanOrEqual(hi * (1 + 1e-9));
      expect(Number(r.widest)).toBeGreaterThanOrEqual(typical);
      expect(Number(r.widest)).toBeLessThanOrEqual(120);
      // The parts are still listed, and a note says what the figure assumes.
      expect(p.halfWidths.map((h) => h.stat)).toEqual(["count (part of mean)", "sum of wait_minutes (part of mean)"]);
      expect(p.notes.join(" ")).toMatch(/assumes \d+ values \(your assumption\), not the data's count/);
    }
  });

  it("shrinks like 1/n, and widens toward the ends of the range", async () => {
    const at = async (n: number) => (await preview({ op: "preview", plan: plan({ kind: "mean", column: "age" }, "0.5"), assumeCount: n })).ratioErrors![0];
    const [a, b] = [await at(2_000), await at(20_000)];
    expect(Number(a.typical) / Number(b.typical)).toBeGreaterThan(9);
    expect(Number(a.typical) / Number(b.typical)).toBeLessThan(11);
    expect(Number(a.widest)).toBeGreaterThan(Number(a.typical));
    // A count too small for the noise: the interval is the whole range, said as such.
    const tiny = await at(1);
    expect(Number(tiny.typical)).toBe(50);
    const p = await preview({ op: "preview", plan: plan({ kind: "mean", column: "age" }, "0.5"), assumeCount: 1 });
    expect(p.notes.join(" ")).toMatch(/With 1 value the mean's interval would be the whole declared range/);
    const big = await preview({ op: "preview", plan: plan({ kind: "mean", column: "age" }, "0.5"), assumeCount: 20_000 });
    expect(big.notes.join(" ")).not.toMatch(/whole declared range/);
  });

  it("variance and std: positive, widest at least typical, smaller for more values", async () => {
    for (const kind of ["variance", "std"] as const) {
      const at = async (n: number) => (await preview({ op: "preview", plan: plan({ kind, column: "age" }, "1"), assumeCount: n })).ratioErrors![0];
      const [a, b] = [await at(1_000), await at(100_000)];
      expect(a.stat).toBe(kind);
      expect(Number(a.typical)).toBeGreaterThan(0);
      expect(Number(a.widest)).toBeGreaterThanOrEqual(Number(a.typical));
      expect(Number(b.typical)).toBeLessThan(Number(a.typical));
      expect(a.typicalAt).toMatch(/standard deviation 25 \(half the half-range\)/);
      if (kind === "std") expect(Number(a.typical)).toBeLessThan(50);
    }
  });

  it("the policy's size hint serves ungrouped previews; grouped ones need the analyst's count", async () => {
    const p = await preview({ op: "preview", plan: plan({ kind: "mean", column: "age" }, "0.3") });
    expect(p.ratioErrors![0]).toMatchObject({ assumedCount: 5000, assumedFrom: "policy" });
    expect(p.notes.join(" ")).toContain("the steward's public size hint");
    const g = await preview({ op: "preview", plan: plan({ kind: "mean", column: "age" }, "0.3", { groupBy: [{ column: "district" }] }) });
    expect(g.ratioErrors).toBeUndefined();
    expect(g.notes.join(" ")).toMatch(/preview again with an assumed count of values per group/);
    const own = await preview({ op: "preview", plan: plan({ kind: "mean", column: "age" }, "0.3", { groupBy: [{ column: "district" }] }), assumeCount: 300 });
    expect(own.ratioErrors![0]).toMatchObject({ assumedCount: 300, assumedFrom: "analyst" });
    // Other measures carry no ratio errors.
    expect((await preview({ op: "preview", plan: plan({ kind: "count" }, "0.3"), assumeCount: 300 })).ratioErrors).toBeUndefined();
  });

  it("reads no data: the same figures over a one-row file", async () => {
    const other = await start(true);
    for (const body of [
      { op: "preview", plan: plan({ kind: "mean", column: "wait_minutes" }, "0.2"), assumeCount: 700 },
      { op: "preview", plan: plan({ kind: "std", column: "age" }, "0.4") },
    ]) {
      expect((await other(body)).ratioErrors).toEqual((await preview(body)).ratioErrors);
    }
  });

  it("refuses a malformed assumption", async () => {
    for (const assumeCount of [0, -5, 1.5, 1e16, "100", null]) {
      await expect(preview({ op: "preview", plan: plan({ kind: "mean", column: "age" }, "0.3"), assumeCount })).rejects.toThrow(/protocol|assumeCount/);
    }
  });
});
