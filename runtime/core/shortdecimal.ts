/**
 * Short decimals: numbers with 6 significant digits, the form every planned cost takes. They are
 * numbered in increasing order, so a search over costs is an integer bisection over their indices
 * (runtime/core/search.ts), bounded by the bit length of the index range, with no binary64 step.
 */
import { BadInputError } from "../errors.js";
import { Rational, isqrt } from "./rational.js";

const LOW = 100000n; // 10^(digits - 1)
const SPAN = 900000n; // mantissas per decade
/** Decade of index 0: short decimals from 1e-80 upwards have non-negative indices. */
const BASE_EXP = -85;

function pow10(e: number): Rational {
  return e >= 0 ? Rational.of(10n ** BigInt(e)) : Rational.of(1n, 10n ** BigInt(-e));
}

/** The short decimal with index i: (LOW + i mod SPAN) 10^(i div SPAN + BASE_EXP). */
export function shortAt(i: bigint): Rational {
  if (i < 0n) throw new BadInputError("short decimal index must be non-negative");
  return pow10(Number(i / SPAN) + BASE_EXP).mul(LOW + (i % SPAN));
}

/** Mantissa m in [LOW, 10 LOW) and exponent e with m 10^e <= x < (m + 1) 10^e. */
function split(x: Rational): { m: bigint; e: number } {
  if (x.sign() <= 0) throw new BadInputError("short decimals are positive");
  let e = x.num.toString().length - x.den.toString().length - 6;
  for (let i = 0; i < 4; i++) {
    const m = x.div(pow10(e)).floor();
    if (m >= 10n * LOW) e += 1;
    else if (m < LOW) e -= 1;
    else return { m, e };
  }
  throw new Error("internal: short decimal exponent not found");
}

/** Index of the largest short decimal <= x. */
export function shortIndexDown(x: Rational): bigint {
  const { m, e } = split(x);
  if (e < BASE_EXP) throw new BadInputError("number below the short decimal range");
  return BigInt(e - BASE_EXP) * SPAN + (m - LOW);
}

/** Index of the smallest short decimal >= x. */
export function shortIndexUp(x: Rational): bigint {
  const i = shortIndexDown(x);
  return shortAt(i).eq(x) ? i : i + 1n;
}

/** The largest short decimal <= sqrt(r), exactly (isqrt on a scaled integer). */
export function shortSqrtDown(r: Rational): Rational {
  if (r.sign() <= 0) throw new BadInputError("square root of a non-positive number");
  // floor(sqrt(r) 10^k) = isqrt(floor(r 10^(2k))); pick k so that this has 6 digits.
  let k = Math.ceil((r.den.toString().length - r.num.toString().length) / 2) + 6;
  for (let i = 0; i < 6; i++) {
    const s = isqrt(r.mul(pow10(2 * k)).floor());
    if (s >= 10n * LOW) k -= 1;
    else if (s < LOW) k += 1;
    else return Rational.of(s).div(pow10(k));
  }
  throw new Error("internal: short square root not found");
}
