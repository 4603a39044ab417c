/**
 * Review check of contribution bounding against its definition: neighbouring datasets differ by
 * all rows of one unit (docs/methods.md §1, add/remove one unit), and every released vector may move by
 * at most its recorded sensitivity (docs/methods.md §7: counts k, sums k * max(|L|,|U|)/g, over all
 * groups together). The removed unit has many more rows than maxRows = k, rows with missing values
 * and missing keys, and rows at both clamp bounds; filters and grouping are applied on top.
 *
 * The releases are taken at a huge epsilon, where the discrete Laplace noise is 0 except with
 * probability about 2 exp(-10^9 / 30) (docs/methods.md §4 tail), so the rows are the bounded true values.
 * The data are invented for this test (common practice for a stability check).
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { Bits, Rational, seededBytes } from "../../runtime/core/index.js";
import type { QueryPlan } from "../../runtime/protocol/messages.js";
import { type Opened, open, policyWith, tempPolicy } from "../fixtures/curator-helpers.js";

const K = 3;
const HEADER = "u,cat,v,flag";
const CATS = ["A", "B", "C"];

/** Ten small units (at most K rows each), so their kept rows do not depend on the random order. */
function baseRows(): string[] {
  const out: string[] = [];
  for (let i = 0; i < 10; i++) {
    for (let j = 0; j <= i % K; j++) out.push(`u${i},${CATS[(i + j) % 3]},${(i * 3 + j) % 16 - 5},${(i + j) % 2 === 0}`);
  }
  return out;
}

/** One unit with 24 rows: extremes, values beyond the bounds (clamped), missing values and keys. */
function bigRows(): string[] {
  const out: string[] = [];
  for (let j = 0; j < 24; j++) {
    const cat = j % 5 === 4 ? "" : CATS[j % 3];
    const v = j % 7 === 6 ? "" : j % 8 === 3 ? "-50" : "50";
    out.push(`zz,${cat},${v},${j % 2 === 0}`);
  }
  return out;
}

function policyFor(csv: string): string {
  return tempPolicy(
    policyWith(`    source: data.csv
    unit: { column: u, maxRows: ${K} }
    accounting: { mode: pure, cap: { epsilon: "1000000000000" } }
    analysts: [ada]
    columns:
      cat:  { type: category, values: [A, B, C] }
      v:    { type: number, range: [-5, 10], step: "1" }
      flag: { type: boolean }
`),
    { "data.csv": csv },
  );
}

let withUnit: Opened;
let without: Opened;
beforeAll(async () => {
  withUnit = await open(policyFor([HEADER, ...baseRows(), ...bigRows()].join("\n") + "\n"));
  without = await open(policyFor([HEADER, ...baseRows()].join("\n") + "\n"));
});
afterAll(async () => {
  await withUnit.engine.close();
  await without.engine.close();
});

const plan = (over: Partial<QueryPlan> & Pick<QueryPlan, "measure">): QueryPlan => ({
  v: 1,
  dataset: "d",
  privacy: { epsilon: "1000000000" },
  ...over,
});

const FILTER = { op: "ge", column: "v", value: 0 } as const;
const PLANS: { name: string; p: QueryPlan }[] = [
  { name: "count", p: plan({ measure: { kind: "count" } }) },
  { name: "count, filtered", p: plan({ measure: { kind: "count" }, where: FILTER }) },
  { name: "count by cat", p: plan({ groupBy: [{ column: "cat" }], measure: { kind: "count" } }) },
  { name: "count by cat, filtered", p: plan({ groupBy: [{ column: "cat" }], measure: { kind: "count" }, where: FILTER }) },
  { name: "sum of v", p: plan({ measure: { kind: "sum", column: "v" } }) },
  { name: "sum of v by cat and flag", p: plan({ groupBy: [{ column: "cat" }, { column: "flag" }], measure: { kind: "sum", column: "v" } }) },
  { name: "sum of v by cat, filtered", p: plan({ groupBy: [{ column: "cat" }], measure: { kind: "sum", column: "v" }, where: { op: "not", of: { op: "isNull", column: "cat" } } }) },
  { name: "histogram of v", p: plan({ measure: { kind: "histogram", column: "v", bins: 5 } }) },
  { name: "crosstab cat x flag, filtered", p: plan({ measure: { kind: "crosstab", rows: "cat", cols: "flag" }, where: FILTER }) },
];

async function release(o: Opened, p: QueryPlan, seed: number) {
  return o.answerer.prepare("ada", p).compute(new Bits(seededBytes(seed)));
}

