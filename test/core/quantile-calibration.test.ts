/**
 * The calibration's fast path (docs/methods.md §20, "Cuts, calibrated"): draws kept as binary64
 * integers and cuts found by selection must give exactly the cuts of the method as written, i.e.
 * the bigint draws of drawNoise, the U of every kind, a full sort and its k-th smallest and k-th
 * largest entries. The reference below is that transcription, run on the same seeded bytes; the
 * batch draws (fillNoise) are checked against drawNoise one at a time on the same bytes; the
 * selection is also checked against Array.prototype.sort, and the move to bigints (a draw or a
 * partial sum past 2^53 - 1) against plain bigint sums of the same sequence.
 */
import { describe, expect, it } from "vitest";
import { drawNoise, fillNoise, type NoiseLaw } from "../../runtime/core/mechanisms.js";
import { bigDraws, CALIBRATION_DRAWS, drawCalibration, rankCuts, selectInPlace } from "../../runtime/core/quantile.js";
import { Bits, seededBytes } from "../../runtime/core/random.js";
import { Rational } from "../../runtime/core/rational.js";

const R = Rational.parse;

/** §20 as written: N samples of E and S_1..S_L from drawNoise (E first, then S's draws), sorted U per kind. */
function referenceCuts(law: NoiseLaw, L: number, p: Rational, miss: Rational, bits: Bits): { low: bigint[]; high: bigint[] } {
  const N = CALIBRATION_DRAWS;
  const k = Number((BigInt(N + 1) * miss.num) / (2n * miss.den));
  const root: bigint[] = [];
  const sums: bigint[][] = Array.from({ length: L }, () => []);
  for (let s = 0; s < N; s++) {
    root.push(drawNoise(law, bits));
    let sum = 0n;
    for (let l = 0; l < L; l++) {
      sum += drawNoise(law, bits);
      sums[l].push(sum);
    }
  }
  const a = p.num;
  const b = p.den;
  const low: bigint[] = [];
  const high: bigint[] = [];
  for (let l = 0; l <= L + 1; l++) {
    const u = root.map((e, s) => (l === 0 ? -a * e : l === L + 1 ? (b - a) * e : b * sums[l - 1][s] - a * e));
    u.sort((x, y) => (x < y ? -1 : x > y ? 1 : 0));
    low.push(u[k - 1]);
    high.push(u[N - k]);
  }
  return { low, high };
}

