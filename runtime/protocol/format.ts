/**
 * How released numbers are shown. The kernel's display and the notebook audit both use this, so
 * the audit can check that what a notebook shows is what the curator signed.
 *
 * Everything here works on the exact string, never through a binary float: a value such as
 * "0.30000000000000004" or "1e-7" must show the same on every machine, and the half-width of an
 * error bar is computed by exact subtraction so "23.5" and "24.3" give "± 0.8", not "± 0.8000000000000007".
 */

/** Inputs with an exponent beyond this are refused (they would expand into huge digit strings). */
const MAX_EXPONENT = 400;
/** Non-integers smaller than 10^-SCI_BELOW show in scientific form ("1.5e-9"), larger ones in plain form. */
const SCI_BELOW = 6;

/** A non-negative exact rational num/den (den > 0) with a separate sign. */
interface Exact {
  neg: boolean;
  num: bigint;
  den: bigint;
}

const DECIMAL = /^([+-]?)(?:(\d+)(?:\.(\d*))?|\.(\d+))(?:[eE]([+-]?\d+))?$/;
const FRACTION = /^([+-]?)(\d+)\/(\d+)$/;

function parseExact(value: string, fn: string): Exact {
  const s = value.trim();
  const d = DECIMAL.exec(s);
  if (d) {
    const [, sign, intPart = "", fracA, fracB, expText] = d;
    const frac = fracA ?? fracB ?? "";
    const exp = expText === undefined ? 0 : Number(expText);
    if (!Number.isSafeInteger(exp) || Math.abs(exp) > MAX_EXPONENT) {
      throw new TypeError(`${fn}: exponent out of range in ${JSON.stringify(value)}`);
    }
    // digits × 10^(exp - frac.length)
    const digits = BigInt((intPart + frac).replace(/^0+(?=\d)/, "") || "0");
    const shift = exp - frac.length;
    const num = shift >= 0 ? digits * 10n ** BigInt(shift) : digits;
    const den = shift >= 0 ? 1n : 10n ** BigInt(-shift);
    return { neg: sign === "-" && num !== 0n, num, den };
  }
  const f = FRACTION.exec(s);
  if (f) {
    const [, sign, n, dd] = f;
    const num = BigInt(n);
    const den = BigInt(dd);
    if (den === 0n) throw new TypeError(`${fn}: zero denominator in ${JSON.stringify(value)}`);
    return { neg: sign === "-" && num !== 0n, num, den };
  }
  throw new TypeError(`${fn}: not a decimal string: ${JSON.stringify(value)}`);
}

/** Rounds num/den to the nearest integer, halves away from zero (common practice for display). */
function roundHalfAway(num: bigint, den: bigint): bigint {
  const q = num / den;
  const r = num % den;
  return 2n * r >= den ? q + 1n : q;
}

/** e such that 10^e <= num/den < 10^(e+1), for num > 0. */
function magnitude(num: bigint, den: bigint): number {
  let e = num.toString().length - den.toString().length;
  const ge = (k: number): boolean => (k >= 0 ? num >= den * 10n ** BigInt(k) : num * 10n ** BigInt(-k) >= den);
  while (!ge(e)) e -= 1;
  while (ge(e + 1)) e += 1;
  return e;
}

/** "m × 10^-k" written as a plain decimal with trailing zeros removed. */
function plain(m: bigint, k: number): string {
  if (k <= 0) return (m * 10n ** BigInt(-k)).toString();
  const s = m.toString().padStart(k + 1, "0");
  const int = s.slice(0, s.length - k);
  const frac = s.slice(s.length - k).replace(/0+$/, "");
  return frac === "" ? int : `${int}.${frac}`;
}

function formatExact(x: Exact, sig: number): string {
  if (x.num === 0n) return "0";
  const sign = x.neg ? "-" : "";
  // Integers keep all their digits: a count of 12345678 is shown as such, not as 1.23457e7.
  if (x.num % x.den === 0n) return sign + (x.num / x.den).toString();
  let e = magnitude(x.num, x.den);
  // Many integer digits already: round to a whole number rather than drop integer digits.
  if (e >= sig - 1) return sign + roundHalfAway(x.num, x.den).toString();
  const k = sig - 1 - e; // fraction digits that leave `sig` significant digits
  let fd = k;
  let m = k >= 0 ? roundHalfAway(x.num * 10n ** BigInt(k), x.den) : roundHalfAway(x.num, x.den * 10n ** BigInt(-k));
  if (m === 10n ** BigInt(sig)) {
    // 9.999996 rounds up to 10.0000: one more integer digit, one fewer fraction digit.
    e += 1;
    m /= 10n;
    fd -= 1;
  }
  if (e < -SCI_BELOW) {
    const mant = plain(m, sig - 1);
    return `${sign}${mant}e${e}`;
  }
  return sign + plain(m, fd);
}

