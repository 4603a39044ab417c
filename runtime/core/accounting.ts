/**
 * Privacy accounting (docs/methods.md §1–2). Costs are exact rationals. Pure epsilon composes by
 * addition; zCDP rho composes by addition and its cap is given by the steward as (epsilon, delta),
 * converted once to a rho cap with the Canonne, Kamath & Steinke (2020) bound. Converted values are
 * rounded in the safe direction before they are stored or shown: a rho cap down, an epsilon up.
 * Spend itself is kept by the curator's ledger (runtime/curator/ledger.ts), not here.
 */
import { BadInputError } from "../errors.js";
import { Rational } from "./rational.js";

export type AccountingMode = "pure" | "zcdp";

/** Throws BadInputError unless cost is an exact rational > 0. */
export function checkCost(cost: Rational): void {
  if (!(cost instanceof Rational)) throw new BadInputError("a privacy cost must be an exact rational (parse the decimal string)");
  if (cost.sign() <= 0) throw new BadInputError(`a privacy cost must be positive, got ${cost}`);
}

function checkDelta(delta: Rational): number {
  if (!(delta instanceof Rational) || delta.sign() <= 0 || delta.ge(Rational.ONE)) {
    throw new BadInputError(`delta must lie strictly between 0 and 1, got ${String(delta)}`);
  }
  return delta.toNumber();
}

/** Pure epsilon-DP implies (epsilon^2/2)-zCDP (Bun & Steinke 2016; [C2.1a], [C2.1b]). */
export function pureToRho(epsilon: Rational): Rational {
  checkCost(epsilon);
  return epsilon.mul(epsilon).div(2n);
}

/** Sequential composition: costs add (pure epsilon and zCDP rho alike; docs/methods.md §1, [C1.1]). */
export function composeSequential(costs: Rational[]): Rational {
  let total = Rational.ZERO;
  for (const c of costs) {
    checkCost(c);
    total = total.add(c);
  }
  return total;
}

/** Parallel composition over a unit-level partition: the maximum (McSherry 2009; [C1.3]). */
export function composeParallel(costs: Rational[]): Rational {
  let best = Rational.ZERO;
  for (const c of costs) {
    checkCost(c);
    best = best.max(c);
  }
  return best;
}

/** Bun & Steinke 2016: rho + 2 sqrt(rho ln(1/delta)) ([C2.2*]). */
export function epsilonBS(rho: number, delta: number): number {
  return rho + 2 * Math.sqrt(rho * Math.log(1 / delta));
}

/** CKS 2020 objective at order alpha > 1 (docs/methods.md §2). */
export function epsilonAtOrder(alpha: number, rho: number, delta: number): number {
  return alpha * rho + (Math.log(1 / delta) + (alpha - 1) * Math.log1p(-1 / alpha) - Math.log(alpha)) / (alpha - 1);
}

const GOLDEN = (Math.sqrt(5) - 1) / 2;

/** Golden-section minimisation over u = ln(alpha - 1) in [ln 1e-6, ln 1e6] (docs/methods.md §2 steps 1–4). */
function minimiseOverOrder(f: (alpha: number) => number): { alpha: number; value: number } {
  const g = (u: number): number => f(1 + Math.exp(u));
  let a = Math.log(1e-6);
  let b = Math.log(1e6);
  let c = b - GOLDEN * (b - a);
  let d = a + GOLDEN * (b - a);
  let fc = g(c);
  let fd = g(d);
  for (let i = 0; i < 200 && b - a > 1e-12; i++) {
    if (fc < fd) {
      b = d;
      d = c;
      fd = fc;
      c = b - GOLDEN * (b - a);
      fc = g(c);
    } else {
      a = c;
      c = d;
      fc = fd;
      d = a + GOLDEN * (b - a);
      fd = g(d);
    }
  }
  const u = (a + b) / 2;
  // Every alpha > 1 gives a valid bound, so report the value at the alpha actually found.
  return { alpha: 1 + Math.exp(u), value: g(u) };
}

/** CKS 2020 epsilon at delta for rho-zCDP, binary64 (docs/methods.md §2; [C2.3*]). */
export function epsilonCKS(rho: number, delta: number): { epsilon: number; alpha: number } {
  if (rho === 0) return { epsilon: 0, alpha: Infinity };
  const r = minimiseOverOrder((alpha) => epsilonAtOrder(alpha, rho, delta));
  return { epsilon: r.value, alpha: r.alpha };
}

/** CKS 2020 delta at a fixed epsilon for rho-zCDP, minimising ln delta over alpha ([C2.5a]). */
export function deltaFromRho(rho: Rational, epsilon: Rational): number {
  const r = rho.toNumber();
  const e = epsilon.toNumber();
  if (rho.sign() < 0 || epsilon.sign() < 0) throw new BadInputError("rho and epsilon must be non-negative");
  if (r === 0) return 0;
  const lnDelta = (alpha: number): number => (alpha - 1) * (alpha * r - e) - Math.log(alpha) + (alpha - 1) * Math.log1p(-1 / alpha);
  return Math.min(1, Math.exp(minimiseOverOrder(lnDelta).value));
}

