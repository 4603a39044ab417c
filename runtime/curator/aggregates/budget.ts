/**
 * Turning a privacy ask into noise laws and exact costs, before any data is read.
 *
 * Dataset accounting decides the noise family and the unit of cost:
 *   pure  + { epsilon }  -> discrete Laplace, cost in epsilon (docs/methods.md §4).
 *   zcdp  + { rho }      -> discrete Gaussian, cost in rho (docs/methods.md §5).
 *   zcdp  + { epsilon }  -> discrete Laplace at that epsilon, charged rho = epsilon^2/2: an
 *                           epsilon-DP mechanism is (epsilon^2/2)-zCDP (Bun & Steinke 2016, §2).
 *   pure  + { rho }      -> refused (a rho guarantee is not an epsilon-DP guarantee).
 *   { within, confidence } -> accuracy first (docs/methods.md §11): the smallest parameter whose
 *                           half-width at that confidence is at most `within`; only for releases
 *                           made of one noisy vector (count, sum, histogram, crosstab, grouped).
 * Several parts of one release compose sequentially (costs add, docs/methods.md §1).
 */
import { BadInputError } from "../../errors.js";
import {
  type NoiseLaw,
  type PrivacyParam,
  Rational,
  calibrate,
  costOf,
  halfWidth,
  isqrt,
  planForHalfWidth,
  pureToRho,
  shortAt,
  shortIndexUp,
  shortSqrtDown,
} from "../../core/index.js";
import { PRIVACY_LIMITS } from "../../protocol/limits.js";
import type { MechanismRecord, PrivacyAsk } from "../../protocol/messages.js";
import type { DatasetPolicy } from "../policy.js";

/** One noisy vector, fully determined before the data is read. */
export interface NoisySpec {
  target: string;
  sensitivity: bigint;
  law: NoiseLaw;
  /** Cost in the dataset's accounting unit. */
  cost: Rational;
  /** Value of one unit of the noisy integer. */
  step: Rational;
}

export interface ExponentialSpec {
  target: string;
  /** Unit-level epsilon of the mechanism. */
  epsilon: Rational;
  cost: Rational;
}

export class Allocator {
  readonly unit: "epsilon" | "rho";
  readonly family: NoiseLaw["family"];
  readonly confidence: number;
  private readonly ask: { kind: "epsilon"; total: Rational } | { kind: "rho"; total: Rational } | { kind: "within"; h: Rational };
  readonly notes: string[] = [];

  constructor(dataset: DatasetPolicy, ask: PrivacyAsk, confidence: number) {
    this.confidence = confidence;
    const zcdp = dataset.accounting.mode === "zcdp";
    this.unit = zcdp ? "rho" : "epsilon";
    if ("epsilon" in ask) {
      this.ask = { kind: "epsilon", total: parseAsk(ask.epsilon, "plan.privacy.epsilon", "epsilon", PRIVACY_LIMITS.minEpsilon, PRIVACY_LIMITS.maxEpsilon) };
      this.family = "discrete-laplace";
      if (zcdp) {
        this.notes.push(
          `Asked in epsilon on a zCDP dataset: answered with epsilon-DP (discrete Laplace) noise and charged rho = epsilon^2/2 per part (Bun & Steinke 2016).`,
        );
      }
    } else if ("rho" in ask) {
      if (!zcdp) {
        throw new BadInputError(`plan.privacy.rho: dataset ${dataset.name} uses pure epsilon accounting; ask with epsilon or within`);
      }
      this.ask = { kind: "rho", total: parseAsk(ask.rho, "plan.privacy.rho", "rho", PRIVACY_LIMITS.minRho, PRIVACY_LIMITS.maxRho) };
      this.family = "discrete-gaussian";
    } else {
      const h = Rational.parse(String(ask.within).replace("e+", "e"));
      this.ask = { kind: "within", h };
      this.family = zcdp ? "discrete-gaussian" : "discrete-laplace";
    }
  }

  get accuracyFirst(): boolean {
    return this.ask.kind === "within";
  }

  /** Cost of a noise law in the dataset's accounting unit. */
  private costIn(law: NoiseLaw, sensitivity: bigint): Rational {
    const p = costOf(law, sensitivity);
    if ("epsilon" in p) return this.unit === "rho" ? pureToRho(p.epsilon) : p.epsilon;
    return p.rho;
  }

