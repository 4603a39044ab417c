/**
 * Rigorous bounds on exp, ln, pi and the standard normal upper tail, in bigint fixed point.
 *
 * A bound at precision p is an integer pair [lo, hi] with lo / 2^p <= f <= hi / 2^p. Every series
 * runs for a number of terms fixed by p and the size of its argument (never "until it looks
 * converged" in binary64), and every rounding goes outward, so a caller that decides a comparison
 * with these bounds is never on the unsafe side (docs/methods.md §4 cautions: half-widths must not be
 * optimistic). Used by the interval, planning and quantile code instead of Math.exp / Math.log.
 */
import { BadInputError } from "../errors.js";
import { Rational, bitLength, floorDiv, isqrt } from "./rational.js";

export interface Bound {
  lo: bigint;
  hi: bigint;
}

/** floor(r * 2^p) */
export function fixedDown(r: Rational, p: number): bigint {
  return floorDiv(r.num << BigInt(p), r.den);
}

/** ceil(r * 2^p) */
export function fixedUp(r: Rational, p: number): bigint {
  return -floorDiv(-(r.num << BigInt(p)), r.den);
}

function ceilShift(x: bigint, s: number): bigint {
  return -((-x) >> BigInt(s));
}

/** Moves a bound from precision q down to p <= q, outward. */
function lower(b: Bound, q: number, p: number): Bound {
  return { lo: b.lo >> BigInt(q - p), hi: ceilShift(b.hi, q - p) };
}

/**
 * exp(-x) for a rational x >= 0. Argument halving (x / 2^s <= 1/2), the alternating Taylor series
 * with its truncation and rounding errors added outward, then s squarings in directed rounding.
 * The working precision carries s + 16 extra bits for the error growth of the squarings.
 */
export function expNeg(x: Rational, p: number): Bound {
  if (x.sign() < 0) throw new BadInputError("expNeg needs a non-negative argument");
  const one = 1n << BigInt(p);
  if (x.isZero()) return { lo: one, hi: one };
  // e^-x < 2^-p once x >= p (e > 2): the whole value is below one unit.
  if (x.ge(p)) return { lo: 0n, hi: 1n };
  const s = bitLength(x.ceil()) + 1; // x / 2^s <= 1/2
  const q = p + s + 16;
  const Q = 1n << BigInt(q);
  const y = floorDiv(x.num << BigInt(q), x.den << BigInt(s)); // floor(y 2^q), within one unit of y 2^q
  // Taylor terms T_k ~ y^k/k! 2^q, each floored; with y <= 1/2 each floor adds < 1 unit and earlier
  // errors shrink, so |sum - e^-y 2^q| <= terms + 2 units + the first omitted term.
  let term = Q;
  let sum = Q;
  let n = 0n;
  for (let k = 1n; term > 0n; k++) {
    term = (term * y) / (k << BigInt(q));
    sum += (k & 1n) === 1n ? -term : term;
    n++;
  }
  const err = 2n * n + 8n; // each floor error stays below 2 units (y <= 1/2 halves earlier ones)
  let lo = sum - err;
  let hi = sum + err;
  if (lo < 0n) lo = 0n;
  if (hi > Q) hi = Q;
  for (let i = 0; i < s; i++) {
    lo = (lo * lo) >> BigInt(q);
    hi = ceilShift(hi * hi, q);
  }
  return lower({ lo, hi }, q, p);
}

/** 2 atanh(u) for a rational u in [0, 1/3], as a bound at precision q (series in u^2, all terms positive). */
function twoAtanh(u: Rational, q: number): Bound {
  const Q = 1n << BigInt(q);
  const uLo = fixedDown(u, q);
  const uHi = fixedUp(u, q);
  // lower: floors of the terms of a lower u; upper: ceilings of a higher u plus the remainder,
  // which is at most the last power / 8 (ratio u^2 <= 1/9, so the tail is <= p_j (1/9)/(1 - 1/9)).
  const u2Lo = (uLo * uLo) >> BigInt(q);
  const u2Hi = ceilShift(uHi * uHi, q);
  let pLo = uLo;
  let pHi = uHi;
  let sLo = 0n;
  let sHi = 0n;
  for (let j = 0n; pHi > 0n; j++) {
    sLo += pLo / (2n * j + 1n);
    sHi += -floorDiv(-pHi, 2n * j + 1n);
    if (pHi <= 1n) {
      sHi += 1n; // remainder of a tail whose powers are below one unit
      break;
    }
    pLo = (pLo * u2Lo) >> BigInt(q);
    pHi = ceilShift(pHi * u2Hi, q);
    if (pHi > Q) throw new Error("internal: atanh series argument out of range");
  }
  return { lo: 2n * sLo, hi: 2n * sHi + 2n };
}

const ln2Cache = new Map<number, Bound>();

function ln2(q: number): Bound {
  let b = ln2Cache.get(q);
  if (b === undefined) {
    b = twoAtanh(Rational.of(1n, 3n), q); // ln 2 = 2 atanh(1/3)
    if (ln2Cache.size > 32) ln2Cache.clear();
    ln2Cache.set(q, b);
  }
  return b;
}

// ln 2 and ln(1 - confidence) recur on every half-width: a few recent results are kept.
const lnCache = new Map<string, Bound>();

