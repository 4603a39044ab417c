/**
 * The exact linear algebra of runtime/core/regression.ts against an outside reference: numpy
 * (Debian python3-numpy, run as a child process) solves the same integer systems in binary64 and
 * decides positive definiteness by Cholesky (numpy.linalg.cholesky raises LinAlgError otherwise).
 * Matrices are random integer Gram matrices (positive definite) and random symmetric integer
 * matrices (mostly not), from a seeded generator. Also the simulation's draw count and tail rank
 * (docs/methods.md §18), and that the simulation's interval for a plain noisy sum matches the
 * known law's quantiles.
 */
import { describe, expect, it } from "vitest";
import {
  Bits,
  Rational,
  correlationSquare,
  rSquared,
  seededBytes,
  simulateIntervals,
  simulationDraws,
  solveNormal,
  solveNormalInt,
  tailRank,
  toFixed,
} from "../../runtime/core/index.js";
import { numpy } from "../fixtures/penguins.js";

/** A small seeded generator for test matrices (not noise). */
function lcg(seed: number): () => number {
  let s = seed >>> 0;
  return () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0;
    return s / 2 ** 32;
  };
}

function gram(rand: () => number, rows: number, cols: number, scale: number): bigint[][] {
  const x = Array.from({ length: rows }, () => [1, ...Array.from({ length: cols - 1 }, () => Math.floor((rand() - 0.5) * scale))]);
  return Array.from({ length: cols }, (_, a) => Array.from({ length: cols }, (_, b) => BigInt(x.reduce((s, r) => s + r[a] * r[b], 0))));
}

describe("solveNormal against numpy", () => {
  it("40 random systems: Gram matrices solved like numpy.linalg.solve; symmetric ones judged like numpy's Cholesky", () => {
    const rand = lcg(7);
    const cases: { g: bigint[][]; design: number[]; y: number }[] = [];
    for (let t = 0; t < 20; t++) {
      const f = 2 + (t % 6);
      cases.push({ g: gram(rand, 30 + t, f + 1, 200), design: Array.from({ length: f }, (_, i) => i), y: f });
    }
    for (let t = 0; t < 20; t++) {
      const f = 2 + (t % 5);
      const m = Array.from({ length: f + 1 }, () => new Array<bigint>(f + 1).fill(0n));
      for (let a = 0; a <= f; a++) for (let b = a; b <= f; b++) m[a][b] = m[b][a] = BigInt(Math.floor((rand() - 0.3) * 1000)) + (a === b ? 400n : 0n);
      cases.push({ g: m, design: Array.from({ length: f }, (_, i) => i), y: f });
    }
    const ref = numpy<({ pd: false } | { pd: true; x: number[] })[]>(
      `out = []
for c in data:
    g = np.array([[float(v) for v in row] for row in c['g']])
    d = c['design']; y = c['y']
    A = g[np.ix_(d, d)]; b = g[d, y]
    try:
        np.linalg.cholesky(A)
        out.append({'pd': True, 'x': np.linalg.solve(A, b).tolist()})
    except np.linalg.LinAlgError:
        out.append({'pd': False})
print(json.dumps(out))`,
      cases.map((c) => ({ g: c.g.map((r) => r.map(String)), design: c.design, y: c.y })),
    );
    let pd = 0;
    cases.forEach((c, i) => {
      const x = solveNormal(c.g, c.design, c.y);
      const r = ref[i];
      expect(x !== null, `case ${i}`).toBe(r.pd);
      if (r.pd && x !== null) {
        pd++;
        x.forEach((v, j) => expect(Math.abs(v.toNumber() - r.x[j])).toBeLessThanOrEqual(1e-7 * Math.max(1, Math.abs(r.x[j]))));
        // Exactness: A x = b holds in rationals.
        c.design.forEach((a, row) => {
          const lhs = c.design.reduce((s, b, col) => s.add(x[col].mul(c.g[a][b])), Rational.ZERO);
          expect(lhs.eq(Rational.of(c.g[a][c.y]))).toBe(true);
        });
        const xi = solveNormalInt(c.g, c.design, c.y)!;
        expect(xi.det > 0n).toBe(true);
        xi.num.forEach((n, j) => expect(Rational.of(n, xi.det).eq(x[j])).toBe(true));
      }
    });
    expect(pd).toBeGreaterThanOrEqual(20);
    expect(pd).toBeLessThan(40);
  });

  it("R^2 and the signed square of a correlation match numpy on one data set", () => {
    const rand = lcg(11);
    const rows = Array.from({ length: 50 }, () => {
      const a = Math.floor(rand() * 100);
      return [1, a, Math.floor(a * 0.7 + rand() * 60)];
    });
    const g = [0, 1, 2].map((a) => [0, 1, 2].map((b) => BigInt(rows.reduce((s, r) => s + r[a] * r[b], 0))));
    const beta = solveNormal(g, [0, 1], 2)!;
    const ref = numpy<{ r2: number; r: number }>(
      `x = np.array(data, dtype=float)
A = x[:, :2]; y = x[:, 2]
b = np.linalg.lstsq(A, y, rcond=None)[0]
res = y - A @ b
print(json.dumps({'r2': 1 - (res @ res) / ((y - y.mean()) @ (y - y.mean())), 'r': np.corrcoef(x[:, 1], x[:, 2])[0, 1]}))`,
      rows,
    );
    expect(Math.abs(rSquared(g, [0, 1], 2, beta)!.toNumber() - ref.r2)).toBeLessThan(1e-12);
    const s = correlationSquare(g, 1, 2)!.toNumber();
    expect(Math.abs(Math.sign(s) * Math.sqrt(Math.abs(s)) - ref.r)).toBeLessThan(1e-12);
  });
});

