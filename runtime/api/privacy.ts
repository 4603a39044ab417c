/**
 * How a cell says how much privacy to spend on one aggregate, and the checks made before anything
 * is sent: a privacy parameter must be a positive finite exact decimal, a confidence must lie in
 * (0, 1). A number is turned into the exact decimal it prints as ("0.1", not 0.1000000000000000055…),
 * which is what the analyst typed.
 */
import { BadInputError } from "../errors.js";
import type { PrivacyAsk } from "../protocol/messages.js";

/**
 * An exact number written as a string: a decimal (`"0.1"`, `"1e-3"`) or a fraction (`"1/3"`).
 * The type lets only number-shaped strings through, so `epsilon: "lots"` is a type error in the
 * cell; the value is still checked when the cell runs (positive, finite, at most 30 digits a part).
 */
export type ExactNumber = `${number}` | `${number}/${number}`;

/** A privacy amount: a number (taken as the decimal it prints as) or an exact string. */
export type PrivacyAmount = number | ExactNumber;

/** Spend a fixed epsilon (pure DP; on a zCDP dataset the curator converts it). */
export interface EpsilonSpend {
  /** Privacy-loss parameter ε > 0, e.g. `0.1` or `"0.1"` (strings are taken exactly, fractions like `"1/3"` too). */
  epsilon: PrivacyAmount;
  /** Confidence of the error bar, in (0, 1); default 0.95. */
  confidence?: number;
}

/** Spend a fixed rho (zero-concentrated DP). */
export interface RhoSpend {
  /** zCDP parameter ρ > 0, e.g. `0.005` or `"1/200"`. */
  rho: PrivacyAmount;
  /** Confidence of the error bar, in (0, 1); default 0.95. */
  confidence?: number;
}

/**
 * Accuracy first: spend what makes the error bar this narrow (count, sum, histogram, crosstab), but
 * never more than `atMost`. Without `atMost` (and without a default in the steward's policy) the
 * ask is refused with its price and nothing is spent; `preview` shows the price too.
 */
export interface AccuracySpend {
  /** Wanted half-width of the error bar, in the units of the result (> 0). */
  within: number;
  /** Confidence the half-width is stated at, in (0, 1); default 0.95. */
  confidence?: number;
  /** The most this ask may spend, in the dataset's accounting unit (ε; ρ on zCDP datasets), e.g. `0.5` or `"0.5"`. */
  atMost?: PrivacyAmount;
}

/** One of: `{ epsilon }`, `{ rho }` or `{ within, confidence?, atMost? }`. */
export type SpendOptions = EpsilonSpend | RhoSpend | AccuracySpend;

export const DEFAULT_CONFIDENCE = 0.95;

const DECIMAL = /^\+?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?$/;
const FRACTION = /^\+?\d+\/\d+$/;

/**
 * The exact decimal string of a positive, finite privacy parameter. Numbers become the shortest
 * decimal that reads back as the same double (JavaScript's own printing), written without an
 * exponent; strings must already be a decimal or a fraction. Zero, negatives, NaN and ∞ are refused.
 */
export function exactPositive(x: unknown, what: string): string {
  if (typeof x === "number") {
    if (Number.isNaN(x)) throw new BadInputError(`${what} is NaN; give a positive number such as 0.1`);
    if (!Number.isFinite(x)) throw new BadInputError(`${what} must be finite, got ${x}`);
    if (x <= 0) throw new BadInputError(`${what} must be greater than 0, got ${x}`);
    return plainDecimal(String(x));
  }
  if (typeof x === "string") {
    const s = x.trim();
    if (FRACTION.test(s)) {
      const [n, d] = s.replace(/^\+/, "").split("/");
      if (/^0+$/.test(d)) throw new BadInputError(`${what} ${JSON.stringify(x)} has a zero denominator`);
      if (/^0+$/.test(n)) throw new BadInputError(`${what} must be greater than 0, got ${JSON.stringify(x)}`);
      return s.replace(/^\+/, "");
    }
    if (!DECIMAL.test(s)) {
      throw new BadInputError(`${what} must be a positive decimal such as "0.1", "1e-3" or a fraction such as "1/3"; got ${JSON.stringify(x)}`);
    }
    if (!/[1-9]/.test(s.replace(/[eE].*$/, ""))) throw new BadInputError(`${what} must be greater than 0, got ${JSON.stringify(x)}`);
    return s.replace(/^\+/, "");
  }
  throw new BadInputError(`${what} must be a number or a decimal string, got ${x === null ? "null" : typeof x}`);
}

