/**
 * Plan validation, structural (runtime/protocol/schema.ts) and against the dataset's public schema
 * (runtime/curator/answer.ts prepare + sql.ts). Every bad plan must give a HushError naming the
 * path inside the plan, read no data, and reveal no data value.
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { readFileSync } from "node:fs";
import { join } from "node:path";
import { digestOf } from "../../runtime/protocol/canonical.js";
import { BadInputError, HushError, ProtocolError, UnauthorizedError, UnknownDatasetError } from "../../runtime/errors.js";
import { parsePlan, parseRequest } from "../../runtime/protocol/schema.js";
import { FIXTURES, type Opened, open } from "../fixtures/curator-helpers.js";

const INJECTIONS = [
  "'; DROP TABLE d0; --",
  '" OR 1=1 --',
  "Northgate' OR '1'='1",
  "1); SELECT * FROM read_csv('/etc/passwd'); --",
  "$1",
];

const base = (over: Record<string, unknown> = {}) => ({ v: 1, dataset: "visits", measure: { kind: "count" }, privacy: { epsilon: "1" }, ...over });
const where = (w: unknown) => base({ where: w });
const measure = (m: unknown) => base({ measure: m });
const privacy = (p: unknown) => base({ privacy: p });

type Case = { name: string; plan: unknown; path: string; kind?: new (...a: never[]) => HushError };

const CASES: Case[] = [
  // --- malformed shapes
  { name: "not an object", plan: "count everything", path: "plan" },
  { name: "null", plan: null, path: "plan" },
  { name: "array", plan: [base()], path: "plan" },
  { name: "missing v", plan: { dataset: "visits", measure: { kind: "count" }, privacy: { epsilon: "1" } }, path: "plan.v" },
  { name: "wrong version", plan: base({ v: 2 }), path: "plan.v" },
  { name: "unknown top key", plan: base({ sql: "SELECT 1" }), path: "plan" },
  { name: "missing measure", plan: { v: 1, dataset: "visits", privacy: { epsilon: "1" } }, path: "plan.measure" },
  { name: "missing privacy", plan: { v: 1, dataset: "visits", measure: { kind: "count" } }, path: "plan.privacy" },
  { name: "unknown measure kind", plan: measure({ kind: "max", column: "age" }), path: "plan.measure" },
  { name: "measure extra key", plan: measure({ kind: "count", column: "age" }), path: "plan.measure" },
  { name: "sum without column", plan: measure({ kind: "sum" }), path: "plan.measure.column" },
  { name: "where not an object", plan: where("age > 3"), path: "plan.where" },
  { name: "unknown where op", plan: where({ op: "like", column: "district", value: "N%" }), path: "plan.where" },
  { name: "where extra key", plan: where({ op: "eq", column: "age", value: 3, raw: "1=1" }), path: "plan.where" },
  { name: "and with no parts", plan: where({ op: "and", of: [] }), path: "plan.where.of" },
  { name: "in with no values", plan: where({ op: "in", column: "district", values: [] }), path: "plan.where.values" },
  { name: "value an object", plan: where({ op: "eq", column: "age", value: { $gt: 1 } }), path: "plan.where.value" },
  { name: "value null", plan: where({ op: "eq", column: "age", value: null }), path: "plan.where.value" },
  { name: "value NaN", plan: where({ op: "eq", column: "age", value: NaN }), path: "plan.where.value" },
  { name: "value Infinity", plan: where({ op: "gt", column: "age", value: Infinity }), path: "plan.where.value" },
  { name: "too deep", plan: where(Array.from({ length: 30 }).reduce((w) => ({ op: "not", of: w }), { op: "isNull", column: "age" })), path: "plan.where" },
  {
    name: "too many conditions",
    plan: where({ op: "or", of: Array.from({ length: 300 }, () => ({ op: "isNull", column: "age" })) }),
    path: "plan.where",
  },
  { name: "too many in values", plan: where({ op: "in", column: "age", values: Array.from({ length: 1001 }, (_, i) => i) }), path: "plan.where.values" },
  { name: "groupBy empty", plan: base({ groupBy: [] }), path: "plan.groupBy" },
  { name: "groupBy a string", plan: base({ groupBy: "district" }), path: "plan.groupBy" },
  { name: "bins zero", plan: measure({ kind: "histogram", column: "age", bins: 0 }), path: "plan.measure.bins" },
  { name: "bins too many", plan: measure({ kind: "histogram", column: "age", bins: 1001 }), path: "plan.measure.bins" },
  { name: "bins fractional", plan: measure({ kind: "histogram", column: "age", bins: 2.5 }), path: "plan.measure.bins" },
  { name: "quantile p = 0", plan: measure({ kind: "quantile", column: "age", p: [0] }), path: "plan.measure.p[0]" },
  { name: "quantile p = 1", plan: measure({ kind: "quantile", column: "age", p: [0.5, 1] }), path: "plan.measure.p[1]" },
  { name: "quantile p empty", plan: measure({ kind: "quantile", column: "age", p: [] }), path: "plan.measure.p" },
  { name: "quantile p repeated", plan: measure({ kind: "quantile", column: "age", p: [0.5, 0.5] }), path: "plan.measure.p" },
  { name: "confidence 1", plan: base({ confidence: 1 }), path: "plan.confidence" },
  { name: "confidence 0", plan: base({ confidence: 0 }), path: "plan.confidence" },
  { name: "confidence as string", plan: base({ confidence: "0.95" }), path: "plan.confidence" },
  // --- privacy asks
  { name: "epsilon as number", plan: privacy({ epsilon: 1 }), path: "plan.privacy" },
  { name: "epsilon negative", plan: privacy({ epsilon: "-1" }), path: "plan.privacy" },
  { name: "epsilon zero", plan: privacy({ epsilon: "0" }), path: "plan.privacy" },
  { name: "epsilon NaN", plan: privacy({ epsilon: "NaN" }), path: "plan.privacy" },
  { name: "epsilon Infinity", plan: privacy({ epsilon: "Infinity" }), path: "plan.privacy" },
  { name: "epsilon 1/0", plan: privacy({ epsilon: "1/0" }), path: "plan.privacy" },
  { name: "epsilon and rho", plan: privacy({ epsilon: "1", rho: "1" }), path: "plan.privacy" },
  { name: "within negative", plan: privacy({ within: -3 }), path: "plan.privacy" },
  { name: "within below one step", plan: privacy({ within: 0.5 }), path: "plan.privacy.within" },
  { name: "rho on a pure dataset", plan: privacy({ rho: "0.5" }), path: "plan.privacy.rho" },
  { name: "within for a mean", plan: base({ measure: { kind: "mean", column: "age" }, privacy: { within: 3 } }), path: "plan.privacy.within" },
  { name: "confidences disagree", plan: base({ privacy: { within: 3, confidence: 0.9 }, confidence: 0.95 }), path: "plan.privacy.confidence" },
  // --- against the public schema
  { name: "unknown dataset", plan: base({ dataset: "payroll" }), path: "payroll", kind: UnknownDatasetError },
  { name: "unknown column in where", plan: where({ op: "eq", column: "salary", value: 3 }), path: "plan.where.column" },
  { name: "unit column in where", plan: where({ op: "eq", column: "patient_id", value: "p01" }), path: "plan.where.column" },
  { name: "unit column grouped", plan: base({ groupBy: [{ column: "patient_id" }] }), path: "plan.groupBy[0].column" },
  { name: "unknown measure column", plan: measure({ kind: "sum", column: "salary" }), path: "plan.measure.column" },
  { name: "sum of a category", plan: measure({ kind: "sum", column: "district" }), path: "plan.measure.column" },
  { name: "mean of a date", plan: measure({ kind: "mean", column: "visit_date" }), path: "plan.measure.column" },
  { name: "histogram of a boolean", plan: measure({ kind: "histogram", column: "insured", bins: 2 }), path: "plan.measure.column" },
  { name: "crosstab of numbers", plan: measure({ kind: "crosstab", rows: "age", cols: "district" }), path: "plan.measure.rows" },
  { name: "crosstab of one column", plan: measure({ kind: "crosstab", rows: "district", cols: "district" }), path: "plan.measure.cols" },
  { name: "category value outside the list", plan: where({ op: "eq", column: "district", value: "Atlantis" }), path: "plan.where.value" },
  { name: "category in list outside", plan: where({ op: "in", column: "district", values: ["Northgate", "Atlantis"] }), path: "plan.where.values[1]" },
  { name: "category compared with lt", plan: where({ op: "lt", column: "district", value: "Northgate" }), path: "plan.where.value" },
  { name: "number given a string", plan: where({ op: "eq", column: "age", value: "42" }), path: "plan.where.value" },
  { name: "number given a boolean", plan: where({ op: "ge", column: "wait_minutes", value: true }), path: "plan.where.value" },
  { name: "date not ISO", plan: where({ op: "ge", column: "visit_date", value: "03/01/2025" }), path: "plan.where.value" },
  { name: "date impossible", plan: where({ op: "ge", column: "visit_date", value: "2025-02-30" }), path: "plan.where.value" },
  { name: "date given a number", plan: where({ op: "ge", column: "visit_date", value: 20250101 }), path: "plan.where.value" },
  { name: "boolean given a string", plan: where({ op: "eq", column: "insured", value: "yes" }), path: "plan.where.value" },
  { name: "boolean with gt", plan: where({ op: "gt", column: "insured", value: false }), path: "plan.where.value" },
  { name: "between reversed numbers", plan: where({ op: "between", column: "age", low: 50, high: 10 }), path: "plan.where" },
  { name: "between reversed dates", plan: where({ op: "between", column: "visit_date", low: "2025-06-01", high: "2025-01-01" }), path: "plan.where" },
  { name: "between on a category", plan: where({ op: "between", column: "district", low: "A", high: "Z" }), path: "plan.where" },
  { name: "nested bad literal", plan: where({ op: "and", of: [{ op: "isNull", column: "age" }, { op: "not", of: { op: "eq", column: "district", value: "Mars" } }] }), path: "plan.where.of[1].of.value" },
  { name: "group numeric without bins", plan: base({ groupBy: [{ column: "age" }] }), path: "plan.groupBy[0]" },
  { name: "group category with bins", plan: base({ groupBy: [{ column: "district", bins: 3 }] }), path: "plan.groupBy[0].bins" },
  { name: "group by date", plan: base({ groupBy: [{ column: "visit_date" }] }), path: "plan.groupBy[0]" },
  { name: "group twice by one column", plan: base({ groupBy: [{ column: "district" }, { column: "district" }] }), path: "plan.groupBy[1]" },
  { name: "grouped quantile", plan: base({ groupBy: [{ column: "district" }], measure: { kind: "quantile", column: "age", p: [0.5] } }), path: "plan.groupBy" },
];

// SQL-injection strings in every string field of a plan.
for (const [i, s] of INJECTIONS.entries()) {
  CASES.push(
    { name: `injection ${i} in dataset`, plan: base({ dataset: s }), path: "no dataset", kind: UnknownDatasetError },
    { name: `injection ${i} in where.column`, plan: where({ op: "eq", column: s, value: 1 }), path: "plan.where.column" },
    { name: `injection ${i} in where.value`, plan: where({ op: "eq", column: "district", value: s }), path: "plan.where.value" },
    { name: `injection ${i} in in.values`, plan: where({ op: "in", column: "district", values: ["Riverside", s] }), path: "plan.where.values[1]" },
    { name: `injection ${i} in between.low`, plan: where({ op: "between", column: "visit_date", low: s, high: "2025-02-01" }), path: "plan.where.low" },
    { name: `injection ${i} in groupBy.column`, plan: base({ groupBy: [{ column: s }] }), path: "plan.groupBy[0].column" },
    { name: `injection ${i} in measure.column`, plan: measure({ kind: "mean", column: s }), path: "plan.measure.column" },
    { name: `injection ${i} in crosstab.cols`, plan: measure({ kind: "crosstab", rows: "district", cols: s }), path: "plan.measure.cols" },
    { name: `injection ${i} in epsilon`, plan: privacy({ epsilon: s }), path: "plan.privacy" },
    { name: `injection ${i} in rho`, plan: privacy({ rho: s }), path: "plan.privacy" },
  );
}

/** Every unit id and every raw cell of the fixture data: none may appear in an error message. */
const DATA_VALUES = (() => {
  const lines = readFileSync(join(FIXTURES, "visits.csv"), "utf8").trim().split("\n").slice(1);
  const ids = new Set(lines.map((l) => l.split(",")[0]).filter((v) => v !== ""));
  return [...ids];
})();

