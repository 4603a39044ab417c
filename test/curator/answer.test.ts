/**
 * Aggregates on the small fixture with seeded bit sources: released values on the grid, every
 * declared key present, the number of released rows fixed by the plan, costs and sensitivities.
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { readFileSync } from "node:fs";
import { join } from "node:path";
import { Bits, Rational, halfWidth, seededBytes } from "../../runtime/core/index.js";
import type { QueryPlan, ReleaseRow } from "../../runtime/protocol/messages.js";
import { FIXTURES, type Opened, open, policyWith, tempPolicy } from "../fixtures/curator-helpers.js";

let ctx: Opened;
beforeAll(async () => {
  ctx = await open();
});
afterAll(async () => {
  await ctx.engine.close();
});

const plan = (over: Partial<QueryPlan> & Pick<QueryPlan, "measure">, dataset = "visits"): QueryPlan => ({
  v: 1,
  dataset,
  privacy: { epsilon: "1" },
  ...over,
});
const bits = (seed: string | number) => new Bits(seededBytes(seed));
const ask = async (p: QueryPlan, seed: string | number = 1) => ctx.answerer.prepare("ada", p).compute(bits(seed));

/** Is the decimal string an integer multiple of step? */
function onGrid(value: string, step: string): boolean {
  return Rational.parse(value).div(Rational.parse(step)).den === 1n;
}

const DISTRICTS = ["Northgate", "Riverside", "Old Town"];
// Filters that leave no rows at all: the shape of the release must not change.
const EMPTY = { op: "gt", column: "age", value: 1000 } as const;

/** Declared output size per measure on the fixture (visits: 2 numeric, 1 category of 3, 1 boolean, 1 date). */
const SHAPES: { name: string; p: QueryPlan; size: number }[] = [
  { name: "count", p: plan({ measure: { kind: "count" } }), size: 1 },
  { name: "sum", p: plan({ measure: { kind: "sum", column: "wait_minutes" } }), size: 1 },
  { name: "mean", p: plan({ measure: { kind: "mean", column: "age" } }), size: 1 },
  { name: "variance", p: plan({ measure: { kind: "variance", column: "age" } }), size: 1 },
  { name: "std", p: plan({ measure: { kind: "std", column: "wait_minutes" } }), size: 1 },
  { name: "quantiles", p: plan({ measure: { kind: "quantile", column: "age", p: [0.1, 0.5, 0.9] } }), size: 3 },
  { name: "histogram", p: plan({ measure: { kind: "histogram", column: "wait_minutes", bins: 7 } }), size: 7 },
  { name: "crosstab", p: plan({ measure: { kind: "crosstab", rows: "district", cols: "insured" } }), size: 6 },
  { name: "grouped count", p: plan({ groupBy: [{ column: "district" }], measure: { kind: "count" } }), size: 3 },
  { name: "grouped sum 2 keys", p: plan({ groupBy: [{ column: "insured" }, { column: "age", bins: 4 }], measure: { kind: "sum", column: "age" } }), size: 8 },
  { name: "grouped mean", p: plan({ groupBy: [{ column: "district" }], measure: { kind: "mean", column: "wait_minutes" } }), size: 3 },
  // describe: count + 2 numeric x (mean, std, p50) + 3 districts + 2 booleans
  { name: "describe", p: plan({ measure: { kind: "describe" } }), size: 1 + 6 + 3 + 2 },
];

describe("no path returns a data-dependent number of rows", () => {
  it.each(SHAPES)("$name: released rows = declared size, with and without matching rows", async ({ p, size }) => {
    const full = await ask(p);
    expect(full.rows).toHaveLength(size);
    const empty = await ask({ ...p, where: EMPTY });
    expect(empty.rows).toHaveLength(size);
    // Same keys and stats in the same order whatever the data.
    expect(empty.rows.map((r) => [r.key, r.stat, r.column])).toEqual(full.rows.map((r) => [r.key, r.stat, r.column]));
    expect(full.mechanisms.length).toBeGreaterThan(0);
    expect(full.notes.join(" ")).toMatch(/noise-only/);
  });
});

