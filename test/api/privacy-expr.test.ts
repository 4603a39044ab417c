/**
 * Privacy parameters and filters, checked before anything is sent.
 */
import { describe, expect, test } from "vitest";
import { BadInputError } from "../../runtime/errors.js";
import { checkAgainstSchema, col, conditionText, Filter, toCondition } from "../../runtime/api/expr.js";
import { exactPositive, plainDecimal, privacyAsk } from "../../runtime/api/privacy.js";
import { parsePlan } from "../../runtime/protocol/schema.js";
import { COLUMNS } from "./fake-curator.js";

describe("exactPositive", () => {
  test("numbers become the decimal they print as, without exponent", () => {
    expect(exactPositive(0.1, "epsilon")).toBe("0.1");
    expect(exactPositive(1, "epsilon")).toBe("1");
    expect(exactPositive(0.3, "epsilon")).toBe("0.3");
    expect(exactPositive(1e-7, "epsilon")).toBe("0.0000001");
    expect(exactPositive(2.5e-8, "epsilon")).toBe("0.000000025");
    expect(exactPositive(1e21, "epsilon")).toBe("1000000000000000000000");
    expect(exactPositive(1.5e21, "epsilon")).toBe("1500000000000000000000");
    expect(exactPositive(Number.MIN_VALUE, "rho")).toBe(`0.${"0".repeat(323)}5`);
  });

  test("strings are taken exactly (decimal, exponent or fraction)", () => {
    expect(exactPositive("0.1", "epsilon")).toBe("0.1");
    expect(exactPositive(" 1e-3 ", "epsilon")).toBe("1e-3");
    expect(exactPositive("1/3", "epsilon")).toBe("1/3");
    expect(exactPositive("+2", "epsilon")).toBe("2");
  });

  test.each([
    [Number.NaN, /NaN/],
    [Number.POSITIVE_INFINITY, /finite/],
    [Number.NEGATIVE_INFINITY, /finite/],
    [0, /greater than 0/],
    [-0.1, /greater than 0/],
    ["0", /greater than 0/],
    ["0.000", /greater than 0/],
    ["0e5", /greater than 0/],
    ["-1", /positive decimal/],
    ["abc", /positive decimal/],
    ["NaN", /positive decimal/],
    ["Infinity", /positive decimal/],
    ["", /positive decimal/],
    ["1/0", /zero denominator/],
    ["0/5", /greater than 0/],
    [null, /number or a decimal string/],
    [undefined, /number or a decimal string/],
    [10n, /number or a decimal string/],
  ])("refuses %s", (x, msg) => {
    expect(() => exactPositive(x, "epsilon")).toThrow(BadInputError);
    expect(() => exactPositive(x, "epsilon")).toThrow(msg);
  });

  test("plainDecimal", () => {
    expect(plainDecimal("1.25e-3")).toBe("0.00125");
    expect(plainDecimal("1.25e+3")).toBe("1250");
    expect(plainDecimal("12.5")).toBe("12.5");
  });

  test("every produced string passes the protocol's own check of a privacy parameter", () => {
    for (const x of [0.1, 1e-7, 1.5e21, 3, 0.123456789]) {
      const plan = { v: 1, dataset: "d", measure: { kind: "count" }, privacy: { epsilon: exactPositive(x, "epsilon") } };
      expect(() => parsePlan(plan)).not.toThrow();
    }
  });
});

describe("privacyAsk", () => {
  test("epsilon, rho, within; confidence defaults to 0.95", () => {
    expect(privacyAsk({ epsilon: 0.1 }, "count")).toEqual({ privacy: { epsilon: "0.1" }, confidence: 0.95 });
    expect(privacyAsk({ rho: "1/200", confidence: 0.9 }, "count")).toEqual({ privacy: { rho: "1/200" }, confidence: 0.9 });
    expect(privacyAsk({ within: 5, confidence: 0.99 }, "count")).toEqual({ privacy: { within: 5, confidence: 0.99 }, confidence: 0.99 });
  });

  test.each([
    [undefined, /say how much to spend/],
    [{}, /say how much to spend/],
    [{ epsilon: 0.1, rho: 0.1 }, /only one of/],
    [{ epsilon: 0.1, confidence: 1 }, /strictly between 0 and 1/],
    [{ epsilon: 0.1, confidence: 0 }, /strictly between 0 and 1/],
    [{ epsilon: 0.1, confidence: Number.NaN }, /strictly between 0 and 1/],
    [{ epsilon: 0.1, confidence: "0.95" }, /strictly between 0 and 1/],
    [{ within: 0 }, /within must be a positive finite number/],
    [{ within: Number.POSITIVE_INFINITY }, /within must be a positive finite number/],
    [{ within: "5" }, /within must be a positive finite number/],
  ])("refuses %j", (opts, msg) => {
    expect(() => privacyAsk(opts, "count")).toThrow(msg);
  });
});