  /** The parameter share `fraction` of the ask. */
  private share(fraction: Rational): PrivacyParam {
    if (this.ask.kind === "epsilon") return { epsilon: this.ask.total.mul(fraction) };
    if (this.ask.kind === "rho") return { rho: this.ask.total.mul(fraction) };
    throw new Error("share of an accuracy-first ask");
  }

  /** An additive-noise part: `fraction` of the budget, or the accuracy target when accuracy-first. */
  additive(target: string, sensitivity: bigint, fraction: Rational, step: Rational): NoisySpec {
    let law: NoiseLaw;
    if (this.ask.kind === "within") {
      const units = this.ask.h.div(step).floor();
      if (units < 1n) {
        throw new BadInputError(`plan.privacy.within: must be at least one step of the released value (${step.toDecimal(20)})`);
      }
      try {
        law = planForHalfWidth({ family: this.family, sensitivity, halfWidthUnits: units, confidence: this.confidence }).law;
      } catch (e) {
        if (e instanceof BadInputError) throw new BadInputError(`plan.privacy.within: ${e.message}`, { cause: e });
        throw e;
      }
    } else {
      law = calibrate(sensitivity, this.share(fraction));
    }
    return { target, sensitivity, law, cost: this.costIn(law, sensitivity), step };
  }

  /**
   * An exponential-mechanism part (pure epsilon-DP). Under a rho ask the share r becomes
   * epsilon = sqrt(2 r) rounded down, so its charge epsilon^2/2 stays within r.
   */
  exponential(target: string, fraction: Rational): ExponentialSpec {
    if (this.ask.kind === "within") throw new BadInputError("plan.privacy.within: accuracy-first asks do not apply to quantiles; ask with epsilon or rho");
    if (this.ask.kind === "epsilon") {
      const epsilon = this.ask.total.mul(fraction);
      return { target, epsilon, cost: this.unit === "rho" ? pureToRho(epsilon) : epsilon };
    }
    // The largest 6-significant-digit epsilon <= sqrt(2 r), exactly: its charge epsilon^2/2 <= r.
    const r = this.ask.total.mul(fraction);
    const epsilon = shortSqrtDown(r.mul(2n));
    return { target, epsilon, cost: pureToRho(epsilon) };
  }
}

/** An exact positive parameter inside the supported range (runtime/protocol/limits.ts); refused otherwise, before any work. */
function parseAsk(s: string, path: string, what: string, min: string, max: string): Rational {
  let r: Rational;
  try {
    r = Rational.parse(s);
  } catch {
    throw new BadInputError(`${path}: must be an exact positive number such as "0.5" or "1/3"`);
  }
  if (r.sign() <= 0) throw new BadInputError(`${path}: must be positive`);
  if (r.lt(Rational.parse(min))) throw new BadInputError(`${path}: below the smallest ${what} the curator supports (${min})`);
  if (r.gt(Rational.parse(max))) throw new BadInputError(`${path}: above the largest ${what} the curator supports (${max})`);
  return r;
}

export function mechanismRecord(s: NoisySpec): MechanismRecord {
  return {
    target: s.target,
    family: s.law.family,
    scale: s.law.family === "discrete-laplace" ? s.law.scale.toString() : s.law.sigma2.toString(),
    sensitivity: s.sensitivity.toString(),
    step: exactDecimal(s.step),
    cost: s.cost.toString(),
  };
}

/** Exponential mechanism: scale is the unit-level epsilon, sensitivity that of the rank utility, step the candidate grid's. */
export function exponentialRecord(s: ExponentialSpec, sensitivity: bigint, step: Rational): MechanismRecord {
  return {
    target: s.target,
    family: "exponential",
    scale: s.epsilon.toString(),
    sensitivity: sensitivity.toString(),
    step: exactDecimal(step),
    cost: s.cost.toString(),
  };
}

/** Half-width of a part in value units, at the release's confidence (no data needed). */
export function halfWidthValue(s: NoisySpec, confidence: number): Rational {
  return s.step.mul(halfWidth(s.law, confidence));
}