describe("lattice: released values lie on the grid", () => {
  it("counts are integers and sums multiples of the step, ends too", async () => {
    for (let seed = 0; seed < 5; seed++) {
      const c = await ask(plan({ groupBy: [{ column: "district" }], measure: { kind: "count" } }), seed);
      for (const r of c.rows) for (const v of [r.value!, r.low!, r.high!]) expect(onGrid(v, "1")).toBe(true);
      const s = await ask(plan({ measure: { kind: "sum", column: "wait_minutes" } }), seed);
      for (const v of [s.rows[0].value!, s.rows[0].low!, s.rows[0].high!]) expect(onGrid(v, "0.5")).toBe(true);
      const q = await ask(plan({ measure: { kind: "quantile", column: "wait_minutes", p: [0.25, 0.75] } }), seed);
      for (const r of q.rows) {
        expect(onGrid(r.value!, "0.5")).toBe(true);
        const v = Number(r.value);
        expect(v).toBeGreaterThanOrEqual(0);
        expect(v).toBeLessThanOrEqual(240);
      }
    }
  });
});

describe("every declared key is reported", () => {
  it("also keys with no rows, in declaration order", async () => {
    const r = await ask(plan({ where: { op: "eq", column: "district", value: "Old Town" }, groupBy: [{ column: "district" }], measure: { kind: "count" } }));
    expect(r.groupColumns).toEqual(["district"]);
    expect(r.rows.map((x) => x.key)).toEqual(DISTRICTS.map((d) => [d]));
    const x = await ask(plan({ measure: { kind: "crosstab", rows: "insured", cols: "district" } }));
    expect(x.rows.map((row) => row.key)).toEqual(["false", "true"].flatMap((b) => DISTRICTS.map((d) => [b, d])));
    const h = await ask(plan({ measure: { kind: "histogram", column: "age", bins: 4 } }));
    expect(h.rows.map((row) => row.key[0])).toEqual(["[0, 25)", "[25, 50)", "[50, 75)", "[75, 100]"]);
  });
});

describe("seeded sources make releases reproducible", () => {
  it("same seed, same release; another seed, other noise", async () => {
    const p = plan({ measure: { kind: "describe" } });
    const a = await ask(p, "s1");
    const b = await ask(p, "s1");
    const c = await ask(p, "s2");
    expect(a.rows).toEqual(b.rows);
    expect(c.rows).not.toEqual(a.rows);
  });
});