describe("filters", () => {
  test("the builder produces protocol conditions", () => {
    expect(col("age").ge(65).condition).toEqual({ op: "ge", column: "age", value: 65 });
    expect(col("district").isIn(["Northgate", "Riverside"]).condition).toEqual({ op: "in", column: "district", values: ["Northgate", "Riverside"] });
    expect(col("age").between(18, 64).condition).toEqual({ op: "between", column: "age", low: 18, high: 64 });
    expect(col("insured").isNull().condition).toEqual({ op: "isNull", column: "insured" });
    expect(col("insured").notNull().condition).toEqual({ op: "not", of: { op: "isNull", column: "insured" } });
    const f = col("age").ge(65).and(col("sex").eq("female")).or({ district: "Eastfield" });
    expect(f.condition).toEqual({
      op: "or",
      of: [
        { op: "and", of: [{ op: "ge", column: "age", value: 65 }, { op: "eq", column: "sex", value: "female" }] },
        { op: "eq", column: "district", value: "Eastfield" },
      ],
    });
    expect(col("age").lt(3).not().condition).toEqual({ op: "not", of: { op: "lt", column: "age", value: 3 } });
  });

  test("filters are immutable: combining returns new filters and leaves the old ones alone", () => {
    const a = col("age").ge(65);
    const before = JSON.stringify(a);
    const b = a.and(col("sex").eq("male"));
    const c = a.not();
    expect(JSON.stringify(a)).toBe(before);
    expect(b).not.toBe(a);
    expect(c).not.toBe(a);
    expect(Object.isFrozen(a)).toBe(true);
    expect(Object.isFrozen(a.condition)).toBe(true);
    expect(() => {
      (a.condition as { column: string }).column = "sex";
    }).toThrow(TypeError);
  });

  test("object shorthand and hand-written conditions", () => {
    expect(toCondition({ district: "Northgate" })).toEqual({ op: "eq", column: "district", value: "Northgate" });
    expect(toCondition({ district: ["Northgate", "Eastfield"], age: { ge: 18, lt: 65 }, insured: null })).toEqual({
      op: "and",
      of: [
        { op: "in", column: "district", values: ["Northgate", "Eastfield"] },
        { op: "ge", column: "age", value: 18 },
        { op: "lt", column: "age", value: 65 },
        { op: "isNull", column: "insured" },
      ],
    });
    expect(toCondition({ age: { between: [1, 2] } })).toEqual({ op: "between", column: "age", low: 1, high: 2 });
    expect(toCondition({ op: "gt", column: "age", value: 3 })).toEqual({ op: "gt", column: "age", value: 3 });
    expect(toCondition(col("age").gt(3))).toEqual({ op: "gt", column: "age", value: 3 });
  });

  test.each([
    [null, /takes a filter/],
    [[1, 2], /takes a filter/],
    [{}, /empty filter object/],
    [{ age: {} }, /empty test/],
    [{ age: { gte: 3 } }, /unknown test "gte"/],
    [{ age: Number.NaN }, /finite number/],
    [{ age: { between: [1] } }, /\[low, high\]/],
    [{ op: "and", of: [] }, /non-empty array/],
    [{ op: "eq", column: "", value: 1 }, /column name/],
    [{ op: "in", column: "age", values: [] }, /non-empty array/],
    [{ op: "eq", column: "age", value: { x: 1 } }, /string, number or boolean/],
  ])("refuses %j", (input, msg) => {
    expect(() => toCondition(input as never)).toThrow(BadInputError);
    expect(() => toCondition(input as never)).toThrow(msg);
  });

  test("builder refuses non-finite and empty inputs", () => {
    expect(() => col("")).toThrow(BadInputError);
    expect(() => col("age").ge(Number.POSITIVE_INFINITY)).toThrow(/finite/);
    expect(() => col("age").isIn([])).toThrow(/non-empty/);
  });

  test("schema checks: columns exist, values fit their types, order tests only on ordered columns", () => {
    const ok = (f: Filter) => checkAgainstSchema(f.condition, COLUMNS, "patient_id");
    expect(() => ok(col("age").ge(65).and(col("visit_date").lt("2025-06-01"), col("insured").eq(true)))).not.toThrow();
    expect(() => ok(col("patient_id").eq("x"))).toThrow(/privacy unit column/);
    expect(() => ok(col("agee").eq(3))).toThrow(/no column "agee"/);
    expect(() => ok(col("age").eq("65"))).toThrow(/numeric/);
    expect(() => ok(col("district").eq("Atlantis"))).toThrow(/not a declared value of column district \(declared: Northgate, Riverside, Eastfield\)/);
    expect(() => ok(col("district").lt("Northgate"))).toThrow(/lt does not apply to category/);
    expect(() => ok(col("insured").eq("yes"))).toThrow(/true or false/);
    expect(() => ok(col("visit_date").ge("June"))).toThrow(/YYYY-MM-DD/);
    expect(() => ok(col("visit_date").ge("2025-02-30x"))).toThrow(/YYYY-MM-DD/);
    expect(() => ok(col("age").between(70, 20))).toThrow(/low above high/);
    expect(() => ok(col("district").between("a", "b"))).toThrow(/between does not apply/);
  });

  test("readable text", () => {
    expect(conditionText(col("age").ge(65).and({ district: "Northgate" }).condition)).toBe('age ≥ 65 and district = "Northgate"');
    expect(String(col("insured").notNull())).toBe("insured is present");
  });
});