/** "1e-7" → "0.0000001", "1.5e+21" → "1500000000000000000000"; plain decimals pass through. */
export function plainDecimal(s: string): string {
  const m = /^(\d*)(?:\.(\d*))?(?:e([+-]?\d+))?$/i.exec(s);
  if (!m) throw new BadInputError(`not a decimal: ${JSON.stringify(s)}`);
  const [, int = "", frac = "", expText] = m;
  if (expText === undefined) return s;
  const exp = Number(expText);
  const all = int + frac;
  const point = int.length + exp; // where the decimal point falls within `all`
  let out: string;
  if (point <= 0) out = `0.${"0".repeat(-point)}${all}`;
  else if (point >= all.length) out = all + "0".repeat(point - all.length);
  else out = `${all.slice(0, point)}.${all.slice(point)}`;
  out = out.replace(/^0+(?=\d)/, "");
  if (out.includes(".")) out = out.replace(/0+$/, "").replace(/\.$/, "");
  return out;
}

/** A confidence level in (0, 1), default 0.95. */
export function checkConfidence(c: unknown, what = "confidence"): number {
  if (c === undefined) return DEFAULT_CONFIDENCE;
  if (typeof c !== "number" || !Number.isFinite(c) || c <= 0 || c >= 1) {
    throw new BadInputError(`${what} must be a number strictly between 0 and 1 (e.g. 0.95), got ${describe(c)}`);
  }
  return c;
}

function describe(v: unknown): string {
  return typeof v === "number" || typeof v === "boolean" ? String(v) : typeof v === "string" ? JSON.stringify(v) : v === null ? "null" : typeof v;
}

/** The plan's privacy ask and confidence from a cell's options, refusing anything malformed. */
export function privacyAsk(opts: unknown, what: string): { privacy: PrivacyAsk; confidence: number } {
  if (opts === null || typeof opts !== "object") {
    throw new BadInputError(`${what}: say how much to spend, e.g. { epsilon: 0.1 }, { rho: 0.005 } or { within: 5 }`);
  }
  const o = opts as Record<string, unknown>;
  const given = ["epsilon", "rho", "within"].filter((k) => o[k] !== undefined);
  if (o.atMost !== undefined && o.within === undefined) {
    throw new BadInputError(`${what}: atMost bounds an accuracy-first ask ({ within, atMost }); with epsilon or rho the spend is already what you give`);
  }
  if (given.length === 0) {
    throw new BadInputError(`${what}: say how much to spend, e.g. { epsilon: 0.1 }, { rho: 0.005 } or { within: 5 }`);
  }
  if (given.length > 1) throw new BadInputError(`${what}: give only one of epsilon, rho and within (got ${given.join(" and ")})`);
  const confidence = checkConfidence(o.confidence, `${what}: confidence`);
  if (o.epsilon !== undefined) return { privacy: { epsilon: exactPositive(o.epsilon, `${what}: epsilon`) }, confidence };
  if (o.rho !== undefined) return { privacy: { rho: exactPositive(o.rho, `${what}: rho`) }, confidence };
  const w = o.within;
  if (typeof w !== "number" || !Number.isFinite(w) || w <= 0) {
    throw new BadInputError(`${what}: within must be a positive finite number (the wanted half-width), got ${describe(w)}`);
  }
  const atMost = o.atMost === undefined ? {} : { atMost: exactPositive(o.atMost, `${what}: atMost`) };
  return { privacy: { within: w, confidence, ...atMost }, confidence };
}
