/**
 * The cell API against a stand-in curator (test/api/fake-curator.ts): plans sent, immutability of
 * handles, refusals before sending, spend tracking, and that a sealed handle has no way to return rows.
 */
import { describe, expect, test } from "vitest";
import { Answer } from "../../runtime/api/answer.js";
import { BudgetReport, LedgerView } from "../../runtime/api/budget.js";
import { CostQuote } from "../../runtime/api/quote.js";
import { CostPreview, SealedTable } from "../../runtime/api/table.js";
import { BadInputError, OverCapError, UnknownDatasetError } from "../../runtime/errors.js";
import { fakeSession } from "./fake-curator.js";

/** Every property name along a prototype chain, up to (not including) Object.prototype. */
function surface(obj: object): string[] {
  const names = new Set<string>();
  for (let p: object | null = obj; p && p !== Object.prototype; p = Object.getPrototypeOf(p)) {
    for (const n of Object.getOwnPropertyNames(p)) names.add(n);
    for (const s of Object.getOwnPropertySymbols(p)) names.add(String(s));
  }
  return [...names].sort();
}

describe("sealed handle", () => {
  test("open shows the public schema and the analyst's spend", async () => {
    const { hush, fake } = await fakeSession();
    const t = await hush.open("clinic");
    expect(t).toBeInstanceOf(SealedTable);
    expect(t.name).toBe("clinic");
    expect(t.columns.map((c) => c.name)).toEqual(["age", "wait_minutes", "district", "sex", "visit_date", "insured"]);
    expect(t.unit).toEqual({ column: "patient_id", maxRows: 4, maxGroups: 2 });
    expect(t.spend.capEpsilon).toBe("1");
    const text = String(t);
    expect(text).toContain("sealed dataset");
    expect(text).toContain("district      category: Northgate, Riverside, Eastfield");
    expect(text).toContain("ε 0 of 1 used");
    expect(fake.calls).toEqual(["open"]);
  });

  test("the handle has no method that returns rows: its whole surface is schema, spend and aggregates", async () => {
    const { hush } = await fakeSession();
    const t = await hush.open("clinic");
    const allowed = [
      // schema and state
      "constructor", "name", "description", "columns", "unit", "spend", "sessionSpent", "filter", "groups", "toString",
      // console.log/util.inspect: a one-line summary of the schema and query (no data)
      "Symbol(nodejs.util.inspect.custom)",
      // query building (return new handles)
      "where", "by",
      // differentially private aggregates and their previews, budget
      "count", "sum", "mean", "variance", "std", "quantile", "quantiles", "median", "histogram", "crosstab", "describe", "clampedShares",
      "regress", "correlate",
      "preview", "budget",
      // internal dispatch to the curator (protected), shared by aggregates
      "measure",
    ];
    expect(surface(t)).toEqual([...allowed].sort());
    // and no own enumerable data: the schema and the connection live outside the instance
    expect(Object.keys(t)).toEqual([]);
    expect(JSON.stringify(t)).toBe("{}");
    // nothing that sounds like rows on the preview either
    expect(surface(t.preview).filter((n) => /row|head|take|collect|fetch|data|sample|iter|toArray/i.test(n))).toEqual([]);
    expect(surface(t).filter((n) => /row|head|take|collect|fetch|data|sample|iter|toArray/i.test(n))).toEqual([]);
  });

  test("where and by return new handles and never change the one they were called on", async () => {
    const { hush, fake } = await fakeSession();
    const t = await hush.open("clinic");
    const old = hush.col("age").ge(65);
    const a = t.where(old);
    const b = a.by("district");
    const c = a.where({ sex: "female" }).by("age", { bins: 4 });
    expect(t.filter).toBeUndefined();
    expect(t.groups).toEqual([]);
    expect(a.filter).toEqual({ op: "ge", column: "age", value: 65 });
    expect(a.groups).toEqual([]);
    expect(b.groups).toEqual([{ column: "district" }]);
    expect(c.filter).toEqual({ op: "and", of: [{ op: "ge", column: "age", value: 65 }, { op: "eq", column: "sex", value: "female" }] });
    expect(c.groups).toEqual([{ column: "age", bins: 4 }]);
    expect(Object.isFrozen(t)).toBe(true);
    // the getters hand out copies
    c.groups.push({ column: "sex" });
    expect(c.groups).toHaveLength(1);

    await b.mean("wait_minutes", { epsilon: 0.1 });
    await t.count({ epsilon: "0.05" });
    expect(fake.asked[0]).toEqual({
      v: 1,
      dataset: "clinic",
      where: { op: "ge", column: "age", value: 65 },
      groupBy: [{ column: "district" }],
      measure: { kind: "mean", column: "wait_minutes" },
      privacy: { epsilon: "0.1" },
      confidence: 0.95,
    });
    expect(fake.asked[1]).toEqual({ v: 1, dataset: "clinic", measure: { kind: "count" }, privacy: { epsilon: "0.05" }, confidence: 0.95 });
  });

  test("every aggregate sends the expected measure", async () => {
    const { hush, fake } = await fakeSession();
    const t = await hush.open("clinic");
    const e = { epsilon: "1/100" } as const;
    await t.sum("wait_minutes", e);
    await t.variance("age", e);
    await t.std("age", e);
    await t.quantile("age", 0.9, e);
    await t.quantiles("age", [0.25, 0.75], e);
    await t.median("wait_minutes", e);
    await t.histogram("age", { bins: 5, ...e });
    await t.crosstab("sex", "district", e);
    await t.describe(e);
    await t.by("insured").count({ within: 20, confidence: 0.9 });
    expect(fake.asked.map((p) => p.measure)).toEqual([
      { kind: "sum", column: "wait_minutes" },
      { kind: "variance", column: "age" },
      { kind: "std", column: "age" },
      { kind: "quantile", column: "age", p: [0.9] },
      { kind: "quantile", column: "age", p: [0.25, 0.75] },
      { kind: "quantile", column: "wait_minutes", p: [0.5] },
      { kind: "histogram", column: "age", bins: 5 },
      { kind: "crosstab", rows: "sex", cols: "district" },
      { kind: "describe" },
      { kind: "count" },
    ]);
    expect(fake.asked[9].privacy).toEqual({ within: 20, confidence: 0.9 });
    expect(fake.asked[9].confidence).toBe(0.9);
    expect(fake.asked[9].groupBy).toEqual([{ column: "insured" }]);
  });

  test("clampedShares and describe({ clampedShares }) send the clamped measures; the spend option is not sent", async () => {
    const { hush, fake } = await fakeSession();
    const t = await hush.open("clinic");
    await t.clampedShares("age", { epsilon: 0.1 });
    await t.clampedShares(["age", "wait_minutes"], { epsilon: 0.1 });
    await t.describe({ epsilon: 0.1, clampedShares: true });
    await t.describe({ epsilon: 0.1, clampedShares: false });
    expect(fake.asked.map((p) => p.measure)).toEqual([
      { kind: "clamped", columns: ["age"] },
      { kind: "clamped", columns: ["age", "wait_minutes"] },
      { kind: "describe", clamped: true },
      { kind: "describe" },
    ]);
    expect(fake.asked.map((p) => p.privacy)).toEqual(Array.from({ length: 4 }, () => ({ epsilon: "0.1" })));
  });

  test.each([
    ["epsilon NaN", (t: SealedTable) => t.count({ epsilon: Number.NaN }), /NaN/],
    ["epsilon ∞", (t: SealedTable) => t.count({ epsilon: Number.POSITIVE_INFINITY }), /finite/],
    ["epsilon 0", (t: SealedTable) => t.count({ epsilon: 0 }), /greater than 0/],
    ["epsilon negative", (t: SealedTable) => t.count({ epsilon: -1 }), /greater than 0/],
    ["rho junk", (t: SealedTable) =>
      // @ts-expect-error a non-numeric amount is a type error in a cell; the run-time check still refuses it
      t.count({ rho: "lots" }), /positive decimal/],
    ["no spend", (t: SealedTable) => t.count(undefined as never), /say how much to spend/],
    ["confidence 95", (t: SealedTable) => t.count({ epsilon: 0.1, confidence: 95 }), /strictly between 0 and 1/],
    ["unknown column", (t: SealedTable) => t.mean("wait", { epsilon: 0.1 }), /no column "wait"/],
    ["unit column", (t: SealedTable) => t.mean("patient_id", { epsilon: 0.1 }), /privacy unit column/],
    ["mean of a category", (t: SealedTable) => t.mean("district", { epsilon: 0.1 }), /needs a numeric column/],
    ["crosstab of numbers", (t: SealedTable) => t.crosstab("age", "sex", { epsilon: 0.1 }), /crosstab needs category/],
    ["crosstab of one column", (t: SealedTable) => t.crosstab("sex", "sex", { epsilon: 0.1 }), /two different columns/],
    ["quantile p=1", (t: SealedTable) => t.quantile("age", 1, { epsilon: 0.1 }), /strictly between 0 and 1/],
    ["quantiles repeated", (t: SealedTable) => t.quantiles("age", [0.5, 0.5], { epsilon: 0.1 }), /same probability twice/],
    ["histogram bins 0", (t: SealedTable) => t.histogram("age", { bins: 0, epsilon: 0.1 }), /bins must be a whole number/],
    ["histogram bins 2.5", (t: SealedTable) => t.histogram("age", { bins: 2.5, epsilon: 0.1 }), /bins must be a whole number/],
    ["grouped quantile", (t: SealedTable) => t.by("district").median("age", { epsilon: 0.1 }), /cannot be grouped/],
    ["accuracy-first mean", (t: SealedTable) => t.mean("age", { within: 2 }), /accuracy first/],
    ["column not a string", (t: SealedTable) => t.sum(42 as never, { epsilon: 0.1 }), /name a column/],
    ["clamped shares of nothing", (t: SealedTable) => t.clampedShares([], { epsilon: 0.1 }), /at least one numeric column/],
    ["clamped shares of a category", (t: SealedTable) => t.clampedShares(["age", "district"], { epsilon: 0.1 }), /needs a numeric column/],
    ["clamped shares twice", (t: SealedTable) => t.clampedShares(["age", "age"], { epsilon: 0.1 }), /same column twice/],
    ["clamped shares grouped", (t: SealedTable) => t.by("district").clampedShares("age", { epsilon: 0.1 }), /cannot be grouped/],
    ["describe clampedShares junk", (t: SealedTable) => t.describe({ epsilon: 0.1, clampedShares: "yes" as never }), /true or false/],
  ])("%s is refused before sending, saying what remains", async (_name, run, msg) => {
    const { hush, fake } = await fakeSession();
    const t = await hush.open("clinic");
    const p = run(t);
    await expect(p).rejects.toThrow(BadInputError);
    await expect(p).rejects.toThrow(msg);
    await expect(p).rejects.toThrow(/Nothing was spent; ε 1 of 1 remains on clinic for ada\./);
    expect(fake.asked).toEqual([]);
    expect(fake.previewed).toEqual([]);
  });

  test.each([
    ["by an unknown column", (t: SealedTable) => t.by("ward"), /no column "ward"/],
    ["by a numeric column without bins", (t: SealedTable) => t.by("age"), /say how many equal-width bins/],
    ["by a category with bins", (t: SealedTable) => t.by("district", { bins: 3 }), /leave bins out/],
    ["by a date", (t: SealedTable) => t.by("visit_date"), /not supported/],
    ["by twice", (t: SealedTable) => t.by("sex").by("sex"), /already grouped by sex/],
    ["by 4 keys", (t: SealedTable) => t.by("sex").by("district").by("insured").by("age", { bins: 2 }), /at most 3/],
    ["where on an undeclared value", (t: SealedTable) => t.where({ district: "Atlantis" }), /not a declared value/],
    ["where with a string for a number", (t: SealedTable) => t.where(hushCol("age").ge("65" as never)), /numeric/],
  ])("building %s fails at once with a clear error", async (_name, build, msg) => {
    const { hush, fake } = await fakeSession();
    const t = await hush.open("clinic");
    expect(() => build(t)).toThrow(BadInputError);
    expect(() => build(t)).toThrow(msg);
    expect(fake.asked).toEqual([]);
  });

  test("an over-cap refusal says what remains, keeps the curator's spend, and spends nothing", async () => {
    const { hush, fake } = await fakeSession();
    const t = await hush.open("clinic");
    await t.count({ epsilon: 0.75 });
    const p = t.sum("age", { epsilon: 0.5 });
    await expect(p).rejects.toThrow(OverCapError);
    await expect(p).rejects.toThrow(/cross the cap.*\nNothing was spent; ε 0\.25 of 1 remains on clinic for ada\./s);
    const err = await p.catch((e: unknown) => e);
    expect(err).toBeInstanceOf(OverCapError);
    expect((err as OverCapError).spend?.remainingEpsilon).toBe("1/4");
    expect((await hush.budget()).of("clinic")?.sessionSpent).toBe("3/4");
    expect(fake.asked).toHaveLength(2);
  });

  test("an unknown dataset is a clear error", async () => {
    const { hush } = await fakeSession();
    await expect(hush.open("nope")).rejects.toThrow(UnknownDatasetError);
    await expect(hush.open("")).rejects.toThrow(/name a dataset/);
  });
});