/** Exact decimal when the expansion terminates, else rounded to 12 fraction digits (post-processing). */
export function exactDecimal(r: Rational): string {
  let d = r.den;
  let twos = 0;
  let fives = 0;
  while (d % 2n === 0n) { d /= 2n; twos++; }
  while (d % 5n === 0n) { d /= 5n; fives++; }
  // A denominator 2^a 5^b terminates after exactly max(a, b) fraction digits; asking for just
  // those (not 1000) keeps this off the release path's profile (it was its largest JS item).
  return d === 1n ? r.toDecimal(Math.max(twos, fives)) : r.toDecimal(12);
}

/** Square root of a non-negative rational to `digits` fraction digits, rounded down or up (exact: isqrt). */
export function sqrtRational(r: Rational, digits: number, dir: "down" | "up"): Rational {
  if (r.sign() <= 0) return Rational.ZERO;
  const scale = 10n ** BigInt(2 * digits);
  const x = (r.num * scale) / r.den; // floor(r * 10^(2d))
  let s = isqrt(x);
  if (dir === "up" && (s * s !== x || (r.num * scale) % r.den !== 0n)) s += 1n;
  return Rational.of(s, 10n ** BigInt(digits));
}


/** A positive cost as a decimal of at most 6 significant digits, rounded up (exact when it already is one). */
export function priceUp(r: Rational): string {
  return exactDecimal(shortAt(shortIndexUp(r)));
}

/**
 * The most an accuracy-first ask may spend: its own `atMost`, else the dataset's policy default
 * (`accuracyFirst.atMost`), else none. Both are in the dataset's accounting unit.
 */
export function accuracyFirstBound(d: DatasetPolicy, ask: PrivacyAsk): Rational | null {
  if (!("within" in ask)) return null;
  if (ask.atMost !== undefined) return parseAsk(ask.atMost, "plan.privacy.atMost", d.accounting.mode === "pure" ? "epsilon" : "rho", d.accounting.mode === "pure" ? PRIVACY_LIMITS.minEpsilon : PRIVACY_LIMITS.minRho, d.accounting.mode === "pure" ? PRIVACY_LIMITS.maxEpsilon : PRIVACY_LIMITS.maxRho);
  return d.accuracyFirst?.atMost ?? null;
}

/**
 * Safe accuracy first (docs/methods.md §11, §24): the price of an accuracy-first ask is settled before
 * any data is read, and the ask is answered only under an explicit bound on what it may spend. The
 * refusal states the price so the analyst can ask again; it spends nothing and, since the price
 * follows from the plan and the policy alone, says nothing about the data. Null when the ask may go
 * ahead (not accuracy first, or its price is within its bound).
 */
export function accuracyFirstRefusal(d: DatasetPolicy, ask: PrivacyAsk, confidence: number, cost: Rational, remaining: Rational): BadInputError | null {
  if (!("within" in ask)) return null;
  const bound = accuracyFirstBound(d, ask);
  if (bound !== null && cost.le(bound)) return null;
  const sym = d.accounting.mode === "pure" ? "ε" : "ρ";
  const price = priceUp(cost);
  const conf = `${Number((confidence * 100).toPrecision(12))}%`;
  const head = `accuracy first: an error bar of ±${ask.within} (${conf}) costs ${sym} ${price}`;
  // The remaining budget is named only when it would not cover the price (the notebook adds it anyway).
  const left = remaining.lt(cost) ? `; only ${sym} ${remaining.sign() > 0 ? priceDown(remaining) : "0"} of your cap remain, which is not enough` : "";
  const unitWord = sym === "ε" ? "" : " (in ρ, this dataset's accounting unit)";
  if (bound === null) {
    return new BadInputError(
      `${head}; an accuracy-first ask needs an upper bound on what it may spend, so nothing was spent. ` +
        `To spend it, ask again with { within: ${ask.within}, atMost: ${price} }${unitWord} or a wider error bar${left}.`,
    );
  }
  return new BadInputError(
    `${head}, more than its bound atMost ${sym} ${exactDecimal(bound)}${ask.atMost === undefined ? " (the dataset's policy default)" : ""}, so nothing was spent. ` +
      `Ask again with atMost: ${price} or more${unitWord}, or with a wider error bar${left}.`,
  );
}

/** A non-negative amount as a decimal of at most 6 significant digits, rounded down (so "remain" never overstates). */
function priceDown(r: Rational): string {
  const up = shortAt(shortIndexUp(r));
  if (up.eq(r)) return exactDecimal(r);
  return exactDecimal(shortAt(shortIndexUp(r) - 1n));
}
