/**
 * The shared display formatter (runtime/protocol/format.ts). formatDecimal's expected strings are
 * worked by hand from the rule "at most `sig` significant digits, halves away from zero, integers
 * keep all digits" (common practice for display rounding); formatWithError's from the figure rule
 * of docs/methods.md §23, by hand and against Python's decimal module. The exact inputs avoid any
 * binary-float detour.
 */
import { describe, expect, test } from "vitest";
import { spawnSync } from "node:child_process";
import { figureParts, formatAmount, formatDecimal, formatHalfWidth, formatWithError, groupThousands } from "../../runtime/protocol/format.js";

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

describe("formatWithError: the display rule (docs/methods.md §23)", () => {
  // Hand-worked cases. The rule follows the common practice of quoting an uncertainty to at most
  // two significant digits and the estimate to the same decimal place (the GUM, JCGM 100:2008
  // §7.2.6, from memory); hush rounds the half-width up so it is never narrower than the exact one.
  test("a count: half-width up to 2 significant digits, value to the same place, thousands separators", () => {
    expect(formatWithError("177759", "177280", "178238")).toBe("177,760 ± 480");
    expect(formatWithError("13563", "13323", "13803")).toBe("13,560 ± 240");
    // 474 rounds up to 480, not down to 470.
    expect(formatWithError("1000000", "999526", "1000474")).toBe("1,000,000 ± 480");
  });

  test("counts stay whole numbers: an integer figure never gains decimals", () => {
    expect(formatWithError("100", "97", "103")).toBe("100 ± 3");
    expect(formatWithError("7", "5", "9")).toBe("7 ± 2");
    expect(formatWithError("0", "0", "4")).toBe("0 [0, 4]");
  });

  test("decimals: two significant digits of the half-width, trailing zeros kept", () => {
    expect(formatWithError("23.5", "22.7", "24.3")).toBe("23.50 ± 0.80");
    expect(formatWithError("1234567.891", "1234567.391", "1234568.391")).toBe("1,234,567.89 ± 0.50");
    expect(formatWithError("-0.004", "-0.006", "-0.002")).toBe("-0.0040 ± 0.0020");
    expect(formatWithError("0.001", "-0.499", "0.501")).toBe("0.00 ± 0.50");
    expect(formatWithError("3.14159", "2.14159", "4.14159")).toBe("3.1 ± 1.0");
  });

  test("asymmetric intervals: the place from half the width, the low end down, the high end up", () => {
    expect(formatWithError("24.2876", "22.6658", "25.8855")).toBe("24.3 [22.6, 25.9]");
    expect(formatWithError("35.3379", "0", "79.6496")).toBe("35 [0, 80]");
    expect(formatWithError("10", "8", "13")).toBe("10 [8, 13]");
    expect(formatWithError("-31.6826", "-32.3714", "-30.9892")).toBe("-31.68 [-32.38, -30.98]");
  });

  test("huge and tiny half-widths", () => {
    expect(formatWithError("5", "-12340", "12350")).toBe("0 ± 13,000");
    expect(formatWithError("-600", "-12945", "11745")).toBe("-1,000 ± 13,000");
    expect(formatWithError("-0.04", "-12.04", "11.96")).toBe("0 ± 12");
    expect(formatWithError("2.5e3", "2.4e3", "2.6e3")).toBe("2,500 ± 100");
    expect(formatWithError("1.5e20", "1.49e20", "1.51e20")).toBe("150,000,000,000,000,000,000 ± 1,000,000,000,000,000,000");
    // Below 10^-9 the place is too small for plain decimals: scientific form, same digits.
    expect(formatWithError("0.0000000000012345", "0.00000000000120", "0.0000000000012690")).toBe("1.235e-12 ± 3.5e-14");
    expect(formatWithError("1e-20", "0", "2e-20")).toBe("1.0e-20 ± 1.0e-20");
  });

  test("a zero half-width leaves nothing to round to: 6 significant digits, integers in full", () => {
    expect(formatWithError("177759", "177759", "177759")).toBe("177,759 ± 0");
    expect(formatWithError("3.14159265", "3.14159265", "3.14159265")).toBe("3.14159 ± 0");
  });

  test("a value without interval: 6 significant digits with separators; a missing value", () => {
    expect(formatWithError("1000000", null, null)).toBe("1,000,000");
    expect(formatWithError("1234.5678", null, null)).toBe("1,234.57");
    expect(formatWithError("5", null, "6")).toBe("5");
    expect(formatWithError(null, "4", "6")).toBe("n/a");
  });

  test("exact inputs: fractions and 0.1 + 0.2 style decimals are never binary floats", () => {
    expect(formatWithError("1/3", "0", "2/3")).toBe("0.33 ± 0.34");
    // The half-width is 0.20000000000000004, a hair above 0.20: up means up.
    expect(formatWithError("0.30000000000000004", "0.1", "0.50000000000000008")).toBe("0.30 ± 0.21");
    expect(formatWithError("0.3", "0.1", "0.5")).toBe("0.30 ± 0.20");
  });

  test("junk is refused", () => {
    expect(() => formatWithError("1", "x", "2")).toThrow(TypeError);
    expect(() => formatWithError("1e999", "0", "2")).toThrow(TypeError);
  });

  test("figureParts splits the value from its error bar", () => {
    expect(figureParts("177759", "177280", "178238")).toEqual({ value: "177,760", bar: "± 480" });
    expect(figureParts("24.2876", "22.6658", "25.8855")).toEqual({ value: "24.3", bar: "[22.6, 25.9]" });
    expect(figureParts("115", null, null)).toEqual({ value: "115", bar: null });
  });
});