let ctx: Opened;
beforeAll(async () => {
  ctx = await open();
});
afterAll(async () => {
  await ctx.engine.close();
});

describe("bad plans", () => {
  it("has at least 50 table-driven cases", () => {
    expect(CASES.length).toBeGreaterThanOrEqual(50);
  });

  it.each(CASES)("$name", ({ plan, path, kind }) => {
    ctx.statements.length = 0;
    let err: unknown;
    try {
      ctx.answerer.prepare("ada", plan);
    } catch (e) {
      err = e;
    }
    expect(err).toBeInstanceOf(kind ?? BadInputError);
    const msg = (err as Error).message;
    expect(msg).toContain(path);
    for (const id of DATA_VALUES) expect(msg).not.toMatch(new RegExp(`\\b${id}\\b`));
    // Injection strings in value positions are never echoed; column names are echoed at most
    // JSON-quoted and truncated, so nothing there is read as SQL either.
    for (const s of INJECTIONS) {
      if (msg.includes(s)) expect(msg).toContain(JSON.stringify(s));
    }
    // Validation reads no data.
    expect(ctx.statements).toHaveLength(0);
  });
});

describe("authorisation and good plans", () => {
  it("refuses an analyst not listed on the dataset", () => {
    expect(() => ctx.answerer.prepare("ben", base())).toThrow(UnauthorizedError);
    expect(() => ctx.answerer.prepare("'; DROP TABLE d0; --", base())).toThrow(UnauthorizedError);
  });

  it("checks the analyst on every call, also for a plan settled before (memoised)", () => {
    const first = ctx.answerer.prepare("ada", base());
    expect(() => ctx.answerer.prepare("ben", base())).toThrow(UnauthorizedError);
    const again = ctx.answerer.prepare("ada", base());
    // The memo returns the same settled plan; its digest is sha256 of the canonical JSON.
    expect(again.digest).toBe(first.digest);
    expect(again.digest).toBe(digestOf(again.plan));
    expect(again.cost.toString()).toBe(first.cost.toString());
    // Callers may change what they get without changing what the next caller gets.
    again.notes.push("changed");
    expect(ctx.answerer.prepare("ada", base()).notes).toEqual(first.notes);
  });

  it("fills defaults and gives the same digest for the same question", () => {
    const a = ctx.answerer.prepare("ada", base());
    const b = ctx.answerer.prepare("ada", { ...base(), confidence: 0.95 });
    expect(a.plan.confidence).toBe(0.95);
    expect(a.digest).toBe(b.digest);
    expect(a.digest).toMatch(/^[0-9a-f]{64}$/);
    const c = ctx.answerer.prepare("ada", base({ privacy: { within: 3 } }));
    expect(c.plan.privacy).toEqual({ within: 3, confidence: 0.95 });
    expect(ctx.answerer.prepare("ada", base({ confidence: 0.9 })).digest).not.toBe(a.digest);
  });

  it("accepts every measure kind on the fixture", () => {
    const good = [
      measure({ kind: "sum", column: "age" }),
      measure({ kind: "mean", column: "wait_minutes" }),
      measure({ kind: "variance", column: "age" }),
      measure({ kind: "std", column: "age" }),
      measure({ kind: "quantile", column: "age", p: [0.25, 0.5, 0.75] }),
      measure({ kind: "histogram", column: "wait_minutes", bins: 8 }),
      measure({ kind: "crosstab", rows: "district", cols: "insured" }),
      measure({ kind: "describe" }),
      base({ groupBy: [{ column: "district" }, { column: "age", bins: 5 }], measure: { kind: "mean", column: "age" } }),
      where({ op: "or", of: [{ op: "between", column: "age", low: 10.5, high: 60 }, { op: "isNull", column: "insured" }] }),
      where({ op: "not", of: { op: "in", column: "visit_date", values: ["2025-01-01", "2025-02-01"] } }),
    ];
    for (const p of good) expect(ctx.answerer.prepare("ada", p).cost.toString()).toBe("1");
  });
});