describe("calibration fast path", () => {
  it("rankCuts equals §20 as written (bigint draws, full sort) on the same bytes, both families, both paths", () => {
    // Scales not used by other tests, so the per-thread caches cannot answer from earlier draws.
    const cases: [NoiseLaw, number, string, string][] = [
      [{ family: "discrete-laplace", scale: R("37/10") }, 3, "1/2", "1/20"],
      [{ family: "discrete-laplace", scale: R("240000000/5000001") }, 11, "9/10", "1/20"],
      [{ family: "discrete-gaussian", sigma2: R("1013/10") }, 5, "1/2", "1/100"],
      [{ family: "discrete-gaussian", sigma2: R("1/7") }, 2, "999/1000", "1/5000"],
      // b' past 2^53: the bigint path of rankCuts, formed from the binary64 draws.
      [{ family: "discrete-laplace", scale: R("41/10") }, 3, `1/${2n ** 60n + 1n}`, "1/20"],
    ];
    for (const [law, L, p, miss] of cases) {
      const got = rankCuts(law, L, R(p), R(miss), new Bits(seededBytes(`calib-${p}-${L}`)))!;
      const want = referenceCuts(law, L, R(p), R(miss), new Bits(seededBytes(`calib-${p}-${L}`)));
      expect(got.low, `${law.family} L ${L} p ${p}`).toEqual(want.low);
      expect(got.high, `${law.family} L ${L} p ${p}`).toEqual(want.high);
    }
  });

  it("fillNoise gives drawNoise's draws one by one, the same bytes, both families, number and bigint paths", () => {
    const laws: NoiseLaw[] = [
      { family: "discrete-laplace", scale: R("240000000/5000001") },
      { family: "discrete-laplace", scale: R("123456789012345678901/7") }, // past the number path
      { family: "discrete-gaussian", sigma2: R("1013/10") },
      { family: "discrete-gaussian", sigma2: R("123456789012345678901234567/7") },
    ];
    for (const law of laws) {
      const out = new Float64Array(3000);
      const big = fillNoise(law, new Bits(seededBytes("fill")), out);
      const one = new Bits(seededBytes("fill"));
      for (let i = 0; i < out.length; i++) {
        const want = drawNoise(law, one);
        const got = out[i] === out[i] ? BigInt(out[i]) : big.get(i);
        expect(got, `${law.family} draw ${i}`).toBe(want);
      }
    }
  });

  it("selectInPlace gives the sort's k-th entry and partitions around it, with ties and signed zeros", () => {
    const bits = new Bits(seededBytes("select"));
    for (const [n, range] of [[1, 3], [2, 2], [7, 1], [100, 5], [1000, 3], [10_000, 1000], [10_000, 2 ** 40]] as const) {
      const xs = Float64Array.from({ length: n }, () => bits.uniformSmall(2 * range + 1) - range);
      if (n > 2) xs[1] = -0;
      const sorted = Array.from(xs).sort((x, y) => x - y);
      for (const k of new Set([0, 1, n >> 1, n - 2, n - 1, Math.floor(n / 40)])) {
        if (k < 0 || k >= n) continue;
        const a = xs.slice();
        const v = selectInPlace(a, k, 0, n - 1);
        expect(v === sorted[k]).toBe(true); // -0 === 0: the same integer
        for (let i = 0; i < k; i++) expect(a[i] <= v).toBe(true);
        for (let i = k + 1; i < n; i++) expect(a[i] >= v).toBe(true);
        const plain = (ys: number[]): number[] => ys.map((y) => (y === 0 ? 0 : y)); // -0 and 0 as one integer
        expect(plain(Array.from(a).sort((x, y) => x - y))).toEqual(plain(sorted)); // a permutation of the input
      }
    }
    // Adversarial for a median-of-three pivot: the fallback sort keeps it exact.
    const organ = Float64Array.from({ length: 4096 }, (_, i) => (i < 2048 ? i : 4095 - i));
    const want = Array.from(organ).sort((x, y) => x - y);
    expect(selectInPlace(organ.slice(), 100, 0, 4095)).toBe(want[100]);
    expect(() => selectInPlace(new Float64Array(3), 3, 0, 2)).toThrow();
    expect(() => drawCalibration(new Float64Array(15), new Map(), 4, 3)).toThrow(); // needs N (L + 1) draws
  });

  it("moves to bigints, exactly, when a draw or a partial sum passes 2^53 - 1", () => {
    const big = 2 ** 52; // each draw fits; two of them do not
    // Sample layout: E, then L = 3 draws. Sample 2's second partial sum passes 2^53 - 1.
    const seqs: (number | bigint)[][] = [
      [1, 2, 3, 4, -5, 6, 7, 8, 9, big, big, -1, 5, 6, 7, 8],
      [1, 2, 3, 4, 5, 6, 7, 8, 2n ** 70n, 1, 2, 3, -4, 5, 6, 7], // a bigint root draw in sample 2
      [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, -(2n ** 60n), 13, 14, 15, 16], // a bigint draw inside a sum
      [1, 2, 3, 4, 5, -6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16], // all small: binary64 throughout
    ];
    for (const seq of seqs) {
      // As fillNoise hands them over: a bigint draw is NaN among the numbers and kept by index.
      const values = Float64Array.from(seq, (x) => (typeof x === "bigint" ? NaN : x));
      const big = new Map<number, bigint>();
      seq.forEach((x, i) => {
        if (typeof x === "bigint") big.set(i, x);
      });
      const d = drawCalibration(values, big, 4, 3);
      const { root, sums } = bigDraws(d);
      const want = { root: [] as bigint[], sums: [[], [], []] as bigint[][] };
      for (let s = 0; s < 4; s++) {
        want.root.push(BigInt(seq[4 * s]));
        let sum = 0n;
        for (let l = 0; l < 3; l++) {
          sum += BigInt(seq[4 * s + 1 + l]);
          want.sums[l].push(sum);
        }
      }
      expect(root).toEqual(want.root);
      expect(sums).toEqual(want.sums);
      const abs = (x: bigint): bigint => (x < 0n ? -x : x);
      expect(d.maxRoot).toBe(want.root.map(abs).reduce((x, y) => (x > y ? x : y)));
      expect(d.maxSum).toBe(want.sums.flat().map(abs).reduce((x, y) => (x > y ? x : y)));
      expect(d.rootF === null).toBe(seq !== seqs[3]);
    }
  });
});
