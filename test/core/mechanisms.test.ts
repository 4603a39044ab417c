import { describe, expect, it } from "vitest";
import { BadInputError } from "../../runtime/errors.js";
import { addNoise, calibrate, costOf, releaseNoisy } from "../../runtime/core/mechanisms.js";
import { Bits, seededBytes } from "../../runtime/core/random.js";
import { Rational } from "../../runtime/core/rational.js";

const R = Rational.parse;

describe("mechanisms (docs/methods.md §4–5)", () => {
  it("pure epsilon calibrates a discrete Laplace with t = Delta/epsilon (§4: epsilon = p/r gives t = Delta r/p)", () => {
    const law = calibrate(10n, { epsilon: R("0.5") });
    expect(law).toEqual({ family: "discrete-laplace", scale: R("20") }); // [C8] setup: t_S = 10/0.5 = 20
    expect(calibrate(3n, { epsilon: R("2/7") })).toEqual({ family: "discrete-laplace", scale: R("21/2") });
  });
  it("[C5.7] rho for Delta = 1, sigma = 10 -> 1/200; zCDP calibrates sigma^2 = Delta^2/(2 rho)", () => {
    expect(costOf({ family: "discrete-gaussian", sigma2: R("100") }, 1n)).toEqual({ rho: R("1/200") });
    expect(calibrate(1n, { rho: R("1/200") })).toEqual({ family: "discrete-gaussian", sigma2: R("100") });
  });
  it("[C7.4d] group-by L2 sensitivity 40 at rho = 0.5 -> sigma = 40 (sigma^2 = 1600)", () => {
    expect(calibrate(40n, { rho: R("0.5") })).toEqual({ family: "discrete-gaussian", sigma2: R("1600") });
  });
  it("costOf inverts calibrate exactly", () => {
    for (const p of [{ epsilon: R("0.123") }, { rho: R("7/9") }]) {
      for (const d of [1n, 7n, 10000n]) expect(costOf(calibrate(d, p), d)).toEqual(p);
    }
  });
  it("releaseNoisy describes what was drawn", () => {
    const bits = new Bits(seededBytes("m"));
    const r = releaseNoisy({ value: 100n, sensitivity: 2n, param: { epsilon: R("1") }, bits });
    expect(r.law).toEqual({ family: "discrete-laplace", scale: R("2") });
    expect(r.param).toEqual({ epsilon: R("1") });
    expect(typeof r.noisy).toBe("bigint");
  });
  it("rejects bad inputs with typed errors", () => {
    const bits = new Bits(seededBytes("m2"));
    expect(() => calibrate(0n, { epsilon: R("1") })).toThrow(/sensitivity/);
    expect(() => calibrate(-1n, { epsilon: R("1") })).toThrow(BadInputError);
    expect(() => calibrate(1n, { epsilon: R("0") })).toThrow(/epsilon must be positive/);
    expect(() => calibrate(1n, { epsilon: R("-1") })).toThrow(BadInputError);
    expect(() => calibrate(1n, { rho: R("0") })).toThrow(/rho must be positive/);
    expect(() => calibrate(1n, { epsilon: 0.5 as unknown as Rational })).toThrow(BadInputError);
    expect(() => calibrate(1n, {} as never)).toThrow(BadInputError);
    expect(() => addNoise(1 as unknown as bigint, { family: "discrete-laplace", scale: R("1") }, bits)).toThrow(BadInputError);
    expect(() => addNoise(1n, { family: "uniform" } as never, bits)).toThrow(/unknown noise family/);
    expect(() => costOf({ family: "discrete-laplace", scale: R("0") }, 1n)).toThrow(BadInputError);
  });
});
