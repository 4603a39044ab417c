/**
 * A small seeded generator for the invented demo data only. It is NOT a noise source: release noise
 * comes from the CSPRNG byte source in runtime/core. Demo data must be reproducible byte for byte,
 * which a seeded generator gives and a CSPRNG does not.
 *
 * xoshiro128** (Blackman and Vigna, "Scrambled linear pseudorandom number generators", 2021), seeded
 * through splitmix32 so that any 32-bit seed gives a well-mixed, non-zero state.
 */
export class DemoRandom {
  private a: number;
  private b: number;
  private c: number;
  private d: number;

  constructor(seed: number) {
    let s = seed >>> 0;
    const next = (): number => {
      // splitmix32 (a 32-bit variant of Steele, Lea and Flood's SplitMix): spreads the seed over the state.
      s = (s + 0x9e3779b9) | 0;
      let z = s;
      z = Math.imul(z ^ (z >>> 16), 0x85ebca6b);
      z = Math.imul(z ^ (z >>> 13), 0xc2b2ae35);
      return (z ^ (z >>> 16)) >>> 0;
    };
    this.a = next();
    this.b = next();
    this.c = next();
    this.d = next();
    if ((this.a | this.b | this.c | this.d) === 0) this.a = 1;
  }

  /** Next 32-bit unsigned integer. */
  nextU32(): number {
    const result = Math.imul(rotl(Math.imul(this.b, 5), 7), 9) >>> 0;
    const t = this.b << 9;
    this.c ^= this.a;
    this.d ^= this.b;
    this.b ^= this.c;
    this.a ^= this.d;
    this.c ^= t;
    this.d = rotl(this.d, 11);
    return result;
  }

  /** Uniform in [0, 1) with 32 bits of resolution. */
  uniform(): number {
    return this.nextU32() / 4294967296;
  }

  /** Uniform integer in [lo, hi] (inclusive); the tiny modulo bias does not matter for demo data. */
  int(lo: number, hi: number): number {
    return lo + Math.floor(this.uniform() * (hi - lo + 1));
  }

  /** Standard normal by Box-Muller (one of the pair is dropped: simplicity over speed). */
  normal(): number {
    const u = 1 - this.uniform(); // (0, 1]: keeps log finite
    const v = this.uniform();
    return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * v);
  }

  /** Index drawn with probability proportional to `weights`. */
  pick(weights: readonly number[]): number {
    let total = 0;
    for (const w of weights) total += w;
    let x = this.uniform() * total;
    for (let i = 0; i < weights.length; i++) {
      x -= weights[i];
      if (x < 0) return i;
    }
    return weights.length - 1;
  }

  /** Gamma(shape, 1) by Marsaglia and Tsang (2000), shape >= 1 here. */
  gamma(shape: number): number {
    const d = shape - 1 / 3;
    const c = 1 / Math.sqrt(9 * d);
    for (;;) {
      let x: number;
      let v: number;
      do {
        x = this.normal();
        v = 1 + c * x;
      } while (v <= 0);
      v = v * v * v;
      const u = this.uniform();
      if (Math.log(u) < 0.5 * x * x + d - d * v + d * Math.log(v)) return d * v;
    }
  }
}

function rotl(x: number, k: number): number {
  return (x << k) | (x >>> (32 - k));
}