describe("costs and sensitivities", () => {
  it("records sensitivities derived from the policy (k = 4 rows per patient)", () => {
    const sum = ctx.answerer.prepare("ada", plan({ measure: { kind: "sum", column: "age" } }));
    expect(sum.cost.toString()).toBe("1");
    expect(sum.unit).toBe("epsilon");
    return sum.compute(bits(1)).then((r) => {
      // k * max(|L|,|U|)/g = 4 * 100 (docs/methods.md §7 table); scale t = 400/1
      expect(r.mechanisms).toEqual([
        { target: "sum of age", family: "discrete-laplace", scale: "400", sensitivity: "400", step: "1", cost: "1" },
      ]);
    });
  });

  it("splits a mean's budget in halves and a variance's in thirds; centred sensitivities", async () => {
    const m = await ask(plan({ measure: { kind: "mean", column: "wait_minutes" }, privacy: { epsilon: "2" } }));
    // count: k = 4; centred sum in half-units: k (U-L)/g = 4 * 480 = 1920, step 0.25
    expect(m.mechanisms.map((x) => [x.sensitivity, x.cost, x.step])).toEqual([
      ["4", "1", "1"],
      ["1920", "1", "0.25"],
    ]);
    const v = await ask(plan({ measure: { kind: "variance", column: "age" }, privacy: { epsilon: "3" } }));
    // squares in quarter-units: k ((U-L)/g)^2 = 4 * 100^2
    expect(v.mechanisms.map((x) => [x.sensitivity, x.cost])).toEqual([
      ["4", "1"],
      ["400", "1"],
      ["40000", "1"],
    ]);
  });

  it("quantiles: exponential mechanism records with rank sensitivity k * max(a, b - a) (docs/methods.md §9), and the value-interval tree (§20, [C20.2])", async () => {
    const q = await ask(plan({ measure: { kind: "quantile", column: "age", p: [0.5, 0.9] }, privacy: { epsilon: "2" } }));
    // Half the budget to the two draws (1/2 each), half to one tree over the 101 candidates of
    // age [0, 100]: 7 levels below the root, 8 in all, so sensitivity k (L + 1) = 4 * 8 = 32 and
    // discrete Laplace scale 32 / 1.
    expect(q.mechanisms).toEqual([
      { target: "p50 of age", family: "exponential", scale: "1/2", sensitivity: "4", step: "1", cost: "1/2" },
      { target: "p90 of age", family: "exponential", scale: "1/2", sensitivity: "36", step: "1", cost: "1/2" },
      { target: "value intervals of age", family: "discrete-laplace", scale: "32", sensitivity: "32", step: "1", cost: "1" },
    ]);
    for (const r of q.rows) {
      expect(Number(r.low)).toBeLessThanOrEqual(Number(r.high));
      expect(Number(r.low)).toBeGreaterThanOrEqual(0);
      expect(Number(r.high)).toBeLessThanOrEqual(100);
    }
    expect(q.notes.join(" ")).toMatch(/Budget split: the exponential mechanism gets 1 epsilon \(shared evenly by the 2 quantiles\), the tree for the value intervals 1 epsilon/);
  });

  it("quantiles on a fine grid use at most 2001 evenly spaced public candidates", () => {
    const file = tempPolicy(
      policyWith(`    source: ${join(FIXTURES, "visits.csv")}
    accounting: { mode: pure, cap: { epsilon: "5" } }
    analysts: [ada]
    columns:
      wait_minutes: { type: number, range: [0, 1000], step: "0.01" }
`),
    );
    return open(file).then(async (o) => {
      const r = await o.answerer.prepare("ada", plan({ measure: { kind: "quantile", column: "wait_minutes", p: [0.5] } }, "d")).compute(bits(2));
      // 100000 steps of 0.01 thinned to 2000 steps of 0.5
      expect(r.mechanisms[0].step).toBe("0.5");
      expect(onGrid(r.rows[0].value!, "0.5")).toBe(true);
      expect(r.notes.join(" ")).toMatch(/2001 public candidates/);
      await o.engine.close();
    });
  });

  it("splits describe evenly and says so (1 count + 3 x 2 numeric + 2 keyed columns = 9 parts)", () => {
    const d = ctx.answerer.prepare("ada", plan({ measure: { kind: "describe" }, privacy: { epsilon: "6" } }));
    expect(d.cost.toString()).toBe("6");
    expect(d.notes.join(" ")).toMatch(/evenly over 9 parts: the row count, mean, std and median of age, wait_minutes, value counts of district, insured/);
  });

  it("zCDP: rho asks use the discrete Gaussian; epsilon asks are charged epsilon^2/2 per part", async () => {
    const r = ctx.answerer.prepare("ada", plan({ measure: { kind: "count" }, privacy: { rho: "1/8" } }, "rows"));
    expect(r.unit).toBe("rho");
    expect(r.cost.toString()).toBe("1/8");
    const rr = await r.compute(bits(3));
    // sigma^2 = Delta^2/(2 rho) = 1/(1/4) = 4 (docs/methods.md §5)
    expect(rr.mechanisms[0]).toMatchObject({ family: "discrete-gaussian", scale: "4", sensitivity: "1" });
    const e = ctx.answerer.prepare("ada", plan({ measure: { kind: "count" }, privacy: { epsilon: "1" } }, "rows"));
    // epsilon-DP implies epsilon^2/2-zCDP ([C2.1a]: epsilon = 1 -> rho 1/2)
    expect(e.cost.toString()).toBe("1/2");
    const m = ctx.answerer.prepare("ada", plan({ measure: { kind: "mean", column: "age" }, privacy: { epsilon: "1" } }, "rows"));
    // two parts of 1/2 each: 2 * (1/2)^2 / 2
    expect(m.cost.toString()).toBe("1/4");
    // a quantile under rho: epsilon = sqrt(2 rho) rounded down, so the charge stays within rho
    const q = ctx.answerer.prepare("ada", plan({ measure: { kind: "quantile", column: "age", p: [0.5] }, privacy: { rho: "0.5" } }, "rows"));
    expect(q.cost.le(Rational.parse("0.5"))).toBe(true);
    expect(q.cost.gt(Rational.parse("0.4999"))).toBe(true);
  });
});