describe("parseRequest", () => {
  const req = (body: unknown, over: Record<string, unknown> = {}) => ({ v: 1, id: "r1", analyst: "ada", token: "t", body, ...over });

  it("accepts every op and validates an ask's plan", () => {
    for (const body of [
      { op: "catalogue" },
      { op: "open", dataset: "visits" },
      { op: "spend", dataset: "visits" },
      { op: "ledger" },
      { op: "ledger", dataset: "visits" },
      { op: "ask", plan: base() },
      { op: "preview", plan: base() },
    ]) {
      expect(parseRequest(req(body)).body.op).toBe(body.op);
    }
  });

  it("gives ProtocolErrors for the envelope and BadInputErrors inside a plan", () => {
    expect(() => parseRequest(null)).toThrow(ProtocolError);
    expect(() => parseRequest(req({ op: "catalogue" }, { v: 2 }))).toThrow(/request\.v/);
    expect(() => parseRequest(req({ op: "drop" }))).toThrow(/request\.body/);
    expect(() => parseRequest(req({ op: "catalogue", extra: 1 }))).toThrow(ProtocolError);
    expect(() => parseRequest(req({ op: "catalogue" }, { id: "" }))).toThrow(/request\.id/);
    expect(() => parseRequest(req({ op: "catalogue" }, { admin: true }))).toThrow(/unknown key "admin"/);
    let err: unknown;
    try {
      parseRequest(req({ op: "ask", plan: base({ confidence: 2 }) }));
    } catch (e) {
      err = e;
    }
    expect(err).toBeInstanceOf(BadInputError);
    expect((err as Error).message).toContain("request.body.plan.confidence");
  });

  it("parsePlan alone checks structure only (unknown columns pass here)", () => {
    expect(parsePlan(where({ op: "eq", column: "anything", value: 1 })).where).toEqual({ op: "eq", column: "anything", value: 1 });
  });
});
