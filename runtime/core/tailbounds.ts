/**
 * Half-widths from rigorous upper bounds on the noise tails, in exact integer arithmetic
 * (runtime/core/bounds.ts). The half-width returned is never below the exact smallest h with
 * P(|noise| > h) <= a, so the stated coverage always holds; how much wider it can be is stated
 * beside each route.
 */
import { BadInputError } from "../errors.js";
import { type Bound, expNeg, fixedDown, ln, normalTailUpper, sqrt2pi } from "./bounds.js";
import { Rational, bitLength, floorDiv, isqrt } from "./rational.js";
import { firstPassing } from "./search.js";

/** The miss probability a = 1 - confidence, exactly (the confidence is a binary64 number). */
export function missOf(confidence: number): Rational {
  return Rational.ONE.sub(Rational.fromNumberExact(confidence));
}

function ceilDiv(n: bigint, d: bigint): bigint {
  return -floorDiv(-n, d);
}

/**
 * Discrete Laplace with scale t: P(|Y| > h) = 2 q^(h+1)/(1+q), q = e^(-1/t) (docs/methods.md §4), so the
 * smallest h is max(0, ceil(t L) - 1) with L = ln(2/((1+q) a)). L is bracketed with enough bits that
 * t (L_hi - L_lo) < 2^-40; when the bracket still straddles an integer (after a second try with
 * more bits) the larger h is returned: at most one grid unit above the exact value.
 */
export function laplaceHalfWidth(t: Rational, a: Rational): bigint {
  if (a.ge(Rational.ONE)) return 0n;
  let c: { lo: bigint; hi: bigint } = { lo: 0n, hi: 0n };
  for (const extra of [72, 200]) {
    const p = bitLength(t.ceil()) + extra;
    const one = 1n << BigInt(p);
    const q = expNeg(Rational.ONE.div(t), p);
    const l2 = ln(Rational.of(2n), p);
    const la = ln(a, p);
    const lq1 = ln(Rational.of(one + q.lo, one), p).lo; // ln(1 + q) >= this
    const lq2 = ln(Rational.of(one + q.hi, one), p).hi; // ln(1 + q) <= this
    const L: Bound = { lo: l2.lo - la.hi - lq2, hi: l2.hi - la.lo - lq1 };
    const den = t.den << BigInt(p);
    c = { lo: ceilDiv(t.num * L.lo, den), hi: ceilDiv(t.num * L.hi, den) };
    if (c.lo === c.hi) break;
  }
  const h = c.hi - 1n;
  return h > 0n ? h : 0n;
}

/** Largest sigma^2 summed term by term (sigma <= 50); above it the integral bounds are tight. */
export const DIRECT_SIGMA2 = 2500n;
const DIRECT_BITS = 192;

interface DirectTable {
  /** upper bounds of sum_{x > h} e^(-x^2/(2 sigma^2)) 2^p for h = 0..M */
  tailHi: bigint[];
  /** lower bound of the normaliser sum_x e^(-x^2/(2 sigma^2)) 2^p */
  normLo: bigint;
}

const tables = new Map<string, DirectTable>();

/**
 * Direct route: terms f(x) = e^(-x^2/(2 sigma^2)) for x = 1..M, M = 12 ceil(sigma) + 2, by the
 * recurrence f(x+1) = f(x) g r^x (g = e^(-1/(2 sigma^2)), r = g^2) in outward rounding; the rest
 * beyond M is bounded by the integral, sum_{x > M} f(x) <= (sigma^2/M) f(M) (Mills ratio). At 192
 * bits the bounds sit within about 2^-150 of the exact sums.
 */