describe("intervals and previews", () => {
  it("preview half-widths need no data and match the released intervals", async () => {
    ctx.statements.length = 0;
    const pv = await ctx.answerer.preview("ada", plan({ measure: { kind: "count" } }, "visits"));
    expect(ctx.statements).toHaveLength(0);
    // t = k/epsilon = 4: the exact half-width from the core
    const h = halfWidth({ family: "discrete-laplace", scale: Rational.of(4) }, 0.95).toString();
    expect(pv.halfWidths).toEqual([{ stat: "count", column: null, halfWidth: h }]);
    const r = await pv.prepared.compute(bits(4));
    const row = r.rows[0];
    expect(Number(row.value) - Number(row.low)).toBe(Number(h));
    expect(Number(row.high) - Number(row.value)).toBe(Number(h));
  });

  it("mean preview names its parts in words, with half-widths in value units and a note", async () => {
    ctx.statements.length = 0;
    const pv = await ctx.answerer.preview("ada", plan({ measure: { kind: "mean", column: "wait_minutes" } }, "visits"));
    expect(ctx.statements).toHaveLength(0);
    expect(pv.halfWidths.map((h) => [h.stat, h.column])).toEqual([
      ["count (part of mean)", "wait_minutes"],
      ["sum of wait_minutes (part of mean)", "wait_minutes"],
    ]);
    // Half the budget each (epsilon 1/2), k = 4 rows per unit. Count: t = 4 / (1/2) = 8.
    const count = halfWidth({ family: "discrete-laplace", scale: Rational.of(8) }, 0.95);
    expect(pv.halfWidths[0].halfWidth).toBe(count.toString());
    // Sum in half-steps of 0.25 minutes, sensitivity k (U-L)/g = 4 * 480 = 1920, t = 3840; in minutes x 0.25.
    const sum = Rational.of(1n, 4n).mul(halfWidth({ family: "discrete-laplace", scale: Rational.of(3840) }, 0.95));
    expect(Rational.parse(pv.halfWidths[1].halfWidth).toString()).toBe(sum.toString());
    // Value units, not internal ones: a Laplace tail P(|X| > h) = exp(-h/b) gives h = b ln(1/0.05)
    // (common practice; the discrete law's tail is within one step of it), b = 3840 * 0.25 = 960 minutes.
    expect(Math.abs(Number(pv.halfWidths[1].halfWidth) - 960 * Math.log(20))).toBeLessThan(1);
    expect(pv.notes.some((n) => /error bar depends on the noisy count.*given with the release/.test(n))).toBe(true);
    // The note is about previews: a release does not carry it.
    expect(pv.prepared.notes.some((n) => n.includes("error bar depends"))).toBe(false);
  });

  it("variance preview labels its three parts", async () => {
    const pv = await ctx.answerer.preview("ada", plan({ measure: { kind: "std", column: "age" } }, "visits"));
    expect(pv.halfWidths.map((h) => h.stat)).toEqual(["count (part of std)", "sum of age (part of std)", "sum of squares of age (part of std; squared units)"]);
    expect(pv.notes.some((n) => n.startsWith("The std's error bar depends on the noisy count"))).toBe(true);
  });

  it("row-level count at epsilon 1 has 95% half-width 3 (docs/methods.md [C4.2a], t = 1)", async () => {
    const file = tempPolicy(
      policyWith(`    source: ${join(FIXTURES, "visits.csv")}
    accounting: { mode: pure, cap: { epsilon: "5" } }
    analysts: [ada]
    columns:
      age: { type: integer, range: [0, 100] }
`),
    );
    return open(file).then(async (o) => {
      const pv = await o.answerer.preview("ada", plan({ measure: { kind: "count" } }, "d"));
      expect(pv.halfWidths[0].halfWidth).toBe("3");
      // accuracy first: half-width 10 at 95% needs epsilon >= 0.284348512423 ([C11.2], docs/methods.md §11)
      const af = await o.answerer.preview("ada", plan({ measure: { kind: "count" }, privacy: { within: 10 } }, "d"));
      expect(af.prepared.cost.toNumber()).toBeGreaterThanOrEqual(0.284348512423);
      expect(af.prepared.cost.toNumber()).toBeLessThan(0.2844);
      expect(Number(af.halfWidths[0].halfWidth)).toBeLessThanOrEqual(10);
      await o.engine.close();
    });
  });

  it("a mean whose noisy count is not positive is unavailable, with the declared range as interval", async () => {
    let unavailable = 0;
    for (let seed = 0; seed < 12; seed++) {
      const r = await ask(plan({ where: EMPTY, measure: { kind: "mean", column: "wait_minutes" }, privacy: { epsilon: "0.5" } }), seed);
      const row: ReleaseRow = r.rows[0];
      expect(row.low).toBe("0");
      expect(row.high).toBe("240");
      if (row.value === null) unavailable++;
      else expect(Number(row.value)).toBeGreaterThanOrEqual(0);
    }
    // No rows: the noisy count is <= 0 with probability above 1/2 (symmetric noise on 0).
    expect(unavailable).toBeGreaterThan(0);
  });
});

