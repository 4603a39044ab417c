import { describe, expect, it } from "vitest";
import { BadInputError } from "../../runtime/errors.js";
import { Rational, isqrt, bitLength } from "../../runtime/core/rational.js";

const R = Rational.parse;

describe("Rational", () => {
  it("parses decimals, exponents and fractions into lowest terms", () => {
    expect(R("0.1").toString()).toBe("1/10");
    expect(R("1e-6").toString()).toBe("1/1000000");
    expect(R("3").toString()).toBe("3");
    expect(R("1/3").toString()).toBe("1/3");
    expect(R("-2.5").toString()).toBe("-5/2");
    expect(R("6/4").toString()).toBe("3/2");
    expect(R(".5").toString()).toBe("1/2");
    expect(R("2.50E+2").toString()).toBe("250");
    expect(R(" 7 ").toString()).toBe("7");
    expect(R("-0").toString()).toBe("0");
  });

  it("rejects junk, NaN and infinities with BadInputError", () => {
    for (const bad of ["", "abc", "NaN", "Infinity", "-Infinity", "1/0", "1e", "1.2.3", "0x10", "1e99999", "--1", "."]) {
      expect(() => R(bad), bad).toThrow(BadInputError);
    }
    expect(() => Rational.of(1.5)).toThrow(BadInputError);
    expect(() => Rational.of(1, 0)).toThrow(BadInputError);
    expect(() => Rational.fromNumberUp(NaN)).toThrow(BadInputError);
  });

  it("does exact arithmetic and comparisons", () => {
    const a = R("1/3");
    const b = R("1/6");
    expect(a.add(b).toString()).toBe("1/2");
    expect(a.sub(b).toString()).toBe("1/6");
    expect(a.mul(b).toString()).toBe("1/18");
    expect(a.div(b).toString()).toBe("2");
    expect(a.cmp(b)).toBe(1);
    expect(b.lt(a) && b.le(a) && a.gt(b) && a.ge(b) && !a.eq(b)).toBe(true);
    expect(a.min(b)).toBe(b);
    expect(a.max(b)).toBe(a);
    expect(R("-7/2").floor()).toBe(-4n);
    expect(R("-7/2").ceil()).toBe(-3n);
    expect(R("7/2").floor()).toBe(3n);
    expect(R("7/2").ceil()).toBe(4n);
    expect(Rational.ZERO.isZero() && Rational.ZERO.sign() === 0 && R("-1").sign() === -1).toBe(true);
    expect(() => a.div(Rational.ZERO)).toThrow(BadInputError);
  });

  // docs/methods.md §1: [C1.4a] 0.1 + 0.2 in binary64 = 0.30000000000000004; [C1.4b] ten 0.1 = 0.9999999999999999;
  // [C1.4c] exact rational sum of ten 1/10 = 1
  it("[C1.4a-c] exact sums do not drift like binary64", () => {
    expect(0.1 + 0.2).toBe(0.30000000000000004);
    let f = 0;
    for (let i = 0; i < 10; i++) f += 0.1;
    expect(f).toBe(0.9999999999999999);
    let r = Rational.ZERO;
    for (let i = 0; i < 10; i++) r = r.add(R("0.1"));
    expect(r.toString()).toBe("1");
    expect(R("0.1").add(R("0.2")).le(R("0.3"))).toBe(true);
  });

  it("renders decimals exactly when terminating, else rounded half away from zero", () => {
    expect(R("29957/100").toDecimal()).toBe("299.57");
    expect(R("1/3").toDecimal(6)).toBe("0.333333");
    expect(R("2/3").toDecimal(6)).toBe("0.666667");
    expect(R("-2/3").toDecimal(6)).toBe("-0.666667");
    expect(R("1e-7").toDecimal()).toBe("0.0000001");
    expect(R("5").toDecimal()).toBe("5");
    expect(R("-1/2").toDecimal(0)).toBe("-1");
    expect(R("-1/1000").toDecimal(2)).toBe("0");
  });

  it("converts to and from binary64", () => {
    expect(R("1/3").toNumber()).toBe(1 / 3);
    expect(R("0.1").toNumber()).toBe(0.1);
    expect(R("-12345678901234567890").toNumber()).toBe(-12345678901234567890);
    expect(Rational.fromNumberExact(0.1).toString()).toBe("3602879701896397/36028797018963968");
    // directed rounding to 6 significant digits
    expect(Rational.fromNumberUp(0.284348512423).toString()).toBe("284349/1000000");
    expect(Rational.fromNumberDown(0.284348512423).toString()).toBe("71087/250000");
    expect(Rational.fromNumberUp(2).toString()).toBe("2");
    expect(Rational.fromNumberUp(-1.0000001).toString()).toBe("-1");
    expect(Rational.fromNumberDown(-1.0000001).toString()).toBe("-100001/100000");
    for (const x of [Math.PI, 1e-9 / 3, 12345.678901, -0.5 / 7]) {
      expect(Rational.fromNumberUp(x).ge(Rational.fromNumberExact(x))).toBe(true);
      expect(Rational.fromNumberDown(x).le(Rational.fromNumberExact(x))).toBe(true);
    }
  });

  it("integer helpers", () => {
    expect(isqrt(99n)).toBe(9n);
    expect(isqrt(100n)).toBe(10n);
    expect(isqrt(10n ** 40n + 1n)).toBe(10n ** 20n);
    expect(isqrt(10n ** 40n - 1n)).toBe(10n ** 20n - 1n);
    expect(bitLength(0n)).toBe(0);
    expect(bitLength(255n)).toBe(8);
    expect(bitLength(2n ** 60n)).toBe(61);
  });
});