function directTable(s2: Rational): DirectTable {
  const key = s2.toString();
  const hit = tables.get(key);
  if (hit !== undefined) return hit;
  const p = DIRECT_BITS;
  const P = BigInt(p);
  const one = 1n << P;
  const M = Number(12n * (isqrt(s2.ceil()) + 1n) + 2n);
  const g = expNeg(Rational.ONE.div(s2.mul(2n)), p);
  const r = expNeg(Rational.ONE.div(s2), p);
  const fLo: bigint[] = [one];
  const fHi: bigint[] = [one];
  let mLo = g.lo;
  let mHi = g.hi;
  for (let x = 1; x <= M; x++) {
    fLo.push((fLo[x - 1] * mLo) >> P);
    fHi.push(-((-(fHi[x - 1] * mHi)) >> P));
    mLo = (mLo * r.lo) >> P;
    mHi = -((-(mHi * r.hi)) >> P);
  }
  const rest = ceilDiv(fHi[M] * s2.num, s2.den * BigInt(M));
  const tailHi: bigint[] = new Array(M + 1);
  tailHi[M] = rest;
  for (let h = M - 1; h >= 0; h--) tailHi[h] = tailHi[h + 1] + fHi[h + 1];
  let normLo = one;
  for (let x = 1; x <= M; x++) normLo += 2n * fLo[x];
  const t = { tailHi, normLo };
  if (tables.size >= 8) tables.delete(tables.keys().next().value as string);
  tables.set(key, t);
  return t;
}

const INTEGRAL_BITS = 96;

/**
 * Integral route, upper bound of P(|X| > h) for sigma > 50. The normaliser is at least
 * sigma sqrt(2 pi) (Poisson summation: sum_x e^(-x^2/(2 sigma^2)) = sigma sqrt(2 pi) times a theta
 * sum >= 1). Where f is convex (h + 1/2 >= sigma) each term is at most the integral over its unit
 * cell (Hermite–Hadamard), so P(|X| > h) <= 2 Q((h + 1/2)/sigma): relative excess O(1/sigma^2),
 * below 0.2% at sigma = 50. Below sigma the bound f(h+1) + integral from h+1 is used, which adds
 * at most 2/(sigma sqrt(2 pi)) < 0.016 to the tail (only confidences below about 0.68 land here).
 */
function integralTailOk(s2: Rational, h: bigint, a: Rational): boolean {
  const p = INTEGRAL_BITS;
  const c2 = Rational.of((2n * h + 1n) * (2n * h + 1n), 4n);
  let tail: bigint;
  if (c2.ge(s2)) {
    tail = 2n * normalTailUpper(c2.div(s2), p);
  } else {
    const a1 = Rational.of((h + 1n) * (h + 1n));
    const f = expNeg(a1.div(s2.mul(2n)), p).hi;
    const d = (sqrt2pi(p).lo * isqrt(fixedDown(s2, 2 * p))) >> BigInt(p); // <= sigma sqrt(2 pi) 2^p
    tail = 2n * normalTailUpper(a1.div(s2), p) + ceilDiv(2n * f << BigInt(p), d);
  }
  return tail * a.den <= a.num << BigInt(p);
}

/**
 * Smallest h (up to the looseness stated above) with P(|X| > h) <= a for the discrete Gaussian
 * N_Z(0, sigma^2). `hint` is a guess (it only saves evaluations).
 */
export function gaussianHalfWidth(s2: Rational, a: Rational, hint = 0n): bigint {
  if (a.ge(Rational.ONE)) return 0n;
  if (s2.le(DIRECT_SIGMA2)) {
    const t = directTable(s2);
    const M = t.tailHi.length - 1;
    const ok = (h: bigint): boolean => 2n * t.tailHi[Number(h)] * a.den <= a.num * t.normLo;
    const h = firstPassing(ok, 0n, BigInt(M), hint);
    if (h === null) throw new BadInputError("confidence too close to 1 for this noise");
    return h;
  }
  // P(|X| > h) <= 2 e^(-(h+1/2)^2/(2 sigma^2)) is far below any supported a once h > 2^12 sigma.
  const high = (isqrt(s2.ceil()) + 1n) << 12n;
  const h = firstPassing((x) => integralTailOk(s2, x, a), 0n, high, hint);
  if (h === null) throw new BadInputError("confidence too close to 1 for this noise");
  return h;
}