describe("large epsilon recovers the bounded, clamped truth of the fixture", () => {
  // Independent recomputation from the CSV in plain JS: keep rows that fit the schema, clamp,
  // and count per patient (no patient other than p01 has more than 4 rows, so only p01 is cut).
  const lines = readFileSync(join(FIXTURES, "visits.csv"), "utf8").trim().split("\n").slice(1).map((l) => l.split(","));
  const fits = lines.filter(
    ([pid, age, wait, district, date]) =>
      pid !== "" &&
      (age === "" || /^\d+$/.test(age)) &&
      (wait === "" || Number.isFinite(Number(wait))) &&
      DISTRICTS.includes(district) &&
      date >= "2025-01-01" &&
      date <= "2025-12-31",
  );
  const perUnit = new Map<string, number>();
  for (const [pid] of fits) perUnit.set(pid, (perUnit.get(pid) ?? 0) + 1);
  const keptCount = [...perUnit.values()].reduce((s, n) => s + Math.min(n, 4), 0);

  it("count", async () => {
    const r = await ask(plan({ measure: { kind: "count" }, privacy: { epsilon: "1000000" } }));
    expect(perUnit.get("p01")).toBe(12);
    expect(Number(r.rows[0].value)).toBe(keptCount);
  });

  it("histogram of the row-level dataset leaves the row with no age out", async () => {
    const ages = lines
      .filter(([, age, wait, district, date]) => age !== "" && /^\d+$/.test(age) && (wait === "" || Number.isFinite(Number(wait))) && DISTRICTS.includes(district) && date >= "2025-01-01" && date <= "2025-12-31")
      .map((l) => Math.min(100, Number(l[1])));
    const r = await ask(plan({ measure: { kind: "histogram", column: "age", bins: 4 }, privacy: { epsilon: "1000000" } }, "rows"));
    const expected = [0, 1, 2, 3].map((j) => ages.filter((a) => Math.min(3, Math.floor(a / 25)) === j).length);
    expect(r.rows.map((x) => Number(x.value))).toEqual(expected);
    expect(expected.reduce((a, b) => a + b, 0)).toBe(ages.length);
  });

  it("median of the row-level dataset is the inverted-cdf median (docs/methods.md §9, §20), missing ages left out", async () => {
    const ages = lines
      .filter(([, age, wait, district, date]) => age !== "" && /^\d+$/.test(age) && (wait === "" || Number.isFinite(Number(wait))) && DISTRICTS.includes(district) && date >= "2025-01-01" && date <= "2025-12-31")
      .map((l) => Math.min(100, Number(l[1])));
    const cost = (y: number) => Math.abs(2 * ages.filter((a) => a < y).length - ages.length);
    const best = Math.min(...Array.from({ length: 101 }, (_, y) => cost(y)));
    // The exponential draw has the smallest rank cost; across a gap every candidate ties, and the
    // release moves the draw into the value interval (§20), which at this epsilon is the single
    // inverted-cdf median: the least age with at least half the rows at or below it.
    const sorted = [...ages].sort((a, b) => a - b);
    const invertedCdf = sorted[Math.ceil(sorted.length / 2) - 1];
    for (const seed of [1, 2, 3]) {
      const r = await ask(plan({ measure: { kind: "quantile", column: "age", p: [0.5] }, privacy: { epsilon: "1000000" } }, "rows"), seed);
      expect(Number(r.rows[0].value)).toBe(invertedCdf);
      expect([r.rows[0].low, r.rows[0].high]).toEqual([String(invertedCdf), String(invertedCdf)]);
      expect(cost(invertedCdf) - best).toBeLessThanOrEqual(2); // one row from the best rank
    }
  });

  it("grouped count of the row-level dataset", async () => {
    const rowsFit = lines.filter(
      ([, age, wait, district, date]) =>
        (age === "" || /^\d+$/.test(age)) && (wait === "" || Number.isFinite(Number(wait))) && DISTRICTS.includes(district) && date >= "2025-01-01" && date <= "2025-12-31",
    );
    const r = await ask(plan({ groupBy: [{ column: "district" }], measure: { kind: "count" }, privacy: { epsilon: "1000000" } }, "rows"));
    expect(r.rows.map((x) => Number(x.value))).toEqual(DISTRICTS.map((d) => rowsFit.filter((l) => l[3] === d).length));
  });
});