function checkSig(sig: number, fn: string): void {
  if (!Number.isInteger(sig) || sig < 1 || sig > 30) throw new RangeError(`${fn}: sig must be an integer in [1, 30]`);
}

/**
 * Shows an exact decimal string with at most `sig` significant digits (integers keep all digits).
 * Accepts plain ("-12.50"), exponent ("1e-6", "2.5E+3") and fraction ("1/3") forms; throws a
 * TypeError on anything else. Rounds halves away from zero; "-0.0" shows as "0".
 */
export function formatDecimal(value: string | null, sig = 6): string {
  if (value === null) return "n/a";
  checkSig(sig, "formatDecimal");
  return formatExact(parseExact(value, "formatDecimal"), sig);
}

function sub(a: Exact, b: Exact): Exact {
  const an = a.neg ? -a.num : a.num;
  const bn = b.neg ? -b.num : b.num;
  const num = an * b.den - bn * a.den;
  return { neg: num < 0n, num: num < 0n ? -num : num, den: a.den * b.den };
}

function same(a: Exact, b: Exact): boolean {
  return a.neg === b.neg && a.num * b.den === b.num * a.den;
}

/** Thousands separators on the integer part of a plain decimal ("-1234567.25" → "-1,234,567.25"). */
export function groupThousands(plainText: string): string {
  if (/e/i.test(plainText)) return plainText;
  const m = /^(-?)(\d+)(\.\d+)?$/.exec(plainText);
  if (m === null) return plainText;
  return `${m[1]}${m[2].replace(/\B(?=(\d{3})+(?!\d))/g, ",")}${m[3] ?? ""}`;
}

// ---- The display rule for a figure with an error bar (docs/methods.md §23) ----

/** Below this decimal place the three numbers of a figure are written in scientific form. */
const SCI_PLACE = -9;

const signed = (x: Exact): bigint => (x.neg ? -x.num : x.num);
const pow10 = (k: number): bigint => 10n ** BigInt(k);

function floorDiv(a: bigint, b: bigint): bigint {
  const q = a / b;
  return a % b !== 0n && a < 0n !== b < 0n ? q - 1n : q;
}

function ceilDiv(a: bigint, b: bigint): bigint {
  return -floorDiv(-a, b);
}

/** x / 10^p as an exact signed fraction (num, den > 0). */
function atPlace(x: Exact, p: number): [bigint, bigint] {
  return p >= 0 ? [signed(x), x.den * pow10(p)] : [signed(x) * pow10(-p), x.den];
}

/** Rounds a signed fraction to the nearest integer, halves away from zero. */
function roundSigned(num: bigint, den: bigint): bigint {
  const r = roundHalfAway(num < 0n ? -num : num, den);
  return num < 0n ? -r : r;
}

/** `m × 10^p` written with exactly the digits down to place p (trailing zeros kept: they are significant). */
function writeAt(m: bigint, p: number): string {
  // Zero keeps its decimal places ("0.00 ± 0.50"); it never has a sign.
  if (m === 0n) return p < 0 && p >= SCI_PLACE ? `0.${"0".repeat(-p)}` : "0";
  const sign = m < 0n ? "-" : "";
  const digits = (m < 0n ? -m : m).toString();
  if (p < SCI_PLACE) {
    const e = digits.length - 1 + p;
    return `${sign}${digits[0]}${digits.length > 1 ? `.${digits.slice(1)}` : ""}e${e}`;
  }
  if (p >= 0) return groupThousands(`${sign}${digits}${"0".repeat(p)}`);
  const padded = digits.padStart(-p + 1, "0");
  return groupThousands(`${sign}${padded.slice(0, padded.length + p)}.${padded.slice(padded.length + p)}`);
}

const isInteger = (x: Exact): boolean => x.num % x.den === 0n;

/** The two parts of a shown figure: the value, and its error bar ("± 480" or "[22.6, 25.9]") or null. */
export interface FigureParts {
  value: string;
  bar: string | null;
}