describe("simulation draws and ranks (docs/methods.md §18)", () => {
  it("B = max(1000, ceil(100/a)); k = floor(B a/2)", () => {
    const miss = (c: string) => Rational.ONE.sub(Rational.parse(c));
    expect(simulationDraws(miss("0.95"))).toBe(2000);
    expect(simulationDraws(miss("0.9"))).toBe(1000);
    expect(simulationDraws(miss("0.5"))).toBe(1000);
    expect(simulationDraws(miss("0.99"))).toBe(10000);
    expect(tailRank(2000, miss("0.95"))).toBe(50);
    expect(tailRank(10000, miss("0.99"))).toBe(50);
    expect(tailRank(1000, miss("0.999"))).toBe(1);
  });

  it("for one noisy count, the simulated interval is the law's own quantiles around the released value", () => {
    // Discrete Laplace with t = 10: P(|Y| > 29) = 0.0522743 and P(|Y| > 30) = 0.0472997 at a = 0.05
    // (docs/methods.md [C4.3b], [C4.4b]), so the 2.5% and 97.5% quantiles of Y are -30 and 30 give
    // or take one, and the percentile interval of 20000 draws lands within 2 of [v - 30, v + 30].
    const law = { family: "discrete-laplace" as const, scale: Rational.of(10n) };
    const released = [1000n];
    const out = simulateIntervals({
      released,
      laws: [law],
      centre: [Rational.of(1000n)],
      estimate: (s) => [toFixed(Rational.of(s[0]))],
      draws: 20000,
      miss: Rational.parse("0.05"),
      bits: new Bits(seededBytes("sim-laplace")),
    });
    expect(Math.abs(out[0].low!.toNumber() - 970)).toBeLessThanOrEqual(2);
    expect(Math.abs(out[0].high!.toNumber() - 1030)).toBeLessThanOrEqual(2);
  });

  it("unavailable draws count beyond both ends: more of them than k leaves both sides unbounded", () => {
    const law = { family: "discrete-laplace" as const, scale: Rational.of(10n) };
    const out = simulateIntervals({
      released: [0n],
      laws: [law],
      centre: [Rational.ZERO],
      estimate: (s) => [s[0] > 0n ? toFixed(Rational.of(s[0])) : null],
      draws: 1000,
      miss: Rational.parse("0.1"),
      bits: new Bits(seededBytes("sim-fail")),
    });
    expect(out[0].low).toBeNull();
    expect(out[0].high).toBeNull();
    expect(out[0].value!.isZero()).toBe(true);
  });
});
