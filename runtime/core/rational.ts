/**
 * Exact rationals on bigint. The ledger stores privacy parameters in this form because binary64
 * addition of budgets drifts (docs/methods.md §1, [C1.4a]/[C1.4b]).
 */
import { BadInputError } from "../errors.js";

type RationalLike = Rational | bigint | number;

function gcd(a: bigint, b: bigint): bigint {
  if (a < 0n) a = -a;
  if (b < 0n) b = -b;
  while (b !== 0n) {
    const r = a % b;
    a = b;
    b = r;
  }
  return a;
}

/** Floor division for bigint (BigInt `/` truncates toward zero). */
export function floorDiv(a: bigint, b: bigint): bigint {
  const q = a / b;
  return (a % b !== 0n && (a < 0n) !== (b < 0n)) ? q - 1n : q;
}

function toBigIntStrict(x: bigint | number, what: string): bigint {
  if (typeof x === "bigint") return x;
  if (!Number.isSafeInteger(x)) {
    throw new BadInputError(`${what} must be a safe integer, got ${String(x)}`);
  }
  return BigInt(x);
}

// Parsing limits: a policy or cell can hand us any string; refuse absurd exponents instead of
// building gigantic bigints.
const MAX_PARSE_LENGTH = 400;
const MAX_EXPONENT = 400;
const DECIMAL_RE = /^([+-]?)(\d*)(?:\.(\d*))?(?:[eE]([+-]?\d+))?$/;
const FRACTION_RE = /^([+-]?\d+)\s*\/\s*(\d+)$/;

/** Exact rational, always in lowest terms with den > 0. Immutable. */
export class Rational {
  readonly num: bigint;
  readonly den: bigint;

  private constructor(num: bigint, den: bigint) {
    this.num = num;
    this.den = den;
  }

  /** Builds n/d in lowest terms. */
  private static make(n: bigint, d: bigint): Rational {
    if (d === 0n) throw new BadInputError("division by zero in an exact rational");
    if (d < 0n) {
      n = -n;
      d = -d;
    }
    const g = gcd(n, d);
    if (g > 1n) {
      n /= g;
      d /= g;
    }
    if (n === 0n) d = 1n;
    return new Rational(n, d);
  }

  static readonly ZERO: Rational = new Rational(0n, 1n);
  static readonly ONE: Rational = new Rational(1n, 1n);

  /** From integers: `Rational.of(3)`, `Rational.of(1n, 3n)`. Number arguments must be safe integers. */
  static of(n: bigint | number, d: bigint | number = 1n): Rational {
    return Rational.make(toBigIntStrict(n, "numerator"), toBigIntStrict(d, "denominator"));
  }

  /** Parses "0.1", "1e-6", "3", "-2.5", ".5", "1/3". Throws BadInputError on anything else. */
  static parse(s: string): Rational {
    if (typeof s !== "string") throw new BadInputError(`expected a number as a string, got ${typeof s}`);
    const t = s.trim();
    if (t.length === 0) throw new BadInputError("expected a number, got an empty string");
    if (t.length > MAX_PARSE_LENGTH) throw new BadInputError(`number string too long (${t.length} characters)`);
    const fm = FRACTION_RE.exec(t);
    if (fm) {
      const d = BigInt(fm[2]);
      if (d === 0n) throw new BadInputError(`zero denominator in "${t}"`);
      return Rational.make(BigInt(fm[1]), d);
    }
    const m = DECIMAL_RE.exec(t);
    if (!m || (m[2] === "" && (m[3] === undefined || m[3] === ""))) {
      throw new BadInputError(`not a finite decimal number: ${JSON.stringify(t.slice(0, 40))}`);
    }
    const [, sign, intPart, frac = "", expStr] = m;
    const exp = expStr === undefined ? 0 : Number(expStr);
    if (!Number.isSafeInteger(exp) || Math.abs(exp) > MAX_EXPONENT) {
      throw new BadInputError(`exponent out of range in ${JSON.stringify(t.slice(0, 40))}`);
    }
    let n = BigInt((intPart || "0") + frac);
    if (sign === "-") n = -n;
    const e = exp - frac.length;
    return e >= 0 ? Rational.make(n * 10n ** BigInt(e), 1n) : Rational.make(n, 10n ** BigInt(-e));
  }