function hushCol(name: string) {
  return { ge: (v: unknown) => ({ op: "ge", column: name, value: v }) as never };
}

describe("releases, previews, budget, ledger", () => {
  test("a scalar answer: value, interval, receipt and a one-line summary", async () => {
    const { hush } = await fakeSession();
    const t = await hush.open("clinic");
    const a = await t.where({ age: { ge: 65 } }).mean("wait_minutes", { epsilon: 0.1 });
    expect(a).toBeInstanceOf(Answer);
    expect(a.value).toBe(100);
    expect(a.interval).toEqual([95, 105]);
    expect(a.isScalar).toBe(true);
    expect(a.receipt.seq).toBe(1);
    expect(a.cost).toBe("1/10");
    expect(a.what).toBe("mean wait_minutes where age ≥ 65");
    expect(String(a)).toBe("mean wait_minutes where age ≥ 65 = 100 ± 5 · cost ε=0.1\n  at least 95% of such answers fall within ±5 of the true mean (privacy noise only) · 1 note: .notes");
    expect(Object.isFrozen(a.release.rows[0])).toBe(true);
  });

  test("a quantile's one-liner says it has no value interval instead of showing a bare confidence", async () => {
    const { hush } = await fakeSession();
    const t = await hush.open("clinic");
    const a = await t.median("wait_minutes", { epsilon: 0.1 });
    expect(String(a)).toBe("median wait_minutes = 30.5 · cost ε=0.1\n  no interval on the value: the median's guarantee is on its rank (see the notes) · 1 note: .notes");
  });

  test("grouped answers: rows by key; .value refuses with a pointer to .rows", async () => {
    const { hush } = await fakeSession();
    const t = await hush.open("clinic");
    const a = await t.by("district").count({ epsilon: 0.1 });
    expect(a.rows.map((r) => r.key)).toEqual([{ district: "Northgate" }, { district: "Riverside" }, { district: "Eastfield" }]);
    expect(a.get("Riverside")?.value).toBe(110);
    expect(a.get("Riverside")?.text).toBe("110 ± 5");
    expect(a.get("Atlantis")).toBeUndefined();
    expect(() => a.value).toThrow(/3 numbers.*\.rows/);
    expect(String(a).split("\n")).toEqual([
      "count by district (95%):",
      "  Northgate  100 ± 5",
      "  Riverside  110 ± 5",
      "  Eastfield  120 ± 5",
      "  for each value, at least 95% of such answers fall within the ± shown of the true count (privacy noise only)",
      "cost ε=0.1 · 1 note: .notes",
    ]);
  });

  test("a replay costs nothing and is counted as such", async () => {
    const { hush } = await fakeSession();
    const t = await hush.open("clinic");
    await t.count({ epsilon: 0.2 });
    const again = await t.count({ epsilon: 0.2 });
    expect(again.replay).toBe(true);
    expect(again.cost).toBe("0");
    expect(String(again)).toMatch(/^count = 100 ± 5 · replayed, no new cost\n/);
    const b = await hush.budget();
    expect(b.of("clinic")?.queries.map((q) => [q.seq, q.replay, q.cost])).toEqual([
      [1, false, "1/5"],
      [1, true, "0"],
    ]);
  });

  test("preview prices without spending", async () => {
    const { hush, fake } = await fakeSession();
    const t = await hush.open("clinic");
    const q = await t.by("district").preview.mean("wait_minutes", { epsilon: 0.3 });
    expect(q).toBeInstanceOf(CostQuote);
    expect(t.preview).toBeInstanceOf(CostPreview);
    expect(q.cost).toBe("3/10");
    expect(q.affordable).toBe(true);
    expect(q.expectedErrors).toEqual([{ stat: "mean", column: "wait_minutes", halfWidth: 2.5, exact: "2.5" }]);
    expect(String(q)).toContain("preview mean wait_minutes by district: would cost ε=0.3 · fits under the cap");
    expect(fake.asked).toEqual([]);
    expect(fake.previewed).toHaveLength(1);
    expect((await hush.budget()).of("clinic")?.spend.spentEpsilon).toBe("0");
    await expect(t.preview.mean("district", { epsilon: 0.1 })).rejects.toThrow(/numeric column/);
  });

  test("budget and ledger", async () => {
    const { hush } = await fakeSession();
    const z = await hush.open("clinic_z");
    const empty = await hush.budget();
    expect(empty).toBeInstanceOf(BudgetReport);
    expect(empty.datasets.map((d) => d.dataset)).toEqual(["clinic_z"]);
    await z.count({ rho: "0.01" });
    const a = await z.count({ rho: "0.02" }).catch(() => null);
    expect(a).not.toBeNull();
    const b = await hush.budget("clinic_z");
    expect(b.of("clinic_z")?.sessionSpent).toBe("3/100");
    expect(String(b)).toContain("clinic_z: ρ 0.03 of 0.05 used · 0.02 remaining (ε 0 of 1 at δ=0.000001) · 2 releases · this session 0.03");
    const l = await hush.ledger();
    expect(l).toBeInstanceOf(LedgerView);
    expect(l.entries.map((e) => e.seq)).toEqual([1, 2]);
    expect(String(l)).toContain("clinic_z #1 count");
  });

  test("the connection is made on first use, once, and closed with the session", async () => {
    const { session, hush, fake } = await fakeSession();
    expect(fake.calls).toEqual([]);
    await Promise.all([hush.open("clinic"), hush.open("clinic_z")]);
    await hush.datasets();
    await session.close();
    expect(fake.closed).toBe(true);
    await expect(hush.open("clinic")).rejects.toThrow(/closed/);
  });
});
