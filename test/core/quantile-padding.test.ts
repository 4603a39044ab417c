/**
 * The exponential-mechanism draw is padded to a public number of trials (runtime/core/quantile.ts
 * paddedTrials), so the randomness it consumes, and with it its time, does not follow the data:
 * no matching row (every candidate tied, the first proposal accepted) and many rows near the
 * target (most proposals rejected) read the same number of random bytes, within the small
 * variation of the rejection step of the proposals' UniformInt.
 */
import { describe, expect, it } from "vitest";
import { Bits, Rational, exponentialQuantile, seededBytes, type ByteSource } from "../../runtime/core/index.js";
import { MAX_PADDED_TRIALS, dyadicBase, paddedTrials, trialPath } from "../../runtime/core/quantile.js";

function counting(seed: string): { src: ByteSource; bytes: () => number } {
  const inner = seededBytes(seed);
  let n = 0;
  return {
    src: { fill: (buf) => { n += buf.length; inner.fill(buf); } },
    bytes: () => n,
  };
}

/** Bytes read by one draw (Bits reads in 16 KiB blocks, so this counts blocks). */
function bytesFor(countsBelow: bigint[], n: bigint, epsilon: string, seed: string): number {
  const c = counting(seed);
  exponentialQuantile({ countsBelow, n, p: Rational.of(1n, 2n), epsilon: Rational.parse(epsilon), bits: new Bits(c.src) });
  return c.bytes();
}

const M = 2001;
const NONE = Array<bigint>(M).fill(0n);
const N = 30_000n;
const SPREAD = Array.from({ length: M }, (_, j) => (BigInt(j) * N) / BigInt(M));

describe("quantile draw padding", () => {
  it("reads the same randomness with no rows as with many rows near the target", () => {
    for (const epsilon of ["0.02", "0.2"]) {
      const none = bytesFor(NONE, 0n, epsilon, `none-${epsilon}`);
      const spread = bytesFor(SPREAD, N, epsilon, `spread-${epsilon}`);
      // Unpadded, the no-row draw reads one 16 KiB block (a single accepted proposal).
      expect(none).toBeGreaterThan(4 * 16384);
      // Within one block and 5%: the proposals' rejection step varies a little.
      expect(Math.abs(none - spread)).toBeLessThanOrEqual(16384 + 0.05 * spread);
    }
  });

  it("on the power path (beta near 1) reads the same randomness with no rows as with many rows near the target", () => {
    // epsilon 2e-5 at p = 1/2: about 10^5 trials a proposal, so the draw compares with bounds on
    // beta^c (quantile.ts drawByPowers) and pads its proposals to 2m.
    expect(trialPath(M, dyadicBase(Rational.parse("0.00002"), 1n, 20), 1n << 20n)).toBe(false);
    for (const seed of ["a", "b"]) {
      const none = bytesFor(NONE, 0n, "0.00002", `powers-none-${seed}`);
      const spread = bytesFor(SPREAD, N, "0.00002", `powers-spread-${seed}`);
      // 2m proposals of 128 + 11 bits (and the proposals' rejection step): about 70 KB.
      expect(none).toBeGreaterThan(4 * 16384);
      expect(Math.abs(none - spread)).toBeLessThanOrEqual(16384);
    }
  });

  it("pads to twice the public bound m (1/(1 - beta) + 1), capped", () => {
    const one = 1n << 20n;
    expect(paddedTrials(10, one, one)).toBe(0); // beta = 1: one uniform proposal, nothing to hide
    expect(paddedTrials(10, one / 2n, one)).toBe(2 * 10 * (2 + 1));
    expect(paddedTrials(2001, one - 1n, one)).toBe(MAX_PADDED_TRIALS);
  });
});
