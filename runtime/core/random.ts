/**
 * Randomness for the noise path. One interface (ByteSource); production reads the operating
 * system's CSPRNG through node:crypto, tests inject a deterministic keystream. Bits turns bytes into
 * exact uniform integers and Bernoulli trials by rejection sampling (the RandBits/UniformInt/
 * Bernoulli primitives of Canonne, Kamath & Steinke 2020, restated in docs/methods.md §5). No
 * floating-point value ever influences a draw: the only numbers here are integers below 2^53.
 */
import { createCipheriv, createHash, randomFillSync } from "node:crypto";
import { BadInputError } from "../errors.js";
import { bitLength } from "./rational.js";

export interface ByteSource {
  fill(buf: Uint8Array): void;
}

/** The production source: node:crypto's CSPRNG. Bits buffers it in 16 KiB blocks. */
export const cryptoBytes: ByteSource = {
  fill(buf: Uint8Array): void {
    randomFillSync(buf);
  },
};

/**
 * Deterministic bytes for tests only: the AES-256-CTR keystream under the key SHA-256(seed), with a
 * zero IV. Different seeds give independent-looking streams; the same seed gives the same stream.
 */
export function seededBytes(seed: string | number): ByteSource {
  const key = createHash("sha256").update(`hush-test-seed:${String(seed)}`).digest();
  const cipher = createCipheriv("aes-256-ctr", key, Buffer.alloc(16));
  let zeros = Buffer.alloc(0);
  return {
    fill(buf: Uint8Array): void {
      if (zeros.length < buf.length) zeros = Buffer.alloc(buf.length);
      const out = cipher.update(zeros.subarray(0, buf.length));
      buf.set(out);
    },
  };
}

const BUFFER_BYTES = 16384;
const TWO32 = 4294967296;
/** Largest modulus served by the number fast path of uniformSmall. */
export const MAX_SMALL = 2 ** 48;

/** Exact uniform integers and Bernoulli trials from a byte source. Not shared across threads. */
export class Bits {
  private readonly src: ByteSource;
  private readonly bytes: Uint8Array;
  private readonly words: Uint32Array;
  private pos: number; // next unread word in `words`
  private word = 0; // cached bits, low bits first
  private avail = 0; // how many bits of `word` are unread

  constructor(src: ByteSource = cryptoBytes) {
    this.src = src;
    this.bytes = new Uint8Array(BUFFER_BYTES);
    this.words = new Uint32Array(this.bytes.buffer);
    this.pos = this.words.length; // empty: refill on first use
  }

  private nextWord(): number {
    if (this.pos === this.words.length) {
      this.src.fill(this.bytes);
      this.pos = 0;
    }
    return this.words[this.pos++];
  }

  /** k uniform bits as an unsigned integer, 1 <= k <= 32. */
  bits(k: number): number {
    const avail = this.avail;
    if (k <= avail) {
      const w = this.word;
      if (k === 32) {
        this.word = 0;
        this.avail = 0;
        return w >>> 0;
      }
      this.word = w >>> k;
      this.avail = avail - k;
      return (w & ((1 << k) - 1)) >>> 0;
    }
    // Use up the cached bits, then take the rest from a fresh word.
    const low = avail === 0 ? 0 : this.word & ((1 << avail) - 1);
    const need = k - avail;
    const fresh = this.nextWord();
    let high: number;
    if (need === 32) {
      high = fresh;
      this.word = 0;
      this.avail = 0;
    } else {
      high = fresh & ((1 << need) - 1);
      this.word = fresh >>> need;
      this.avail = 32 - need;
    }
    // low has `avail` bits, high has `need` bits; combine without 32-bit overflow.
    return avail === 0 ? high >>> 0 : (low >>> 0) + (high >>> 0) * (1 << avail >>> 0);
  }

  /** One fair bit. */
  bit(): number {
    if (this.avail === 0) {
      this.word = this.nextWord();
      this.avail = 32;
    }
    const b = this.word & 1;
    this.word >>>= 1;
    this.avail--;
    return b;
  }

  /** Uniform in [0, m) for an integer 1 <= m <= 2^48, by rejection on bitLength(m-1) bits. */
  uniformSmall(m: number): number {
    if (m <= TWO32) {
      if (m === 1) return 0;
      if (!(m > 1) || m !== Math.floor(m)) throw new BadInputError(`uniform range must be a positive integer, got ${m}`);
      const k = 32 - Math.clz32(m - 1);
      if (k < 32) {
        // Inlined fast case of bits(k): enough cached bits (most calls, since k is usually small).
        const mask = (1 << k) - 1;
        for (;;) {
          let r: number;
          if (k <= this.avail) {
            const w = this.word;
            r = w & mask;
            this.word = w >>> k;
            this.avail -= k;
          } else {
            r = this.bits(k);
          }
          if (r < m) return r;
        }
      }
      for (;;) {
        const r = this.bits(k);
        if (r < m) return r;
      }
    }
    if (!(m <= MAX_SMALL) || m !== Math.floor(m)) {
      throw new BadInputError(`uniformSmall range must be an integer <= 2^48, got ${m}`);
    }
    const kHigh = 32 - Math.clz32(Math.floor((m - 1) / TWO32));
    for (;;) {
      const r = this.bits(kHigh) * TWO32 + this.bits(32);
      if (r < m) return r;
    }
  }

  /** Uniform in [0, m) for a bigint m >= 1, by rejection (CKS 2020 UniformInt). */
  uniformInt(m: bigint): bigint {
    if (m < 1n) throw new BadInputError(`uniform range must be at least 1, got ${m}`);
    if (m <= 281474976710656n) return BigInt(this.uniformSmall(Number(m)));
    const k = bitLength(m - 1n);
    const fullWords = Math.floor(k / 32);
    const topBits = k - 32 * fullWords;
    for (;;) {
      let r = topBits > 0 ? BigInt(this.bits(topBits)) : 0n;
      for (let i = 0; i < fullWords; i++) r = (r << 32n) | BigInt(this.bits(32));
      if (r < m) return r;
    }
  }

  /** Bernoulli(num/den) for 0 <= num <= den, den >= 1: UniformInt(den) < num. */
  bernoulli(num: bigint, den: bigint): boolean {
    if (den < 1n || num < 0n || num > den) {
      throw new BadInputError(`Bernoulli probability must be num/den in [0, 1], got ${num}/${den}`);
    }
    if (num === den) return true;
    if (num === 0n) return false;
    return this.uniformInt(den) < num;
  }

  /** Bernoulli(num/den) on numbers: exact for integers 0 <= num <= den <= 2^48. */
  bernoulliSmall(num: number, den: number): boolean {
    if (num >= den) return true;
    if (num <= 0) return false;
    return this.uniformSmall(den) < num;
  }
}
