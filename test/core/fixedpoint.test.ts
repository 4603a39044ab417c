import { describe, expect, it } from "vitest";
import { BadInputError } from "../../runtime/errors.js";
import { centredSumSensitivity, decimalStepDigits, decimalText, fromGridUnits, makeGrid, sumSensitivity, toGridUnits } from "../../runtime/core/fixedpoint.js";
import { addNoise, calibrate } from "../../runtime/core/mechanisms.js";
import { Bits, seededBytes } from "../../runtime/core/random.js";
import { Rational } from "../../runtime/core/rational.js";

describe("fixed-point grids (docs/methods.md §6–7)", () => {
  it("expresses bounds in grid units", () => {
    const g = makeGrid({ lower: "-5", upper: "10", step: "0.5" });
    expect(g.lowerUnits).toBe(-10n);
    expect(g.upperUnits).toBe(20n);
    expect(g.maxAbsUnits).toBe(20n);
    expect(g.step.toString()).toBe("1/2");
  });

  it("[C6.3a] U = 100, g = 0.01: per-row sensitivity 10000 grid units", () => {
    expect(sumSensitivity(makeGrid({ lower: "0", upper: "100", step: "0.01" }), 1)).toBe(10000n);
  });
  it("[C7.1] sum sensitivity, clamp [-5, 10], k = 3 -> 30", () => {
    expect(sumSensitivity(makeGrid({ lower: "-5", upper: "10", step: "1" }), 3)).toBe(30n);
  });
  it("[C7.3] centred-sum sensitivity per row, clamp [10, 20] (centre 15) -> 5", () => {
    const g = makeGrid({ lower: "10", upper: "20", step: "1" });
    const c = centredSumSensitivity(g, 1);
    // half-units: centre 2*15 = 30, sensitivity 2*5 = 10 half-units = 5 value units
    expect(c.centreUnits2).toBe(30n);
    expect(fromGridUnits(c.sensitivity2, g.step.div(2n)).toString()).toBe("5");
    // [C7.1]-style: an interval excluding 0 still costs max(|L|,|U|) = 20 uncentred
    expect(sumSensitivity(g, 1)).toBe(20n);
  });
  it("centre between grid points uses half-units", () => {
    const g = makeGrid({ lower: "0", upper: "3", step: "1" });
    const c = centredSumSensitivity(g, 2);
    expect(c).toEqual({ centreUnits2: 3n, sensitivity2: 6n }); // centre 1.5; per row |2x - 3| <= 3
  });

  it("rounds to the nearest grid point, clamps in integers, drops non-finite values", () => {
    const g = makeGrid({ lower: "0", upper: "240", step: "0.5" });
    expect(toGridUnits(12.3, g)).toBe(25n); // 12.5
    expect(toGridUnits(12.2, g)).toBe(24n); // 12.0
    expect(toGridUnits(12.25, g)).toBe(25n); // tie away from zero
    expect(toGridUnits(-3, g)).toBe(0n);
    expect(toGridUnits(1e308, g)).toBe(480n);
    expect(toGridUnits(-1e308, g)).toBe(0n);
    expect(toGridUnits(NaN, g)).toBeNull();
    expect(toGridUnits(Infinity, g)).toBeNull();
    expect(toGridUnits(-Infinity, g)).toBeNull();
    const d = makeGrid({ lower: "-1", upper: "1", step: "0.01" });
    expect(toGridUnits(0.1 + 0.2, d)).toBe(30n); // binary64 noise in x/g disappears in the rounding
    expect(toGridUnits(-0.125, d)).toBe(-13n);
  });

  it("refuses bad grids with clear messages", () => {
    expect(() => makeGrid({ lower: "5", upper: "5", step: "1" })).toThrow(/empty or reversed/);
    expect(() => makeGrid({ lower: "6", upper: "5", step: "1" })).toThrow(BadInputError);
    expect(() => makeGrid({ lower: "0", upper: "5", step: "0" })).toThrow(/step must be positive/);
    expect(() => makeGrid({ lower: "0", upper: "5", step: "-1" })).toThrow(BadInputError);
    expect(() => makeGrid({ lower: "0.3", upper: "5", step: "0.5" })).toThrow(/not a multiple/);
    expect(() => makeGrid({ lower: "0", upper: "1e20", step: "1" })).toThrow(/too many units/);
    expect(() => makeGrid({ lower: "x", upper: "5", step: "1" })).toThrow(/lower bound/);
    expect(() => sumSensitivity(makeGrid({ lower: "0", upper: "1", step: "1" }), 0)).toThrow(BadInputError);
    expect(() => sumSensitivity(makeGrid({ lower: "0", upper: "1", step: "1" }), 1.5)).toThrow(BadInputError);
  });

  it("lattice: every released value lies on the declared grid", () => {
    const bits = new Bits(seededBytes("lattice"));
    for (const step of ["0.01", "0.5", "0.25", "3"]) {
      const g = makeGrid({ lower: "-30", upper: "30", step });
      const values = [1.234, -7.77, 29.99, 1e9, -0.001, 5];
      let sum = 0n;
      for (const v of values) sum += toGridUnits(v, g) as bigint;
      for (const law of [calibrate(sumSensitivity(g, 1), { epsilon: Rational.parse("0.7") }), calibrate(sumSensitivity(g, 1), { rho: Rational.parse("0.3") })]) {
        for (let i = 0; i < 200; i++) {
          const released = fromGridUnits(addNoise(sum, law, bits), g);
          expect(released.div(g.step).isInteger()).toBe(true);
        }
      }
    }
  });
});

