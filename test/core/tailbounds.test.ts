/**
 * Exact-arithmetic bounds (runtime/core/bounds.ts) and the half-widths built on them
 * (runtime/core/tailbounds.ts): every bound brackets an independently computed value, and every
 * half-width is at least the exact smallest h with P(|noise| > h) <= 1 - confidence.
 *
 * Reference values: mpmath 1.3.0 at 60 significant digits (50 quoted) (python3, run when this test was
 * written): exp, log, sqrt(2 pi) and ncdf directly; discrete tails by direct summation of
 * exp(-x^2/(2 sigma^2)) to 40 sigma past h over the Jacobi theta normaliser, and 2 q^(h+1)/(1+q)
 * for the discrete Laplace, with the smallest passing h found by integer bisection.
 */
import { describe, expect, it } from "vitest";
import { expNeg, ln, normalTailUpper, sqrt2pi } from "../../runtime/core/bounds.js";
import { halfWidth } from "../../runtime/core/intervals.js";
import type { NoiseLaw } from "../../runtime/core/mechanisms.js";
import { Rational } from "../../runtime/core/rational.js";
import { firstPassing } from "../../runtime/core/search.js";
import { shortAt, shortIndexDown, shortIndexUp, shortSqrtDown } from "../../runtime/core/shortdecimal.js";

const R = Rational.parse;
const P = 120;
const TOL = R("1e-48"); // the references carry 50 significant digits

function brackets(b: { lo: bigint; hi: bigint }, ref: string, p = P): void {
  const one = Rational.of(1n << BigInt(p));
  const lo = Rational.of(b.lo).div(one);
  const hi = Rational.of(b.hi).div(one);
  const r = R(ref);
  expect(lo.le(r.add(TOL)), `lo ${lo.toDecimal(40)} <= ${ref}`).toBe(true);
  expect(hi.ge(r.sub(TOL)), `hi ${hi.toDecimal(40)} >= ${ref}`).toBe(true);
  expect(hi.sub(lo).lt(R("1e-30")), "bound width").toBe(true);
}

describe("exp, ln, sqrt(2 pi) and the normal tail bracket the mpmath values", () => {
  const values: [string, string, string][] = [
    ["0.001", "0.99900049983337499166805535716765597470235590236008", "-6.9077552789821370520539743640530926228033044658863"],
    ["0.5", "0.60653065971263342360379953499118045344191813548719", "-0.69314718055994530941723212145817656807550013436026"],
    ["1", "0.36787944117144232159552377016146086744581113103177", "0"],
    ["7.25", "0.0007101743888425490635846003705775444086763023873619", "1.9810014688665834083488077894455584693435126452022"],
    ["100", "3.7200759760208359629596958038631183373588922923768e-44", "4.6051701859880913680359829093687284152022029772575"],
    ["1/3", "0.71653131057378925042560409692537966745311205982148", "-1.0986122886681096913952452369225257046474905578227"],
  ];
  it.each(values)("x = %s", (x, e, l) => {
    brackets(expNeg(R(x), P), e);
    brackets(ln(R(x), P), l);
  });
  it("sqrt(2 pi) = 2.5066282746310005024157652848110452530069867406099", () => {
    brackets(sqrt2pi(P), "2.5066282746310005024157652848110452530069867406099");
  });
  it.each([
    ["0.01", "0.46017216272297101853459538176081791698593771631023"],
    ["1", "0.1586552539314570514147674543679620775220870332734"],
    ["3.8416", "0.024997895148220434136584269040837190022499779061883"],
    ["25", "0.00000028665157187919391167375233287464535385442301361189"],
    ["60", "0.000000000000004742868785536924194240214474301405065060685129895"],
  ])("Q(sqrt(%s)) upper bound is above and within 1e-25 of %s", (w, q) => {
    const u = Rational.of(normalTailUpper(R(w), P)).div(Rational.of(1n << BigInt(P)));
    expect(u.ge(R(q))).toBe(true);
    expect(u.sub(R(q)).lt(R("1e-25"))).toBe(true);
  });
  it("e^-x for a huge x is a bound [0, 2^-p], at once", () => {
    expect(expNeg(R("1e30"), P)).toEqual({ lo: 0n, hi: 1n });
  });
});

