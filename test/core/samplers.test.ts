/**
 * Goodness of fit of the exact samplers against their published pmfs. Each sampler at t, sigma in
 * {0.5, 1, 3, 10, 1000}: 10^5 draws from a fixed-seed source, chi-square test against the exact pmf
 * at significance 0.001, and sample mean/variance against the published formulas.
 * pmfs: discrete Laplace P(y) = (1-q)/(1+q) q^|y|, q = e^(-1/t) (Ghosh, Roughgarden & Sundararajan
 * 2009; docs/methods.md §4); discrete Gaussian P(x) = e^(-x^2/(2 sigma^2)) / sum_y e^(-y^2/(2 sigma^2))
 * (Canonne, Kamath & Steinke 2020, definition; docs/methods.md §5). Variance: 2q/(1-q)^2 (docs/methods.md §4)
 * and, for the Gaussian, the same ratio of sums with Var <= sigma^2 (CKS 2020).
 */
import { describe, expect, it } from "vitest";
import { BadInputError } from "../../runtime/errors.js";
import { Rational } from "../../runtime/core/rational.js";
import { Bits, seededBytes } from "../../runtime/core/random.js";
import {
  sampleBernoulliExp,
  sampleDiscreteGaussian,
  sampleDiscreteGaussianBig,
  sampleDiscreteLaplace,
  sampleDiscreteLaplaceBig,
} from "../../runtime/core/samplers.js";
import { chiSquareAgainstPmf, chiSquarePValue, jstat, tally } from "./stats.js";

const LEVEL = 0.001;
const N = 100_000;

function laplacePmf(t: number): (y: number) => number {
  const q = Math.exp(-1 / t);
  const c = -Math.expm1(-1 / t) / (1 + q);
  return (y) => c * Math.exp(-Math.abs(y) / t);
}

function gaussianPmf(sigma: number): (y: number) => number {
  const s2 = sigma * sigma;
  let z = 1;
  for (let x = Math.ceil(40 * sigma) + 1; x >= 1; x--) z += 2 * Math.exp(-(x * x) / (2 * s2));
  return (y) => Math.exp(-(y * y) / (2 * s2)) / z;
}

function moments(pmf: (y: number) => number, K: number): { v: number; m4: number } {
  let v = 0;
  let m4 = 0;
  for (let y = K; y >= 1; y--) {
    const p = 2 * pmf(y);
    v += y * y * p;
    m4 += y * y * y * y * p;
  }
  return { v, m4 };
}

function checkSampler(draw: () => bigint, pmf: (y: number) => number, K: number, n: number, formulaVar: number): void {
  const xs: number[] = new Array(n);
  let sum = 0;
  let sum2 = 0;
  for (let i = 0; i < n; i++) {
    const y = Number(draw());
    xs[i] = y;
    sum += y;
    sum2 += y * y;
  }
  const res = chiSquareAgainstPmf(tally(xs), pmf, K, n);
  expect(res.p, `chi-square ${res.stat.toFixed(1)} on ${res.df} df`).toBeGreaterThan(LEVEL);
  const { v, m4 } = moments(pmf, K);
  // the pmf-derived variance matches the published formula
  expect(v).toBeCloseTo(formulaVar, Math.max(0, 8 - Math.ceil(Math.log10(formulaVar + 1))));
  const mean = sum / n;
  expect(Math.abs(mean), "mean").toBeLessThan(5 * Math.sqrt(v / n));
  const sv = sum2 / n - mean * mean;
  expect(Math.abs(sv - v), "variance").toBeLessThan(5 * Math.sqrt((m4 - v * v) / n) + 1e-9);
}

const SCALES = ["0.5", "1", "3", "10", "1000"];

describe("discrete Laplace sampler (CKS 2020 algorithm C)", () => {
  for (const s of SCALES) {
    it(`t = ${s}: 10^5 draws fit the pmf; mean 0, variance 2q/(1-q)^2`, () => {
      const t = Number(s);
      const bits = new Bits(seededBytes(`laplace-${s}`));
      const scale = Rational.parse(s);
      const q = Math.exp(-1 / t);
      checkSampler(() => sampleDiscreteLaplace(scale, bits), laplacePmf(t), Math.ceil(40 * t) + 5, N, (2 * q) / (1 - q) ** 2);
    });
  }
  it("rational scale 7/3 and the bigint path fit the pmf", () => {
    const bits = new Bits(seededBytes("laplace-big"));
    for (const s of ["7/3", "0.5", "1000"]) {
      const scale = Rational.parse(s);
      const t = scale.toNumber();
      const q = Math.exp(-1 / t);
      checkSampler(() => sampleDiscreteLaplaceBig(scale, bits), laplacePmf(t), Math.ceil(40 * t) + 5, 20_000, (2 * q) / (1 - q) ** 2);
    }
    const scale = Rational.parse("7/3");
    const q = Math.exp(-3 / 7);
    checkSampler(() => sampleDiscreteLaplace(scale, bits), laplacePmf(7 / 3), 100, 50_000, (2 * q) / (1 - q) ** 2);
  });
  it("a scale with a huge numerator takes the bigint path and stays in law", () => {
    const bits = new Bits(seededBytes("laplace-huge"));
    // t = (2^60 + 1)/2^60 ~ 1: numerator beyond the number path
    const scale = Rational.of(2n ** 60n + 1n, 2n ** 60n);
    const q = Math.exp(-1 / scale.toNumber());
    checkSampler(() => sampleDiscreteLaplace(scale, bits), laplacePmf(scale.toNumber()), 60, 20_000, (2 * q) / (1 - q) ** 2);
  });
  it("the fit test has power: draws at t = 1.1 are rejected against the t = 1 pmf", () => {
    const bits = new Bits(seededBytes("laplace-power"));
    const scale = Rational.parse("1.1");
    const xs: number[] = [];
    for (let i = 0; i < N; i++) xs.push(Number(sampleDiscreteLaplace(scale, bits)));
    expect(chiSquareAgainstPmf(tally(xs), laplacePmf(1), 45, N).p).toBeLessThan(LEVEL);
  });
});