  /** The exact value of a finite binary64 number. */
  static fromNumberExact(x: number): Rational {
    if (!Number.isFinite(x)) throw new BadInputError(`expected a finite number, got ${String(x)}`);
    if (Number.isInteger(x)) return Rational.make(BigInt(x), 1n);
    const view = new DataView(new ArrayBuffer(8));
    view.setFloat64(0, x);
    const hi = view.getUint32(0);
    const lo = view.getUint32(4);
    const negative = hi >>> 31 === 1;
    const biased = (hi >>> 20) & 0x7ff;
    let mant = (BigInt(hi & 0xfffff) << 32n) | BigInt(lo);
    let e: number;
    if (biased === 0) {
      e = -1074; // subnormal
    } else {
      mant |= 1n << 52n;
      e = biased - 1075;
    }
    if (negative) mant = -mant;
    return e >= 0 ? Rational.make(mant << BigInt(e), 1n) : Rational.make(mant, 1n << BigInt(-e));
  }

  /** Short decimal rational (at most `sig` significant digits) that is >= x. Used to round costs up. */
  static fromNumberUp(x: number, sig = 6): Rational {
    return Rational.fromNumberDirected(x, sig, 1);
  }

  /** Short decimal rational (at most `sig` significant digits) that is <= x. */
  static fromNumberDown(x: number, sig = 6): Rational {
    return Rational.fromNumberDirected(x, sig, -1);
  }

  private static fromNumberDirected(x: number, sig: number, dir: 1 | -1): Rational {
    if (!Number.isFinite(x)) throw new BadInputError(`expected a finite number, got ${String(x)}`);
    if (!Number.isInteger(sig) || sig < 1 || sig > 17) throw new BadInputError(`significant digits must be 1..17, got ${sig}`);
    if (x === 0) return Rational.ZERO;
    // toExponential gives the nearest sig-digit decimal; compare exactly and step one unit in the
    // last place when it lies on the wrong side.
    const m = /^(-?)(\d)(?:\.(\d+))?e([+-]\d+)$/.exec(x.toExponential(sig - 1));
    if (!m) throw new Error(`unexpected exponential form for ${x}`);
    const digits = m[2] + (m[3] ?? "");
    let mant = BigInt(digits);
    if (m[1] === "-") mant = -mant;
    const e = Number(m[4]) - (digits.length - 1);
    const build = (mm: bigint): Rational =>
      e >= 0 ? Rational.make(mm * 10n ** BigInt(e), 1n) : Rational.make(mm, 10n ** BigInt(-e));
    const exact = Rational.fromNumberExact(x);
    let r = build(mant);
    const c = r.cmp(exact);
    if (dir === 1 && c < 0) r = build(mant + 1n);
    if (dir === -1 && c > 0) r = build(mant - 1n);
    return r;
  }

  private static lift(o: RationalLike): Rational {
    return o instanceof Rational ? o : Rational.of(o);
  }

  add(o: RationalLike): Rational {
    const r = Rational.lift(o);
    if (r.den === this.den) return Rational.make(this.num + r.num, this.den);
    return Rational.make(this.num * r.den + r.num * this.den, this.den * r.den);
  }
  sub(o: RationalLike): Rational {
    const r = Rational.lift(o);
    if (r.den === this.den) return Rational.make(this.num - r.num, this.den);
    return Rational.make(this.num * r.den - r.num * this.den, this.den * r.den);
  }
  mul(o: RationalLike): Rational {
    const r = Rational.lift(o);
    return Rational.make(this.num * r.num, this.den * r.den);
  }
  div(o: RationalLike): Rational {
    const r = Rational.lift(o);
    if (r.num === 0n) throw new BadInputError("division by zero in an exact rational");
    return Rational.make(this.num * r.den, this.den * r.num);
  }
  neg(): Rational {
    return new Rational(-this.num, this.den);
  }
  abs(): Rational {
    return this.num < 0n ? this.neg() : this;
  }
  cmp(o: RationalLike): -1 | 0 | 1 {
    const r = Rational.lift(o);
    const a = this.num * r.den;
    const b = r.num * this.den;
    return a < b ? -1 : a > b ? 1 : 0;
  }
  lt(o: RationalLike): boolean {
    return this.cmp(o) < 0;
  }
  le(o: RationalLike): boolean {
    return this.cmp(o) <= 0;
  }
  gt(o: RationalLike): boolean {
    return this.cmp(o) > 0;
  }
  ge(o: RationalLike): boolean {
    return this.cmp(o) >= 0;
  }
  eq(o: RationalLike): boolean {
    return this.cmp(o) === 0;
  }
  isZero(): boolean {
    return this.num === 0n;
  }
  isInteger(): boolean {
    return this.den === 1n;
  }
  sign(): -1 | 0 | 1 {
    return this.num < 0n ? -1 : this.num > 0n ? 1 : 0;
  }
  floor(): bigint {
    return floorDiv(this.num, this.den);
  }
  ceil(): bigint {
    return -floorDiv(-this.num, this.den);
  }
  min(o: RationalLike): Rational {
    const r = Rational.lift(o);
    return this.le(r) ? this : r;
  }
  max(o: RationalLike): Rational {
    const r = Rational.lift(o);
    return this.ge(r) ? this : r;
  }