/** ln(y) for a rational y > 0: y = m 2^k with m in [1, 2), ln m = 2 atanh((m-1)/(m+1)). */
export function ln(y: Rational, p: number): Bound {
  if (y.sign() <= 0) throw new BadInputError("ln needs a positive argument");
  const key = `${y}@${p}`;
  const hit = lnCache.get(key);
  if (hit !== undefined) return hit;
  const b = lnUncached(y, p);
  if (lnCache.size >= 32) lnCache.delete(lnCache.keys().next().value as string);
  lnCache.set(key, b);
  return b;
}

function lnUncached(y: Rational, p: number): Bound {
  let k = bitLength(y.num) - bitLength(y.den);
  let m = k >= 0 ? y.div(Rational.of(1n << BigInt(k))) : y.mul(Rational.of(1n << BigInt(-k)));
  if (m.lt(1)) {
    m = m.mul(2n);
    k -= 1;
  } else if (m.ge(2)) {
    m = m.div(2n);
    k += 1;
  }
  const q = p + bitLength(BigInt(Math.abs(k))) + 8;
  const a = twoAtanh(m.sub(1).div(m.add(1)), q);
  const l2 = ln2(q);
  const kb = BigInt(k);
  const lo = a.lo + (k >= 0 ? kb * l2.lo : kb * l2.hi);
  const hi = a.hi + (k >= 0 ? kb * l2.hi : kb * l2.lo);
  return lower({ lo, hi }, q, p);
}

/** atan(1/n) for an integer n >= 2: alternating series of exact floors, error <= terms + next term. */
function atanInv(n: bigint, q: number): Bound {
  const Q = 1n << BigInt(q);
  let sum = 0n;
  let count = 0n;
  let pow = n; // n^(2j+1)
  for (let j = 0n; ; j++) {
    const t = Q / ((2n * j + 1n) * pow);
    if (t === 0n) break;
    sum += (j & 1n) === 0n ? t : -t;
    count++;
    pow *= n * n;
  }
  return { lo: sum - count - 1n, hi: sum + count + 1n };
}

const sqrt2piCache = new Map<number, Bound>();

/** sqrt(2 pi), with pi = 16 atan(1/5) - 4 atan(1/239) (Machin 1706). */
export function sqrt2pi(p: number): Bound {
  let b = sqrt2piCache.get(p);
  if (b !== undefined) return b;
  const q = p + 16;
  const a5 = atanInv(5n, q);
  const a239 = atanInv(239n, q);
  const piLo = 16n * a5.lo - 4n * a239.hi;
  const piHi = 16n * a5.hi - 4n * a239.lo;
  // sqrt(2 pi) 2^q = sqrt(2 pi 2^q * 2^q)
  const lo = isqrt(2n * piLo << BigInt(q));
  let hi = isqrt(2n * piHi << BigInt(q));
  if (hi * hi < (2n * piHi) << BigInt(q)) hi += 1n;
  b = lower({ lo, hi }, q, p);
  if (sqrt2piCache.size > 32) sqrt2piCache.clear();
  sqrt2piCache.set(p, b);
  return b;
}

/** Largest z^2 for which the series below is used; beyond it Q(z) <= e^(-z^2/2)/2 is used alone. */
const SERIES_LIMIT = 200;

/**
 * Upper bound on the standard normal upper tail Q(z) = P(Z > z), z = sqrt(w) >= 0, for a rational w.
 * Q(z) = 1/2 - phi(z) sum_n z^(2n+1)/(2n+1)!! (all terms positive, so truncated lower bounds of
 * phi and of the sum give an upper bound of Q; Abramowitz & Stegun 26.2.11), taken together with
 * the Chernoff bound Q(z) <= e^(-z^2/2)/2.
 */
export function normalTailUpper(w: Rational, p: number): bigint {
  if (w.sign() < 0) throw new BadInputError("normal tail needs z^2 >= 0");
  if (w.isZero()) return 1n << BigInt(p - 1);
  const half = w.div(2n);
  const chernoff = ceilShift(expNeg(half, p).hi, 1);
  if (w.gt(SERIES_LIMIT)) return chernoff;
  // phi(z) ~ e^(-w/2) and the sum ~ e^(w/2): a unit of 2^-q in phi costs e^(w/2) 2^-q in their
  // product, which must stay far below Q(z) ~ e^(-w/2): 1.5 w + 40 extra bits (1.5 > 1/ln 2).
  const q = p + Math.ceil(1.5 * w.toNumber()) + 40;
  const Q = 1n << BigInt(q);
  const W = fixedDown(w, q);
  const z = isqrt(fixedDown(w, 2 * q)); // floor(z 2^q)
  let t = z;
  let sum = z;
  for (let n = 1n; t > 0n; n++) {
    t = (t * W) / ((2n * n + 1n) << BigInt(q));
    sum += t;
  }
  const e = expNeg(half, q).lo;
  const phi = (e * Q) / sqrt2pi(q).hi; // lower bound of phi(z) 2^q
  const prod = (phi * sum) >> BigInt(q);
  let upper = (Q >> 1n) - prod;
  if (upper < 0n) upper = 0n;
  const u = ceilShift(upper, q - p);
  return u < chernoff ? u : chernoff;
}