describe("discrete Gaussian sampler (CKS 2020 algorithm D)", () => {
  for (const s of SCALES) {
    it(`sigma = ${s}: 10^5 draws fit the pmf; mean 0, variance <= sigma^2`, () => {
      const sigma = Number(s);
      const bits = new Bits(seededBytes(`gauss-${s}`));
      const sigma2 = Rational.parse(s).mul(Rational.parse(s));
      const pmf = gaussianPmf(sigma);
      const K = Math.ceil(40 * sigma) + 5;
      const { v } = moments(pmf, K);
      expect(v).toBeLessThanOrEqual(sigma * sigma * (1 + 1e-12));
      checkSampler(() => sampleDiscreteGaussian(sigma2, bits), pmf, K, N, v);
    });
  }
  it("rational sigma^2 = 287833/10000 and the bigint path fit the pmf", () => {
    const bits = new Bits(seededBytes("gauss-big"));
    for (const s2 of ["287833/10000", "0.25", "9", "1000000"]) {
      const sigma2 = Rational.parse(s2);
      const sigma = Math.sqrt(sigma2.toNumber());
      const pmf = gaussianPmf(sigma);
      const K = Math.ceil(40 * sigma) + 5;
      checkSampler(() => sampleDiscreteGaussianBig(sigma2, bits), pmf, K, 20_000, moments(pmf, K).v);
      checkSampler(() => sampleDiscreteGaussian(sigma2, bits), pmf, K, 20_000, moments(pmf, K).v);
    }
  });
  it("sigma^2 = 2^50 (accept step in bigints) matches the normal limit in 20 equal-probability bins", () => {
    // For sigma = 2^25 the discrete Gaussian equals N(0, sigma^2) rounded to integers up to O(1/sigma)
    // (Poisson summation, docs/methods.md §5); bins from the normal quantile function of jstat.
    const bits = new Bits(seededBytes("gauss-2^50"));
    const sigma2 = Rational.of(2n ** 50n);
    const sigma = 2 ** 25;
    const edges = Array.from({ length: 19 }, (_, i) => jstat.normal.inv((i + 1) / 20, 0, sigma) as number);
    const counts = new Array<number>(20).fill(0);
    const n = 20_000;
    for (let i = 0; i < n; i++) {
      const y = Number(sampleDiscreteGaussian(sigma2, bits));
      let k = 0;
      while (k < 19 && y > edges[k]) k++;
      counts[k]++;
    }
    let stat = 0;
    for (const c of counts) stat += (c - n / 20) ** 2 / (n / 20);
    expect(chiSquarePValue(stat, 19)).toBeGreaterThan(LEVEL);
  });
  // docs/methods.md §5 check values: [C5.6] P(X = 0) at sigma = 1 = 0.398942278267; [C5.1a] Var = 0.999999788768
  it("[C5.6] [C5.1a] the independent pmf reproduces the handbook values", () => {
    const pmf = gaussianPmf(1);
    expect(pmf(0)).toBeCloseTo(0.398942278267, 11);
    expect(moments(pmf, 50).v).toBeCloseTo(0.999999788768, 11);
  });
});

describe("Bernoulli(exp(-gamma)) (CKS 2020 algorithms A and B)", () => {
  // docs/methods.md §5 tests: Bernoulli primitives against e^(-1/2) and e^(-5/2)
  for (const [g, label] of [
    ["1/2", "e^(-1/2)"],
    ["5/2", "e^(-5/2)"],
    ["0", "1"],
    ["123456789012345678901/98765432109876543210", "bigint gamma"],
  ] as const) {
    it(`gamma = ${g}: frequency matches ${label}`, () => {
      const bits = new Bits(seededBytes(`bexp-${g}`));
      const gamma = Rational.parse(g);
      const p = Math.exp(-gamma.toNumber());
      let s = 0;
      for (let i = 0; i < N; i++) if (sampleBernoulliExp(gamma, bits)) s++;
      expect(Math.abs(s / N - p)).toBeLessThanOrEqual(5 * Math.sqrt((p * (1 - p)) / N));
    });
  }
});

describe("sampler inputs", () => {
  it("reject non-positive scales and negative gamma with typed errors", () => {
    const bits = new Bits(seededBytes("bad"));
    expect(() => sampleDiscreteLaplace(Rational.ZERO, bits)).toThrow(BadInputError);
    expect(() => sampleDiscreteLaplace(Rational.parse("-1"), bits)).toThrow(BadInputError);
    expect(() => sampleDiscreteGaussian(Rational.ZERO, bits)).toThrow(BadInputError);
    expect(() => sampleDiscreteGaussian(Rational.parse("-4"), bits)).toThrow(/positive/);
    expect(() => sampleBernoulliExp(Rational.parse("-1/2"), bits)).toThrow(BadInputError);
  });
  it("are deterministic under a seeded source", () => {
    const a = new Bits(seededBytes(9));
    const b = new Bits(seededBytes(9));
    const s = Rational.parse("3");
    for (let i = 0; i < 100; i++) expect(sampleDiscreteGaussian(s, a)).toBe(sampleDiscreteGaussian(s, b));
  });
});