/**
 * How a released value and its interval are shown (docs/methods.md §23). With a positive
 * half-width w (the exact half-width of a symmetric interval, half the width of another one):
 * - the decimal place p is that of w's second significant digit, and never below the units when
 *   the value and both ends are integers (counts stay whole numbers);
 * - the value is rounded to place p, halves away from zero;
 * - a symmetric interval shows "value ± W", W being w rounded up at place p (never narrower than
 *   the exact half-width); another interval shows "value [L, H]" with L rounded down and H
 *   rounded up at place p (the printed ends hold the exact ones);
 * - the integer parts carry thousands separators ("177,760 ± 480"), and below place 10^-9 each
 *   number is written in scientific form ("5.2e-14").
 * A zero half-width (or a value without interval) leaves nothing to round to: the value shows at
 * 6 significant digits, integers in full. The exact figures stay in the release and its receipt.
 */
export function figureParts(value: string | null, low: string | null, high: string | null): FigureParts {
  if (value === null) return { value: "n/a", bar: null };
  const v = parseExact(value, "formatWithError");
  if (low === null || high === null) return { value: groupThousands(formatExact(v, 6)), bar: null };
  const lo = parseExact(low, "formatWithError");
  const hi = parseExact(high, "formatWithError");
  const below = sub(v, lo);
  const above = sub(hi, v);
  const symmetric = same(below, above) && !above.neg;
  // The half-width that sets the decimal place: exact for ±, half the width otherwise.
  const width = sub(hi, lo);
  const w: Exact = symmetric ? above : { neg: false, num: width.num, den: width.den * 2n };
  const six = (x: Exact): string => groupThousands(formatExact(x, 6));
  if (w.num === 0n) {
    return symmetric ? { value: six(v), bar: "± 0" } : { value: six(v), bar: `[${six(lo)}, ${six(hi)}]` };
  }
  let p = magnitude(w.num, w.den) - 1;
  if (p < 0 && isInteger(v) && isInteger(lo) && isInteger(hi)) p = 0;
  const [vn, vd] = atPlace(v, p);
  const V = roundSigned(vn, vd);
  if (symmetric) {
    // W·10^p >= w: the printed half-width is never narrower than the exact one.
    const [wn, wd] = atPlace(w, p);
    return { value: writeAt(V, p), bar: `± ${writeAt(ceilDiv(wn, wd), p)}` };
  }
  const [ln, ld] = atPlace(lo, p);
  const [hn, hd] = atPlace(hi, p);
  return { value: writeAt(V, p), bar: `[${writeAt(floorDiv(ln, ld), p)}, ${writeAt(ceilDiv(hn, hd), p)}]` };
}

/**
 * A released value with its error bar as every view shows it and the notebook audit reads it:
 * "177,760 ± 480", "24.3 [22.6, 25.9]", or the value alone; "n/a" for a missing value. The rule
 * is figureParts's (docs/methods.md §23). Throws a TypeError on a string that is not a number.
 */
export function formatWithError(value: string | null, low: string | null, high: string | null): string {
  const f = figureParts(value, low, high);
  return f.bar === null ? f.value : `${f.value} ${f.bar}`;
}

/**
 * A privacy amount (a cost, a total, what is left of a cap) as a decimal of at most `sig`
 * significant digits, never as a fraction, rounded in one direction: "up" for what an ask costs
 * or what was spent, "down" for what is left. A refusal then never reads as if the ask fitted
 * (the cost shown is at least the true cost, which is more than what is left, which is at least
 * the amount shown as left). Integers keep all their digits.
 */
export function formatAmount(value: string, direction: "up" | "down", sig = 6): string {
  checkSig(sig, "formatAmount");
  const x = parseExact(value, "formatAmount");
  if (x.num === 0n) return "0";
  if (x.num % x.den === 0n) return formatExact(x, sig);
  const e = magnitude(x.num, x.den);
  const k = sig - 1 - e; // fraction digits that keep `sig` significant digits
  const [n, d] = atPlace(x, -k); // x · 10^k
  const m = direction === "up" ? ceilDiv(n, d) : floorDiv(n, d);
  if (m === 0n) return "0";
  // Written back through the exact formatter: m · 10^-k has at most sig (+1 on a carry) digits.
  return formatExact(parseExact(`${m}e${-k}`, "formatAmount"), sig + 1);
}

/**
 * An expected half-width alone (a preview's "± 240"), by the figure rule (docs/methods.md §23):
 * rounded up to two significant digits, never below the units for a whole number, with separators.
 */
export function formatHalfWidth(w: string): string {
  const x = parseExact(w, "formatHalfWidth");
  if (x.num === 0n) return "0";
  const neg = x.neg ? w.trim().slice(1) : `-${w.trim()}`;
  const pos = x.neg ? neg : w.trim();
  return (figureParts("0", x.neg ? w : neg, pos).bar ?? "").replace(/^± /, "");
}