/**
 * The same rule written independently in Python's decimal module (Debian python3; quantize with
 * ROUND_HALF_UP, which rounds halves away from zero, ROUND_CEILING and ROUND_FLOOR; grouping by
 * the "," format option of PEP 378), compared on generated figures: tiny, huge, negative,
 * many-digit, symmetric and not.
 */
describe("formatWithError against Python's decimal module", () => {
  const PY = String.raw`
import sys, json
from decimal import Decimal as D, ROUND_HALF_UP, ROUND_CEILING, ROUND_FLOOR, getcontext
getcontext().prec = 400
def at(x, p, mode):
    return x.quantize(D(1).scaleb(p), rounding=mode)
def write(x, p):
    m = int(x.scaleb(-p))
    if m == 0:
        return "0." + "0" * (-p) if -9 <= p < 0 else "0"
    if p < -9:
        d = str(abs(m))
        return ("-" if m < 0 else "") + d[0] + ("." + d[1:] if len(d) > 1 else "") + "e" + str(len(d) - 1 + p)
    return format(x, ",." + str(max(0, -p)) + "f")
out = []
for v, lo, hi in json.load(sys.stdin):
    v, lo, hi = D(v), D(lo), D(hi)
    sym = (v - lo) == (hi - v) and hi >= v
    w = (hi - v) if sym else abs(hi - lo) / 2
    p = w.adjusted() - 1
    if p < 0 and all(x == x.to_integral_value() for x in (v, lo, hi)):
        p = 0
    V = write(at(v, p, ROUND_HALF_UP), p)
    if sym:
        out.append(V + " ± " + write(at(w, p, ROUND_CEILING), p))
    else:
        out.append(V + " [" + write(at(lo, p, ROUND_FLOOR), p) + ", " + write(at(hi, p, ROUND_CEILING), p) + "]")
print(json.dumps(out))
`;
  test("1,500 generated figures agree", () => {
    const py = spawnSync("python3", ["-c", "import decimal"], { encoding: "utf8" });
    if (py.status !== 0) {
      console.log("SKIP: python3 is not available");
      return;
    }
    // A seeded generator (test data only): figures as integer mantissas with a shared exponent.
    let seed = 0x9e3779b9;
    const next = (n: number): number => {
      seed = (Math.imul(seed ^ (seed >>> 15), 0x2c1b3c6d) + 0x6d2b79f5) >>> 0;
      return seed % n;
    };
    const digits = (n: number): bigint => BigInt(Array.from({ length: n }, (_, i) => String(i === 0 ? 1 + next(9) : next(10))).join(""));
    const cases: [string, string, string][] = [];
    for (let i = 0; i < 1500; i++) {
      const exp = next(40) - 25; // 10^-25 .. 10^14
      const a = digits(1 + next(14)) * (next(4) === 0 ? -1n : 1n);
      const b = digits(1 + next(6)) * 10n ** BigInt(next(8));
      const c = next(2) === 0 ? b : digits(1 + next(6));
      const s = (x: bigint): string => `${x}e${exp}`;
      cases.push([s(a), s(a - b), s(a + c)]);
    }
    const r = spawnSync("python3", ["-c", PY], { input: JSON.stringify(cases), encoding: "utf8", maxBuffer: 1 << 26 });
    expect(r.status, r.stderr).toBe(0);
    const want = JSON.parse(r.stdout) as string[];
    const got = cases.map(([v, lo, hi]) => formatWithError(v, lo, hi));
    const differ = got.map((g, i) => [cases[i], g, want[i]]).filter(([, g, w]) => g !== w);
    expect(differ.slice(0, 5)).toEqual([]);
    expect(got.some((g) => g.includes(","))).toBe(true);
    expect(got.some((g) => g.includes("e-"))).toBe(true);
    expect(got.some((g) => g.includes("["))).toBe(true);
  });
});

describe("formatAmount: privacy amounts as decimals, rounded in one direction", () => {
  test("a cost up, what is left down, never a fraction", () => {
    expect(formatAmount("355351/500000", "up", 2)).toBe("0.72");
    expect(formatAmount("355351/500000", "down", 2)).toBe("0.71");
    expect(formatAmount("355351/500000", "up")).toBe("0.710702");
    expect(formatAmount("1/3", "down")).toBe("0.333333");
    expect(formatAmount("2/3", "up")).toBe("0.666667");
    expect(formatAmount("9999999/10000000", "up")).toBe("1");
    expect(formatAmount("1/7000000000", "up")).toBe("1.42858e-10");
    expect(formatAmount("10", "down")).toBe("10");
    expect(formatAmount("0", "up")).toBe("0");
  });

  test("a refusal never reads as if the ask fitted", () => {
    // cost just above what is left: the shown cost is above the shown remainder.
    const cost = "7107021/10000000";
    const left = "7107020/10000000";
    expect(Number(formatAmount(cost, "up"))).toBeGreaterThan(Number(formatAmount(left, "down")));
  });
});

describe("formatHalfWidth: a preview's expected error by the same rule", () => {
  test("up to two significant digits, whole numbers stay whole, separators", () => {
    expect(formatHalfWidth("239659")).toBe("240,000");
    expect(formatHalfWidth("240")).toBe("240");
    expect(formatHalfWidth("3")).toBe("3");
    expect(formatHalfWidth("0.0123")).toBe("0.013");
    expect(formatHalfWidth("1/3")).toBe("0.34");
    expect(formatHalfWidth("0")).toBe("0");
  });
});

describe("groupThousands", () => {
  test("the integer part only, signs and exponents left alone", () => {
    expect(groupThousands("1234567.25")).toBe("1,234,567.25");
    expect(groupThousands("-1000")).toBe("-1,000");
    expect(groupThousands("999")).toBe("999");
    expect(groupThousands("1.5e-9")).toBe("1.5e-9");
  });
});
