/**
 * Extreme privacy parameters and plan sizes through a real Answerer (built dist/, real DuckDB on the
 * fixture data): every plan is answered or refused with a message naming the limit, and nothing
 * hangs. Each batch runs in a child process (limits-probe.mjs) with a timeout, so a plan that never
 * returns fails here instead of freezing the runner. Before the exact interval code, the first
 * plans of "each family" (epsilon 1e-15, std at 0.0001 on a wide column, describe at 0.001, within
 * 1e15) never returned.
 */
import { spawnSync } from "node:child_process";
import { readFileSync } from "node:fs";
import { dirname, join } from "node:path";
import { fileURLToPath } from "node:url";
import { describe, expect, it } from "vitest";
import { PLAN_LIMITS, PRIVACY_LIMITS } from "../../runtime/protocol/limits.js";
import type { QueryPlan } from "../../runtime/protocol/messages.js";
import { FIXTURE_POLICY, FIXTURES, tempPolicy } from "../fixtures/curator-helpers.js";
import { Rational, halfWidth } from "../../runtime/core/index.js";

const PROBE = join(dirname(fileURLToPath(import.meta.url)), "limits-probe.mjs");
/** A hang guard, not a speed target. */
const CHILD_TIMEOUT_MS = 240_000;

type Result =
  | { ok: true; cost: string; halfWidths: string[]; rows: number | null; previewMs: number; askMs: number | null }
  | { ok: false; name: string; message: string; ms: number };

function probe(policy: string, plans: unknown[], ask = true): Result[] {
  const r = spawnSync(process.execPath, [PROBE], { input: JSON.stringify({ policy, plans, ask }), timeout: CHILD_TIMEOUT_MS, encoding: "utf8", maxBuffer: 1 << 26 });
  if (r.error !== undefined || r.status !== 0) throw new Error(`probe failed (a hang ends here by its timeout): ${r.error?.message ?? r.stderr.slice(0, 400)}`);
  const lines = r.stdout.trim().split("\n").map((l) => JSON.parse(l) as Result);
  expect(lines).toHaveLength(plans.length);
  return lines;
}

/** The fixture rows with a wide numeric column (0..10^6 on a 0.001 grid: 10^9 grid units). */
const WIDE = tempPolicy(
  `analysts:
  ada: { token: "scrypt$16384$8$1$aHVzaC1maXh0dXJlLWFkYQ==$M4hS+l6T/wRbknk1SHiefzawr9CqZcSmT7GpglZJo4I=" }
datasets:
  visits:
    source: visits.csv
    unit: { column: patient_id, maxRows: 4, maxGroups: 2 }
    accounting: { mode: pure, cap: { epsilon: "10" } }
    analysts: [ada]
    columns:
      age:          { type: integer, range: [0, 100], step: "1" }
      wait_minutes: { type: number, range: [0, 1000000], step: "0.001" }
      district:     { type: category, values: [Northgate, Riverside, Old Town] }
      visit_date:   { type: date, range: ["2025-01-01", "2025-12-31"] }
      insured:      { type: boolean }
  rows:
    # A copy of the file: one population may not hold two differing caps for ada.
    source: visits-rows.csv
    accounting: { mode: zcdp, cap: { epsilon: "5", delta: "1e-6" } }
    analysts: [ada]
    columns:
      age:          { type: integer, range: [0, 100] }
      wait_minutes: { type: number, range: [0, 1000000], step: "0.001" }
      district:     { type: category, values: [Northgate, Riverside, Old Town] }
      insured:      { type: boolean }
`,
  { "visits.csv": readFileSync(join(FIXTURES, "visits.csv"), "utf8"), "visits-rows.csv": readFileSync(join(FIXTURES, "visits.csv"), "utf8") },
);

const MEASURES: QueryPlan["measure"][] = [
  { kind: "count" },
  { kind: "sum", column: "wait_minutes" },
  { kind: "mean", column: "wait_minutes" },
  { kind: "variance", column: "wait_minutes" },
  { kind: "std", column: "wait_minutes" },
  { kind: "quantile", column: "wait_minutes", p: [0.001, 0.5, 0.999] },
  { kind: "histogram", column: "wait_minutes", bins: 50 },
  { kind: "crosstab", rows: "district", cols: "insured" },
  { kind: "describe" },
];
const ACCURACY_FIRST = new Set(["count", "sum", "histogram", "crosstab"]);