describe("half-widths are never below the exact value (mpmath reference) and at most one unit above", () => {
  // [family, sigma^2 or scale, confidence, exact smallest h]
  const exact: ["G" | "L", string, number, bigint][] = [
    ["G", "0.25", 0.95, 1n], ["G", "0.25", 0.999999, 2n], ["G", "1", 0.5, 1n], ["G", "1", 0.999999, 5n],
    ["G", "2.5", 0.9, 3n], ["G", "2.5", 0.999999, 8n], ["G", "30.7", 0.5, 4n], ["G", "30.7", 0.95, 11n],
    ["G", "100", 0.9, 16n], ["G", "100", 0.999999, 49n], ["G", "2499", 0.95, 98n], ["G", "2501", 0.5, 34n],
    ["G", "2501", 0.999999, 245n], ["G", "10000", 0.5, 67n], ["G", "10000", 0.95, 196n],
    ["G", "123456.7", 0.9, 578n], ["G", "123456.7", 0.999999, 1719n],
    ["L", "0.01", 0.95, 0n], ["L", "1", 0.5, 1n], ["L", "1", 0.999999, 14n], ["L", "7.3", 0.95, 22n],
    ["L", "1000", 0.999999, 13816n], ["L", "1e9", 0.5, 693147181n], ["L", "1e9", 0.95, 2995732274n],
    ["L", "1e9", 0.999999, 13815510558n],
  ];
  it.each(exact)("%s %s at %s: exact %s", (fam, v, c, h) => {
    const law: NoiseLaw = fam === "L" ? { family: "discrete-laplace", scale: R(v) } : { family: "discrete-gaussian", sigma2: R(v) };
    const got = halfWidth(law, c);
    expect(got >= h).toBe(true);
    expect(got - h <= 1n).toBe(true);
  });
});

describe("half-widths at the edges of the supported ranges return at once", () => {
  // scale Delta/epsilon at Delta = 2^64 and epsilon = 1e-9 / 60 (describe's smallest part)
  const huge = Rational.of(1n << 64n).mul(R("6e10"));
  it.each([
    ["Laplace, huge scale", { family: "discrete-laplace", scale: huge } as NoiseLaw],
    ["Laplace, tiny scale", { family: "discrete-laplace", scale: R("1e-3") } as NoiseLaw],
    ["Gaussian, huge sigma^2", { family: "discrete-gaussian", sigma2: huge.mul(huge) } as NoiseLaw],
    ["Gaussian, tiny sigma^2", { family: "discrete-gaussian", sigma2: R("1e-6") } as NoiseLaw],
    ["Gaussian, sigma^2 with a long fraction", { family: "discrete-gaussian", sigma2: R("1/999999999999999999999999999999").add(R("12345")) } as NoiseLaw],
  ])("%s", (_name, law) => {
    for (const c of [0.001, 0.5, 0.95, 0.999999999999]) {
      const t0 = performance.now();
      const h = halfWidth(law, c);
      expect(h >= 0n).toBe(true);
      expect(performance.now() - t0).toBeLessThan(5000); // a hang guard, not a speed target
    }
  });
  it("the continuous check: at a huge scale the Laplace half-width is t ln(1/a) within a part in 10^12", () => {
    const law: NoiseLaw = { family: "discrete-laplace", scale: huge };
    const h = halfWidth(law, 0.95);
    const approx = huge.mul(R("2.9957322735539909934")); // ln 20 (mpmath)
    expect(Rational.of(h).sub(approx).abs().div(approx).lt(R("1e-12"))).toBe(true);
  });
});

describe("bounded searches and short decimals", () => {
  it("firstPassing finds the threshold from any hint, in a bounded number of calls", () => {
    for (const hint of [0n, 5n, 999n, 10n ** 30n]) {
      let calls = 0;
      const r = firstPassing((i) => (calls++, i >= 777n), 0n, 1000n, hint);
      expect(r).toBe(777n);
      expect(calls).toBeLessThanOrEqual(3 * 11);
    }
    expect(firstPassing(() => false, 0n, 10n ** 40n)).toBeNull();
  });
  it("short decimals are ordered and round the stated way", () => {
    const x = R("0.28434851");
    expect(shortAt(shortIndexDown(x)).toString()).toBe(R("0.284348").toString());
    expect(shortAt(shortIndexUp(x)).toString()).toBe(R("0.284349").toString());
    expect(shortIndexUp(R("5"))).toBe(shortIndexDown(R("5")));
    expect(shortAt(shortIndexDown(R("1e-18"))).toString()).toBe(R("1e-18").toString());
  });
  it("shortSqrtDown is the largest 6-digit decimal whose square is <= r", () => {
    for (const r of ["2", "1e-18", "0.0001", "123456789", "1/3", "5e5"]) {
      const s = shortSqrtDown(R(r));
      expect(s.mul(s).le(R(r))).toBe(true);
      const next = shortAt(shortIndexDown(s) + 1n);
      expect(next.mul(next).gt(R(r))).toBe(true);
    }
  });
});
