/**
 * The shared display formatter (runtime/protocol/format.ts). Expected strings are worked by hand
 * from the rule "at most `sig` significant digits, halves away from zero, integers keep all digits"
 * (common practice for display rounding); the exact inputs avoid any binary-float detour.
 */
import { describe, expect, test } from "vitest";
import { formatDecimal, formatWithError } from "../../runtime/protocol/format.js";

describe("formatDecimal", () => {
  test.each([
    ["0", "0"],
    ["12", "12"],
    ["-12", "-12"],
    ["007", "7"],
    ["12345678901234567890", "12345678901234567890"], // integers keep every digit
    ["-12.50", "-12.5"],
    ["0.1", "0.1"],
    ["123.4567891", "123.457"],
    ["-0.000123456789", "-0.000123457"],
    ["0.30000000000000004", "0.3"],
    ["2.5", "2.5"],
  ])("%s → %s", (input, shown) => {
    expect(formatDecimal(input)).toBe(shown);
  });

  test("rounds halves away from zero, on the exact decimal", () => {
    expect(formatDecimal("2.000005")).toBe("2.00001");
    expect(formatDecimal("-2.000005")).toBe("-2.00001");
    expect(formatDecimal("2.0000049999")).toBe("2");
    // 0.1234565 is exact here; a binary double of it lies just below and would round down.
    expect(formatDecimal("0.1234565")).toBe("0.123457");
  });

  test("a carry can add a digit", () => {
    expect(formatDecimal("9.9999996")).toBe("10");
    expect(formatDecimal("99999.95")).toBe("100000");
    expect(formatDecimal("999999.5")).toBe("1000000");
    expect(formatDecimal("0.0000099999996")).toBe("0.00001");
  });

  test("many integer digits and a fraction round to a whole number", () => {
    expect(formatDecimal("12345678.9")).toBe("12345679");
    expect(formatDecimal("-1234567.4")).toBe("-1234567");
  });

  test("exponent forms", () => {
    expect(formatDecimal("1e-6")).toBe("0.000001");
    expect(formatDecimal("1E-6")).toBe("0.000001");
    expect(formatDecimal("2.5e+3")).toBe("2500");
    expect(formatDecimal("2.5e3")).toBe("2500");
    expect(formatDecimal("-3.25e-2")).toBe("-0.0325");
    expect(formatDecimal("1e30")).toBe("1" + "0".repeat(30));
    expect(formatDecimal(".5")).toBe("0.5");
    expect(formatDecimal("5.")).toBe("5");
    // below 1e-6 the plain form would be mostly zeros: scientific
    expect(formatDecimal("1e-7")).toBe("1e-7");
    expect(formatDecimal("1.5e-9")).toBe("1.5e-9");
    expect(formatDecimal("-1.23456789e-12")).toBe("-1.23457e-12");
  });

  test("fractions (exact rationals as the curator writes costs)", () => {
    expect(formatDecimal("1/3")).toBe("0.333333");
    expect(formatDecimal("-2/3")).toBe("-0.666667");
    expect(formatDecimal("7/10")).toBe("0.7");
    expect(formatDecimal("6/3")).toBe("2");
  });

  test("negative zero shows as 0", () => {
    expect(formatDecimal("-0")).toBe("0");
    expect(formatDecimal("-0.000")).toBe("0");
    expect(formatDecimal("-0e5")).toBe("0");
  });

  test("sig digits", () => {
    expect(formatDecimal("3.14159265", 3)).toBe("3.14");
    expect(formatDecimal("0.0031415", 2)).toBe("0.0031");
    expect(() => formatDecimal("1", 0)).toThrow(RangeError);
  });

  test("null is n/a; junk is refused", () => {
    expect(formatDecimal(null)).toBe("n/a");
    for (const bad of ["", "abc", "1.2.3", "NaN", "Infinity", "1e", "e5", "--1", "1/0", "0x10", "1e999"]) {
      expect(() => formatDecimal(bad), bad).toThrow(TypeError);
    }
  });
});

describe("formatWithError", () => {
  test("symmetric intervals show ± with the exact half-width", () => {
    expect(formatWithError("23.5", "22.7", "24.3")).toBe("23.5 ± 0.8");
    expect(formatWithError("100", "95", "105")).toBe("100 ± 5");
    expect(formatWithError("-3.5", "-4.75", "-2.25")).toBe("-3.5 ± 1.25");
    expect(formatWithError("1e-1", "0", "2e-1")).toBe("0.1 ± 0.1");
    // 0.1 + 0.2 style values stay exact: the half-width is computed on decimals, not doubles.
    expect(formatWithError("0.3", "0.1", "0.5")).toBe("0.3 ± 0.2");
  });

  test("asymmetric intervals show both ends", () => {
    expect(formatWithError("10", "8", "13")).toBe("10 [8, 13]");
    expect(formatWithError("31.6826", "30.9892", "32.3714")).toBe("31.6826 [30.9892, 32.3714]");
    expect(formatWithError("0", "0", "4")).toBe("0 [0, 4]");
  });

  test("a missing end or value", () => {
    expect(formatWithError("5", null, "6")).toBe("5");
    expect(formatWithError("5", "4", null)).toBe("5");
    expect(formatWithError(null, "4", "6")).toBe("n/a");
  });

  test("rounding applies to the value and the half-width alike", () => {
    expect(formatWithError("1234.56789", "1234.06789", "1235.06789")).toBe("1234.57 ± 0.5");
    expect(formatWithError("2.5e3", "2.4e3", "2.6e3")).toBe("2500 ± 100");
  });

  test("junk is refused", () => {
    expect(() => formatWithError("1", "x", "2")).toThrow(TypeError);
  });
});