describe("decimal steps and bound literals (SQL engines compare fixed-point columns with them)", () => {
  it("recognises a step of 10^-t and nothing else", () => {
    expect(decimalStepDigits(makeGrid({ lower: "0", upper: "1", step: "0.001" }))).toBe(3);
    expect(decimalStepDigits(makeGrid({ lower: "0", upper: "10", step: "1" }))).toBe(0);
    expect(decimalStepDigits(makeGrid({ lower: "0", upper: "100", step: "10" }))).toBeNull();
    expect(decimalStepDigits(makeGrid({ lower: "0", upper: "1", step: "0.25" }))).toBeNull();
    expect(decimalStepDigits(makeGrid({ lower: "0", upper: "1", step: "0.002" }))).toBeNull();
  });

  it("writes units exactly, and rounds outward or inward at fewer decimals", () => {
    expect(decimalText(-1205n, 2)).toBe("-12.05");
    expect(decimalText(5n, 3)).toBe("0.005");
    expect(decimalText(-5n, 3)).toBe("-0.005");
    expect(decimalText(42n, 0)).toBe("42");
    // 10.005 and -10.005 at 2 decimals.
    expect(decimalText(10005n, 3, 2, "floor")).toBe("10.00");
    expect(decimalText(10005n, 3, 2, "ceil")).toBe("10.01");
    expect(decimalText(-10005n, 3, 2, "floor")).toBe("-10.01");
    expect(decimalText(-10005n, 3, 2, "ceil")).toBe("-10.00");
    // -0.005 rounds to 0 upward (no "-0.00").
    expect(decimalText(-5n, 3, 2, "ceil")).toBe("0.00");
    // On the coarser grid already: no rounding either way.
    expect(decimalText(-10000n, 3, 2, "floor")).toBe("-10.00");
    expect(decimalText(-10000n, 3, 2, "ceil")).toBe("-10.00");
    expect(() => decimalText(1n, 2, 3)).toThrow(RangeError);
  });

  it("keeps every comparison with a value of fewer decimals (all values -2.00..2.00 against bounds at 3 decimals)", () => {
    for (let b = -2000n; b <= 2000n; b += 7n) {
      const lo = Number(decimalText(b, 3, 2, "floor"));
      const hi = Number(decimalText(b, 3, 2, "ceil"));
      for (let x = -200n; x <= 200n; x++) {
        // Compare in integers at scale 3: x (2 decimals) is 10x thousandths.
        const xs = x * 10n;
        const xv = Number(decimalText(x, 2));
        expect(xv <= lo, `${x} <= ${b}`).toBe(xs <= b);
        expect(xv >= hi, `${x} >= ${b}`).toBe(xs >= b);
        expect(xv < hi, `${x} < ${b}`).toBe(xs < b);
        expect(xv > lo, `${x} > ${b}`).toBe(xs > b);
      }
    }
  });
});