// Relative margin that covers binary64 error in the conversion before rounding to 6 digits.
const EPS_MARGIN = 1e-10;

/**
 * epsilon at delta for rho-zCDP: the better of CKS 2020 and Bun & Steinke 2016, rounded UP to a
 * short decimal (6 significant digits) so the stored value is never optimistic.
 */
export function epsilonFromRho(rho: Rational, delta: Rational): Rational {
  const d = checkDelta(delta);
  if (!(rho instanceof Rational) || rho.sign() < 0) throw new BadInputError(`rho must be a non-negative rational, got ${String(rho)}`);
  if (rho.isZero()) return Rational.ZERO;
  const r = rho.toNumber();
  const best = Math.min(epsilonCKS(r, d).epsilon, epsilonBS(r, d));
  return Rational.fromNumberUp(best * (1 + EPS_MARGIN), 6);
}

/**
 * The rho cap for an (epsilon, delta) cap: the largest 6-significant-digit rho whose converted
 * epsilon (epsilonFromRho, rounded up) is still <= epsilon. epsilon_CKS increases in rho, so
 * bisection finds the crossing, then the short rational is stepped down until it checks.
 */
export function rhoFromEpsilonDelta(epsilon: Rational, delta: Rational): Rational {
  checkCost(epsilon);
  const d = checkDelta(delta);
  const e = epsilon.toNumber();
  const conv = (r: number): number => Math.min(epsilonCKS(r, d).epsilon, epsilonBS(r, d));
  let lo = 0;
  let hi = e; // epsilon(rho) >= rho, so the crossing lies below e
  for (let i = 0; i < 200; i++) {
    const mid = (lo + hi) / 2;
    if (conv(mid) <= e) lo = mid;
    else hi = mid;
  }
  let rho = Rational.fromNumberDown(lo, 6);
  for (let i = 0; i < 1000 && rho.sign() > 0 && epsilonFromRho(rho, delta).gt(epsilon); i++) {
    rho = Rational.fromNumberDown(rho.toNumber() * (1 - 1e-6), 6);
  }
  if (rho.sign() <= 0) throw new BadInputError(`the cap epsilon ${epsilon} at delta ${delta} leaves no usable rho`);
  return rho;
}

/** How a stated epsilon at delta was obtained (docs/methods.md §22). */
export type EpsilonRoute = "plain composition" | "zCDP conversion";

export interface EpsilonStatement {
  /** Exact (plain composition) or rounded up to 6 significant digits (conversion). */
  epsilon: Rational;
  by: EpsilonRoute;
}

/**
 * The best valid epsilon at delta for a zCDP account (docs/methods.md §22): the smaller of
 *   - plain composition, sum of the releases' pure epsilons, when every release so far was pure
 *     epsilon-DP (`pureSum` non-null): an (epsilon, 0)-DP guarantee, hence (epsilon, delta)-DP;
 *   - the conversion of the account's rho (epsilonFromRho: the better of Canonne, Kamath &
 *     Steinke 2020 and Bun & Steinke 2016, rounded up), which holds for any mix.
 * Ties go to plain composition (it also holds at delta = 0).
 */
export function bestEpsilon(rho: Rational, pureSum: Rational | null, delta: Rational): EpsilonStatement {
  const conv = epsilonFromRho(rho, delta);
  if (pureSum !== null) {
    if (!(pureSum instanceof Rational) || pureSum.sign() < 0) throw new BadInputError(`a pure epsilon sum must be a non-negative rational, got ${String(pureSum)}`);
    if (pureSum.le(conv)) return { epsilon: pureSum, by: "plain composition" };
  }
  return { epsilon: conv, by: "zCDP conversion" };
}

/** A noise part as a receipt records it (runtime/protocol/messages.ts MechanismRecord), untrusted. */
export interface PartRecord {
  family: string;
  scale: string;
  sensitivity: string;
  cost: string;
}

/**
 * The pure epsilon of one release on a zCDP dataset, or null when it is not pure: the sum of its
 * parts' epsilons (parts compose sequentially, §1) when every part is pure epsilon-DP and was
 * charged exactly epsilon^2/2 in rho (§2): discrete Laplace at scale t with L1 sensitivity D has
 * epsilon = D/t (§4); the exponential mechanism records its unit-level epsilon as its scale (§9).
 * A Gaussian part, an unreadable field or a charge that does not match makes the release not pure.
 */
export function pureEpsilonOfParts(parts: readonly PartRecord[]): Rational | null {
  if (!Array.isArray(parts) || parts.length === 0) return null;
  let sum = Rational.ZERO;
  try {
    for (const p of parts) {
      let eps: Rational;
      if (p.family === "exponential") eps = Rational.parse(p.scale);
      else if (p.family === "discrete-laplace") eps = Rational.parse(p.sensitivity).div(Rational.parse(p.scale));
      else return null;
      if (eps.sign() <= 0 || !pureToRho(eps).eq(Rational.parse(p.cost))) return null;
      sum = sum.add(eps);
    }
  } catch {
    return null;
  }
  return sum;
}