describe("review: removing one unit moves each released vector by at most its sensitivity", () => {
  it.each(PLANS)("$name", async ({ p }) => {
    for (let seed = 0; seed < 3; seed++) {
      const a = await release(withUnit, p, seed);
      const b = await release(without, p, seed);
      expect(a.rows.map((r) => r.key)).toEqual(b.rows.map((r) => r.key));
      expect(a.mechanisms).toHaveLength(1);
      const m = a.mechanisms[0];
      const step = Rational.parse(m.step);
      let l1 = Rational.ZERO;
      for (let i = 0; i < a.rows.length; i++) l1 = l1.add(Rational.parse(a.rows[i].value!).sub(Rational.parse(b.rows[i].value!)).abs());
      // Sensitivity in grid units (docs/methods.md §7): count k, sum k * max(|-5|, |10|) = 30 ([C7.1]).
      expect(m.sensitivity).toBe(p.measure.kind === "sum" ? String(K * 10) : String(K));
      expect(l1.le(step.mul(BigInt(m.sensitivity)))).toBe(true);
    }
  });

  it("the heavy unit keeps K rows after the filter (bounded after filtering, docs/methods.md §7)", async () => {
    // The big unit has 24 rows; most have v = 50 (clamped to 10, so they match v >= 0), a few are
    // missing v or hold -50. Its matching rows are more than K, so it adds exactly K.
    const a = await release(withUnit, plan({ measure: { kind: "count" }, where: FILTER }), 1);
    const b = await release(without, plan({ measure: { kind: "count" }, where: FILTER }), 1);
    expect(Rational.parse(a.rows[0].value!).sub(Rational.parse(b.rows[0].value!)).toString()).toBe(String(K));
  });
});

describe("review: clamped shares and quantile value intervals (docs/methods.md §20, §21)", () => {
  it("clamped shares: the (below, above) pair and the total each move by at most k", async () => {
    // The heavy unit holds v = 50 (above 10) and v = -50 (below -5): it lands in both flags.
    for (const where of [undefined, FILTER, { op: "not", of: { op: "isNull", column: "cat" } } as const]) {
      for (let seed = 0; seed < 3; seed++) {
        const p = plan({ measure: { kind: "clamped", columns: ["v"] }, ...(where ? { where } : {}) });
        const a = await release(withUnit, p, seed);
        const b = await release(without, p, seed);
        const v = (r: typeof a, stat: string) => Rational.parse(r.rows.find((x) => x.stat === stat)!.value!);
        const pairL1 = v(a, "below lower").sub(v(b, "below lower")).abs().add(v(a, "above upper").sub(v(b, "above upper")).abs());
        const total = v(a, "values").sub(v(b, "values")).abs();
        expect(a.mechanisms.map((m) => m.sensitivity)).toEqual([String(K), String(K)]);
        expect(pairL1.le(Rational.of(K))).toBe(true);
        expect(total.le(Rational.of(K))).toBe(true);
        if (where === undefined) {
          // Every value of the heavy unit lies beyond a bound (50 or -50), so each of its kept rows
          // with a value is flagged: the pair moves exactly as much as the total. (Which K of its
          // 24 rows are kept is random per load, and some have no value, so the move is not always K.)
          expect(pairL1.eq(total)).toBe(true);
          expect(pairL1.sign()).toBeGreaterThan(-1);
        }
      }
    }
  });

  it("quantile value-interval tree: removing the unit moves the exact tree by at most its recorded L1 sensitivity", async () => {
    // The tree's levels each partition the kept rows, so its L1 move is (levels) x (rows moved);
    // here the exact bucket counts come from the releases' own SQL at huge epsilon via a count by bins.
    // v in [-5, 10] step 1: 16 candidates, L = 4, 5 levels: sensitivity K * 5.
    const p = plan({ measure: { kind: "quantile", column: "v", p: [0.5] } });
    const a = await release(withUnit, p, 1);
    const tree = a.mechanisms.find((m) => m.target === "value intervals of v")!;
    expect(tree.sensitivity).toBe(String(K * 5));
    const h = (o: Opened) => release(o, plan({ measure: { kind: "histogram", column: "v", bins: 15 } }), 1);
    const ha = await h(withUnit);
    const hb = await h(without);
    let moved = Rational.ZERO;
    for (let i = 0; i < ha.rows.length; i++) moved = moved.add(Rational.parse(ha.rows[i].value!).sub(Rational.parse(hb.rows[i].value!)).abs());
    // Each level moves by at most the rows moved in the leaves (at most K), and there are 5 levels.
    expect(moved.le(Rational.of(K))).toBe(true);
    expect(moved.mul(Rational.of(5n)).le(Rational.parse(tree.sensitivity))).toBe(true);
    for (const r of a.rows) expect(Rational.parse(r.low!).le(Rational.parse(r.high!))).toBe(true);
  });
});
