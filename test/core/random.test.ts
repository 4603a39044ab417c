import { describe, expect, it } from "vitest";
import { BadInputError } from "../../runtime/errors.js";
import { Bits, cryptoBytes, seededBytes } from "../../runtime/core/random.js";
import { chiSquarePValue } from "./stats.js";

function chiUniform(draw: () => number, m: number, n: number): number {
  const counts = new Array<number>(m).fill(0);
  for (let i = 0; i < n; i++) counts[draw()]++;
  const e = n / m;
  let stat = 0;
  for (const c of counts) stat += ((c - e) * (c - e)) / e;
  return chiSquarePValue(stat, m - 1);
}

describe("byte sources and Bits", () => {
  it("seeded sources are deterministic and seed-dependent", () => {
    const a = new Uint8Array(64);
    const b = new Uint8Array(64);
    const c = new Uint8Array(64);
    seededBytes("x").fill(a);
    seededBytes("x").fill(b);
    seededBytes("y").fill(c);
    expect(Buffer.from(a).equals(Buffer.from(b))).toBe(true);
    expect(Buffer.from(a).equals(Buffer.from(c))).toBe(false);
  });

  it("the crypto source fills buffers", () => {
    const a = new Uint8Array(32);
    cryptoBytes.fill(a);
    expect(a.some((x) => x !== 0)).toBe(true);
  });

  // Chi-square uniformity at significance 0.001 with fixed seeds (common practice for RNG checks).
  it("uniformSmall is uniform for awkward moduli", () => {
    const bits = new Bits(seededBytes(1));
    for (const m of [2, 3, 7, 10, 100, 1000]) expect(chiUniform(() => bits.uniformSmall(m), m, 50_000)).toBeGreaterThan(0.001);
  });

  it("uniformSmall above 2^32 and uniformInt above 2^48 stay in range and balanced", () => {
    const bits = new Bits(seededBytes(2));
    const m = 3 * 2 ** 40 + 5;
    expect(chiUniform(() => Math.floor((bits.uniformSmall(m) / m) * 16), 16, 32_000)).toBeGreaterThan(0.001);
    const big = 3n ** 70n;
    expect(
      chiUniform(() => {
        const r = bits.uniformInt(big);
        expect(r >= 0n && r < big).toBe(true);
        return Number((r * 16n) / big);
      }, 16, 16_000),
    ).toBeGreaterThan(0.001);
  });

  it("bits(k) covers every width and the word boundary", () => {
    const bits = new Bits(seededBytes(3));
    for (let round = 0; round < 200; round++) {
      for (let k = 1; k <= 32; k++) {
        const v = bits.bits(k);
        expect(v >= 0 && v < 2 ** k && Number.isInteger(v)).toBe(true);
      }
    }
    // fair bit
    let ones = 0;
    for (let i = 0; i < 100_000; i++) ones += bits.bit();
    expect(Math.abs(ones - 50_000)).toBeLessThan(5 * Math.sqrt(25_000));
  });

  it("bernoulli(num/den) has the right mean", () => {
    const bits = new Bits(seededBytes(4));
    let s = 0;
    const n = 100_000;
    for (let i = 0; i < n; i++) if (bits.bernoulli(3n, 7n)) s++;
    const p = 3 / 7;
    expect(Math.abs(s / n - p)).toBeLessThan(5 * Math.sqrt((p * (1 - p)) / n));
    expect(bits.bernoulli(0n, 5n)).toBe(false);
    expect(bits.bernoulli(5n, 5n)).toBe(true);
  });

  it("bad ranges throw typed errors", () => {
    const bits = new Bits(seededBytes(5));
    expect(() => bits.uniformInt(0n)).toThrow(BadInputError);
    expect(() => bits.uniformSmall(0)).toThrow(BadInputError);
    expect(() => bits.uniformSmall(2.5)).toThrow(BadInputError);
    expect(() => bits.uniformSmall(2 ** 49)).toThrow(BadInputError);
    expect(() => bits.uniformSmall(NaN)).toThrow(BadInputError);
    expect(() => bits.bernoulli(4n, 3n)).toThrow(BadInputError);
    expect(() => bits.bernoulli(-1n, 3n)).toThrow(BadInputError);
  });
});