const TINY_FRACTION = "1/999999999999999999999999999999";
const THIRTY_DIGITS = "0.123456789012345678901234567890";

/** [dataset, privacy, confidence, expected refusal (regex) or null] */
const ASKS: [string, QueryPlan["privacy"], number | undefined, RegExp | null][] = [
  // pure epsilon
  ["visits", { epsilon: PRIVACY_LIMITS.minEpsilon }, undefined, null],
  ["visits", { epsilon: PRIVACY_LIMITS.maxEpsilon }, 0.999999999999, null],
  ["visits", { epsilon: THIRTY_DIGITS }, 0.001, null],
  ["visits", { epsilon: "1/3" }, undefined, null],
  ["visits", { epsilon: "1e-15" }, undefined, /plan\.privacy\.epsilon: below the smallest epsilon the curator supports \(1e-9\)/],
  ["visits", { epsilon: TINY_FRACTION }, undefined, /plan\.privacy\.epsilon: below the smallest epsilon/],
  ["visits", { epsilon: "1000000001" }, undefined, /plan\.privacy\.epsilon: above the largest epsilon the curator supports \(1e9\)/],
  ["visits", { epsilon: "0.1234567890123456789012345678901" }, undefined, /at most 30 digits/],
  ["visits", { epsilon: "1" }, 1e-300, /confidence: must lie between 0\.001 and 0\.999999999999/],
  ["visits", { epsilon: "1" }, 0.9999999999999, /confidence: must lie between/],
  // zCDP rho
  ["rows", { rho: PRIVACY_LIMITS.minRho }, 0.999999999999, null],
  ["rows", { rho: PRIVACY_LIMITS.maxRho }, 0.001, null],
  ["rows", { rho: THIRTY_DIGITS }, undefined, null],
  ["rows", { rho: "1e-30" }, undefined, /plan\.privacy\.rho: below the smallest rho the curator supports \(1e-18\)/],
  ["rows", { rho: TINY_FRACTION }, undefined, /plan\.privacy\.rho: below the smallest rho/],
  ["rows", { rho: "123456789012345678901234567890" }, undefined, /plan\.privacy\.rho: above the largest rho the curator supports \(5e17\)/],
  // epsilon on a zCDP dataset
  ["rows", { epsilon: PRIVACY_LIMITS.minEpsilon }, 0.999999999999, null],
  ["rows", { epsilon: PRIVACY_LIMITS.maxEpsilon }, undefined, null],
  ["rows", { epsilon: "1e-15" }, undefined, /plan\.privacy\.epsilon: below the smallest epsilon/],
];

/** Accuracy-first asks: [dataset, within, confidence, refusal or null]. */
const WITHIN: [string, number, number | undefined, RegExp | null][] = [
  ["visits", 1e15, undefined, null],
  ["rows", 1e15, 0.999999999999, null],
  ["visits", 1, 0.001, null],
  ["rows", 7.5, undefined, null],
  ["visits", 1e16, undefined, /within: must lie between 1e-12 and 1e15/],
  ["rows", 1e-300, undefined, /within: must lie between/],
];

function check(results: Result[], expected: (RegExp | null)[], label: (i: number) => string): void {
  results.forEach((r, i) => {
    const want = expected[i];
    if (want === null) {
      expect(r.ok, `${label(i)}: ${r.ok ? "" : r.message}`).toBe(true);
    } else {
      expect(r.ok, `${label(i)} should be refused`).toBe(false);
      if (!r.ok) {
        expect(r.name, label(i)).toBe("BadInputError");
        expect(r.message, label(i)).toMatch(want);
      }
    }
  });
}