  /** Ledger form: "n" or "n/d". `Rational.parse` reads it back. */
  toString(): string {
    return this.den === 1n ? this.num.toString() : `${this.num}/${this.den}`;
  }

  toJSON(): string {
    return this.toString();
  }

  /**
   * Decimal string: exact when the expansion ends within `maxFractionDigits` digits, otherwise
   * rounded half away from zero to that many digits (trailing zeros dropped). Default 20 digits,
   * enough for any display rounding done later by protocol/format.ts.
   */
  toDecimal(maxFractionDigits = 20): string {
    if (!Number.isInteger(maxFractionDigits) || maxFractionDigits < 0 || maxFractionDigits > 1000) {
      throw new BadInputError(`fraction digits must be 0..1000, got ${maxFractionDigits}`);
    }
    const neg = this.num < 0n;
    const a = neg ? -this.num : this.num;
    const scale = 10n ** BigInt(maxFractionDigits);
    const scaled = a * scale;
    let q = scaled / this.den;
    const rem = scaled % this.den;
    if (rem * 2n >= this.den) q += 1n; // half away from zero (magnitude rounding)
    let s = q.toString();
    if (maxFractionDigits > 0) {
      s = s.padStart(maxFractionDigits + 1, "0");
      const ip = s.slice(0, s.length - maxFractionDigits);
      const fp = s.slice(s.length - maxFractionDigits).replace(/0+$/, "");
      s = fp.length > 0 ? `${ip}.${fp}` : ip;
    }
    return neg && /[1-9]/.test(s) ? `-${s}` : s;
  }

  /** Nearest binary64 (correctly rounded for moderate sizes; display and float planning only). */
  toNumber(): number {
    const n = this.num;
    const d = this.den;
    if (d === 1n) return Number(n);
    const an = n < 0n ? -n : n;
    // Scale so the integer quotient carries >= 64 significant bits, then divide once.
    const shift = Math.max(0, 64 - (bitLength(an) - bitLength(d)));
    const q = (an << BigInt(shift)) / d;
    const v = Number(q) * Math.pow(2, -shift);
    const r = Number.isFinite(v) && v !== 0 ? v : Number(an) / Number(d);
    return n < 0n ? -r : r;
  }
}

/** Number of bits of a non-negative bigint (0 for 0). */
export function bitLength(x: bigint): number {
  if (x <= 0n) return 0;
  if (x < 0x20000000000000n) {
    const v = Number(x);
    return v >= 2 ** 32 ? 32 + (32 - Math.clz32(Math.floor(v / 2 ** 32))) : 32 - Math.clz32(v);
  }
  return x.toString(2).length;
}

/** floor(sqrt(x)) for x >= 0, exact. */
export function isqrt(x: bigint): bigint {
  if (x < 0n) throw new BadInputError("square root of a negative number");
  if (x < 0x20000000000000n) {
    let r = BigInt(Math.floor(Math.sqrt(Number(x))));
    while (r * r > x) r -= 1n;
    while ((r + 1n) * (r + 1n) <= x) r += 1n;
    return r;
  }
  let r = 1n << BigInt((bitLength(x) >> 1) + 1);
  for (;;) {
    const next = (r + x / r) >> 1n;
    if (next >= r) break;
    r = next;
  }
  while (r * r > x) r -= 1n;
  while ((r + 1n) * (r + 1n) <= x) r += 1n;
  return r;
}