describe("extreme privacy parameters: every measure kind answers or refuses, never hangs", () => {
  it("epsilon, rho and epsilon-on-zCDP asks, tiny, huge, many digits and fractions, confidences at both ends", () => {
    const plans: QueryPlan[] = [];
    const expected: (RegExp | null)[] = [];
    for (const [dataset, privacy, confidence, refusal] of ASKS) {
      for (const measure of MEASURES) {
        plans.push({ v: 1, dataset, measure, privacy, ...(confidence === undefined ? {} : { confidence }) });
        expected.push(refusal);
      }
    }
    const results = probe(WIDE, plans);
    check(results, expected, (i) => JSON.stringify({ ...plans[i], v: undefined }));
    // answers have one row per declared cell
    results.forEach((r, i) => {
      if (r.ok && plans[i].measure.kind === "histogram") expect(r.rows).toBe(50);
    });
  }, CHILD_TIMEOUT_MS + 10_000);

  it("accuracy-first asks with huge and tiny `within`, each kind that allows it", () => {
    const plans: QueryPlan[] = [];
    const expected: (RegExp | null)[] = [];
    for (const [dataset, within, confidence, refusal] of WITHIN) {
      for (const measure of MEASURES) {
        plans.push({ v: 1, dataset, measure, privacy: confidence === undefined ? { within } : { within, confidence } });
        const allowed = ACCURACY_FIRST.has(measure.kind);
        expected.push(refusal ?? (allowed ? null : /accuracy-first asks apply to count, sum, histogram and crosstab/));
      }
    }
    const results = probe(WIDE, plans);
    check(results, expected, (i) => JSON.stringify({ ...plans[i], v: undefined }));
  }, CHILD_TIMEOUT_MS + 10_000);

  it("a within below one step of the value is refused; planned half-widths never exceed within", () => {
    // a sum of the wide column (sensitivity 4 x 10^9 grid units) within one grid unit needs more
    // than the largest supported epsilon or rho: refused, naming it
    const fine = probe(WIDE, [
      { v: 1, dataset: "visits", measure: { kind: "sum", column: "wait_minutes" }, privacy: { within: 0.001 } },
      { v: 1, dataset: "rows", measure: { kind: "sum", column: "wait_minutes" }, privacy: { within: 0.001 } },
    ], false);
    check(fine, [
      /plan\.privacy\.within: reaching this half-width needs more than the largest epsilon the curator supports \(1000000000\)/,
      /plan\.privacy\.within: reaching this half-width needs more than the largest rho the curator supports \(500000000000000000\)/,
    ], (i) => `wide sum within one unit (${i})`);
    const plans: QueryPlan[] = [
      { v: 1, dataset: "visits", measure: { kind: "count" }, privacy: { within: 0.5 } },
      { v: 1, dataset: "visits", measure: { kind: "count" }, privacy: { within: 3 } },
      { v: 1, dataset: "rows", measure: { kind: "sum", column: "age" }, privacy: { within: 40, confidence: 0.99 } },
    ];
    const r = probe(FIXTURE_POLICY, plans, false);
    expect(r[0].ok).toBe(false);
    if (!r[0].ok) expect(r[0].message).toMatch(/at least one step/);
    for (const [i, w] of [[1, 3], [2, 40]] as const) {
      const x = r[i];
      if (!x.ok) throw new Error(x.message);
      expect(Rational.parse(x.halfWidths[0]).le(Rational.of(w))).toBe(true);
    }
  }, CHILD_TIMEOUT_MS + 10_000);
});

describe("plan sizes at and past every limit", () => {
  const base = { v: 1 as const, dataset: "visits", privacy: { epsilon: "1" } };
  const inList = (n: number) => ({ op: "in" as const, column: "age", values: Array.from({ length: n }, (_, i) => i % 101) });
  const cases: [string, unknown, RegExp | null][] = [
    // declared cells: 1000 x 10 = maxCells exactly, then past it
    ["cells at the limit (std)", { ...base, groupBy: [{ column: "age", bins: 1000 }, { column: "wait_minutes", bins: 10 }], measure: { kind: "std", column: "wait_minutes" } }, null],
    ["cells at the limit (quantile-free mean)", { ...base, groupBy: [{ column: "age", bins: 1000 }, { column: "wait_minutes", bins: 10 }], measure: { kind: "mean", column: "age" } }, null],
    ["three 1000-bin keys", { ...base, groupBy: [{ column: "age", bins: 1000 }, { column: "wait_minutes", bins: 1000 }, { column: "insured" }], measure: { kind: "count" } },
      /plan\.groupBy: declares 2000000 cells \(the product of the key sizes\), above the curator's limit of 10000 \(maxCells\)/],
    ["one past the cell limit", { ...base, groupBy: [{ column: "age", bins: 1000 }, { column: "wait_minutes", bins: 10 }, { column: "insured" }], measure: { kind: "sum", column: "age" } }, /maxCells/],
    ["bins at the limit", { ...base, measure: { kind: "histogram", column: "age", bins: PLAN_LIMITS.maxBins } }, null],
    ["bins past the limit", { ...base, measure: { kind: "histogram", column: "age", bins: PLAN_LIMITS.maxBins + 1 } }, /bins: must be at most 1000/],
    ["quantiles at the limit", { ...base, measure: { kind: "quantile", column: "wait_minutes", p: Array.from({ length: PLAN_LIMITS.maxQuantiles }, (_, i) => (i + 1) / 25) } }, null],
    ["quantiles past the limit", { ...base, measure: { kind: "quantile", column: "wait_minutes", p: Array.from({ length: PLAN_LIMITS.maxQuantiles + 1 }, (_, i) => (i + 1) / 25) } }, /at most 20 probabilities/],
    ["probability with too many digits", { ...base, measure: { kind: "quantile", column: "age", p: [0.1234] } }, /at most 3 decimal places/],
    ["IN list at the limit", { ...base, where: inList(PLAN_LIMITS.maxInValues), measure: { kind: "count" } }, null],
    ["IN list past the limit", { ...base, where: inList(PLAN_LIMITS.maxInValues + 1), measure: { kind: "count" } }, /at most 1000 values/],
    ["IN values in all at the limit", { ...base, where: { op: "or", of: Array.from({ length: 5 }, () => inList(1000)) }, measure: { kind: "count" } }, null],
    ["IN values in all past the limit", { ...base, where: { op: "or", of: [...Array.from({ length: 5 }, () => inList(1000)), inList(1)] }, measure: { kind: "count" } }, /maxInValuesTotal/],
    ["conditions at the limit", { ...base, where: { op: "and", of: Array.from({ length: PLAN_LIMITS.maxConditions - 1 }, () => ({ op: "ge", column: "age", value: 1 })) }, measure: { kind: "count" } }, null],
    ["conditions past the limit", { ...base, where: { op: "and", of: Array.from({ length: PLAN_LIMITS.maxConditions }, () => ({ op: "ge", column: "age", value: 1 })) }, measure: { kind: "count" } }, /more than 200 conditions/],
  ];
  it("each plan answers (preview and ask) or is refused naming the limit", () => {
    const results = probe(FIXTURE_POLICY, cases.map((c) => c[1]));
    check(results, cases.map((c) => c[2]), (i) => cases[i][0]);
    const atLimit = results[0];
    if (atLimit.ok) expect(atLimit.rows).toBe(PLAN_LIMITS.maxCells);
  }, CHILD_TIMEOUT_MS + 10_000);

  it("describe counts every part's rows against maxCells", () => {
    const values = Array.from({ length: 1000 }, (_, i) => `v${i}`).join(", ");
    const cols = Array.from({ length: 11 }, (_, i) => `      c${i}: { type: category, values: [${values}] }`).join("\n");
    const file = tempPolicy(
      `analysts:
  ada: { token: "scrypt$16384$8$1$aHVzaC1maXh0dXJlLWFkYQ==$M4hS+l6T/wRbknk1SHiefzawr9CqZcSmT7GpglZJo4I=" }
datasets:
  d:
    source: d.csv
    accounting: { mode: pure, cap: { epsilon: "10" } }
    analysts: [ada]
    columns:
${cols}
`,
      { "d.csv": `${Array.from({ length: 11 }, (_, i) => `c${i}`).join(",")}\n${Array.from({ length: 11 }, () => "v1").join(",")}\n` },
    );
    const [r] = probe(file, [{ v: 1, dataset: "d", measure: { kind: "describe" }, privacy: { epsilon: "1" } }], false);
    expect(r.ok).toBe(false);
    if (!r.ok) expect(r.message).toMatch(/plan\.measure: declares 11001 cells .*maxCells/);
  }, CHILD_TIMEOUT_MS + 10_000);
});

describe("half-widths previewed at the range edges are never below the exact value", () => {
  it("count at epsilon 1e-9 (k = 4): the Laplace half-width with t = 4e9 at 0.95 is ceil(t ln(2/((1+q) a))) - 1", () => {
    // t ln(2/((1 + q) a)) with q = e^(-1/t), a = 1 - 0.95 (binary64): 11982929094.71596042... (mpmath 1.3.0, 50 digits)
    const h = halfWidth({ family: "discrete-laplace", scale: Rational.parse("4e9") }, 0.95);
    const [r] = probe(FIXTURE_POLICY, [{ v: 1, dataset: "visits", measure: { kind: "count" }, privacy: { epsilon: "1e-9" } }], false);
    if (!r.ok) throw new Error(r.message);
    expect(r.halfWidths[0]).toBe(h.toString());
    expect(h).toBe(11982929094n);
  }, CHILD_TIMEOUT_MS + 10_000);
});
