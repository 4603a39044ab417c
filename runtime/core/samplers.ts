/**
 * Exact samplers for Bernoulli(exp(-gamma)), the discrete Laplace and the discrete Gaussian, after
 * Canonne, Kamath & Steinke (2020), "The Discrete Gaussian for Differential Privacy", section on
 * sampling (restated as algorithms A–D in docs/methods.md §5). Only integer and rational arithmetic:
 * every quantity is an integer held in a number while it stays below 2^53 (the fast path) and in a
 * bigint otherwise. Both paths draw from the same distribution; the tests check each against the
 * exact pmf.
 */
import { BadInputError } from "../errors.js";
import { floorDiv, isqrt, Rational } from "./rational.js";
import { Bits, MAX_SMALL } from "./random.js";

/**
 * Bound for integers on the number path where a quotient is formed: with n <= 2^52 and d <= 2^48,
 * q*d and (q+1)*d stay below 2^53 even when the float quotient is off by one, so the integer
 * corrections below are exact.
 */
const LIMIT = 2 ** 52;

// ---------------------------------------------------------------------------------------------
// Bernoulli(exp(-gamma))
// ---------------------------------------------------------------------------------------------

/**
 * Algorithm A for gamma = n/d in [0, 1] on numbers (0 <= n <= d <= 2^48).
 * The K-th trial is Bernoulli(n/(d*K)) = [UniformInt(d*K) < n] while d*K <= 2^48; beyond that it is
 * drawn as Bernoulli(n/d) AND Bernoulli(1/K), which has the same law (independent factors).
 */
function expFracSmall(n: number, d: number, bits: Bits): boolean {
  if (n === 0) return true;
  let k = 1;
  for (;;) {
    const dk = d * k;
    if (dk <= MAX_SMALL) {
      if (n !== dk && bits.uniformSmall(dk) >= n) break;
    } else if (!bits.bernoulliSmall(n, d) || bits.uniformSmall(k) !== 0) break;
    k++;
  }
  return (k & 1) === 1;
}

/** Bernoulli(exp(-1)) = algorithm A with gamma = 1: the K-th trial is Bernoulli(1/K). */
function expMinusOne(bits: Bits): boolean {
  let k = 2;
  while (bits.uniformSmall(k) === 0) k++;
  // The loop stops at the first failed trial K; return 1 iff K is odd (K = k here).
  return (k & 1) === 1;
}

/** Algorithm A on bigints, gamma = n/d in [0, 1]. */
function expFracBig(n: bigint, d: bigint, bits: Bits): boolean {
  let k = 1;
  for (;;) {
    if (!bits.bernoulli(n, d)) break;
    if (k > 1 && bits.uniformSmall(k) !== 0) break;
    k++;
  }
  return (k & 1) === 1;
}

/** Algorithm B on numbers: gamma = n/d >= 0 with n <= 2^52, 1 <= d <= 2^48. */
function expSmall(n: number, d: number, bits: Bits): boolean {
  let q = Math.floor(n / d);
  let r = n - q * d;
  // Correct the float quotient so that 0 <= r < d holds exactly.
  while (r < 0) {
    q--;
    r += d;
  }
  while (r >= d) {
    q++;
    r -= d;
  }
  for (let i = 0; i < q; i++) if (!expMinusOne(bits)) return false;
  return expFracSmall(r, d, bits);
}

/** Algorithm B on bigints. */
function expBig(n: bigint, d: bigint, bits: Bits): boolean {
  const q = n / d;
  const r = n - q * d;
  for (let i = 0n; i < q; i++) if (!expMinusOne(bits)) return false;
  if (d <= BigInt(MAX_SMALL)) return expFracSmall(Number(r), Number(d), bits);
  return expFracBig(r, d, bits);
}

/** Bernoulli(exp(-gamma)) for rational gamma >= 0 (CKS 2020; docs/methods.md §5 algorithms A and B). */
export function sampleBernoulliExp(gamma: Rational, bits: Bits): boolean {
  if (gamma.sign() < 0) throw new BadInputError(`Bernoulli(exp(-gamma)) needs gamma >= 0, got ${gamma}`);
  if (gamma.den <= BigInt(MAX_SMALL) && gamma.num <= BigInt(LIMIT)) {
    return expSmall(Number(gamma.num), Number(gamma.den), bits);
  }
  return expBig(gamma.num, gamma.den, bits);
}

// ---------------------------------------------------------------------------------------------
// Discrete Laplace, scale tn/td (algorithm C with t = tn, s = td)
// ---------------------------------------------------------------------------------------------

interface LaplacePlan {
  small: boolean;
  tn: number;
  td: number;
  tnBig: bigint;
  tdBig: bigint;
}

function laplacePlan(scale: Rational): LaplacePlan {
  if (scale.sign() <= 0) throw new BadInputError(`discrete Laplace scale must be positive, got ${scale}`);
  const small = scale.num <= BigInt(MAX_SMALL) && scale.den <= BigInt(MAX_SMALL);
  return {
    small,
    tn: small ? Number(scale.num) : 0,
    td: small ? Number(scale.den) : 0,
    tnBig: scale.num,
    tdBig: scale.den,
  };
}

/** Set by laplaceNum when it returns NaN: the draw itself, which left the number range. */
let overflowDraw = 0n;

/**
 * Number path of algorithm C. Returns the draw as a number, or NaN after storing it in overflowDraw
 * when X passed 2^52 (then the rest of that draw is finished in bigints, never redrawn).
 */
function laplaceNum(tn: number, td: number, bits: Bits): number {
  for (;;) {
    const u = tn === 1 ? 0 : bits.uniformSmall(tn);
    if (u !== 0 && !expFracSmall(u, tn, bits)) continue; // restart; exp(-0) = 1 needs no draw
    let v = 0;
    while (expMinusOne(bits)) v++;
    const x = u + tn * v; // exact whenever the true value is <= 2^52 (rounding is monotone)
    if (x <= LIMIT) {
      let yn = td === 1 ? x : Math.floor(x / td);
      if (td !== 1) {
        // exact correction of the float quotient
        while (yn * td > x) yn--;
        while ((yn + 1) * td <= x) yn++;
      }
      if (yn === 0) {
        if (bits.bit() === 1) continue; // B = 1 and Y = 0: avoid counting zero twice
        return 0;
      }
      return bits.bit() === 1 ? -yn : yn;
    }
    const y = floorDiv(BigInt(u) + BigInt(tn) * BigInt(v), BigInt(td));
    overflowDraw = bits.bit() === 1 ? -y : y; // x > 2^52 >= td here, so y >= 1 and there is no zero case
    return NaN;
  }
}

function laplaceSmall(tn: number, td: number, bits: Bits): bigint {
  const r = laplaceNum(tn, td, bits);
  return r === r ? BigInt(r) : overflowDraw;
}

/** Bigint path of algorithm C, a direct transcription. */
function laplaceBig(tn: bigint, td: bigint, bits: Bits): bigint {
  for (;;) {
    const u = bits.uniformInt(tn);
    if (u !== 0n && !expFracBig(u, tn, bits)) continue;
    let v = 0n;
    while (expMinusOne(bits)) v++;
    const y = (u + tn * v) / td;
    const b = bits.bit();
    if (b === 1 && y === 0n) continue;
    return b === 1 ? -y : y;
  }
}

let lastScale: Rational | null = null;
let lastLaplace: LaplacePlan | null = null;

/** Discrete Laplace: P(y) proportional to exp(-|y|/scale), scale a positive rational. */
export function sampleDiscreteLaplace(scale: Rational, bits: Bits): bigint {
  let plan: LaplacePlan;
  if (scale === lastScale && lastLaplace !== null) plan = lastLaplace;
  else {
    plan = laplacePlan(scale);
    lastScale = scale;
    lastLaplace = plan;
  }
  return plan.small ? laplaceSmall(plan.tn, plan.td, bits) : laplaceBig(plan.tnBig, plan.tdBig, bits);
}

/**
 * out.length draws of sampleDiscreteLaplace, in order and bit for bit the same, as numbers: a draw
 * the number path cannot hold is NaN in `out` and its bigint is in the returned map, by index.
 * For loops that keep many draws (the quantile calibration): one plan, no bigint per draw.
 */
export function fillDiscreteLaplace(scale: Rational, bits: Bits, out: Float64Array): Map<number, bigint> {
  const plan = laplacePlan(scale);
  const big = new Map<number, bigint>();
  if (!plan.small) {
    for (let i = 0; i < out.length; i++) {
      out[i] = NaN;
      big.set(i, laplaceBig(plan.tnBig, plan.tdBig, bits));
    }
    return big;
  }
  const { tn, td } = plan;
  for (let i = 0; i < out.length; i++) {
    const r = laplaceNum(tn, td, bits);
    out[i] = r;
    if (r !== r) big.set(i, overflowDraw);
  }
  return big;
}

/** The bigint-only transcription of algorithm C, exported so tests can check it separately. */
export function sampleDiscreteLaplaceBig(scale: Rational, bits: Bits): bigint {
  const p = laplacePlan(scale);
  return laplaceBig(p.tnBig, p.tdBig, bits);
}

// ---------------------------------------------------------------------------------------------
// Discrete Gaussian, sigma^2 = a/b (algorithm D)
// ---------------------------------------------------------------------------------------------

/**
 * Proposal scale. CKS take t = floor(sigma) + 1; any t > 0 is correct, because the accept step
 * divides target by proposal: exp(-y^2/(2 s)) / exp(-|y|/t) = exp(-(|y| - s/t)^2/(2 s)) * exp(s/(2t^2)),
 * and the constant factor cancels. For sigma >= 1 we take t = s/m with m = floor(sigma), so that
 * s/t = m is an integer and gamma = (|Y| - m)^2 * b / (2a) keeps the small denominator 2a instead
 * of 2 a b t^2 (this keeps sigma = 10^4 on the number path). For sigma < 1 we keep CKS's t = 1,
 * gamma = (|Y| b - a)^2 / (2ab). Both choices give t within a factor of ~2 of sigma, so the
 * expected number of proposals stays small (CKS's running-time analysis).
 */
interface GaussPlan {
  a: bigint;
  b: bigint;
  wide: boolean; // sigma >= 1: gamma = (|Y| - m)^2 b / (2a); else gamma = (|Y| b - a)^2 / (2ab)
  m: bigint;
  lap: LaplacePlan;
  gNum: bigint; // multiplier of the squared term in gamma's numerator
  gDen: bigint; // gamma's denominator
  small: boolean; // proposals on the number path
  gSmall: boolean; // accept step on the number path too
  mN: number;
  aN: number;
  bN: number;
  gDenN: number;
}

function gaussPlan(sigma2: Rational): GaussPlan {
  if (sigma2.sign() <= 0) throw new BadInputError(`discrete Gaussian variance sigma^2 must be positive, got ${sigma2}`);
  const a = sigma2.num;
  const b = sigma2.den;
  const m = isqrt(a / b);
  const wide = m >= 1n;
  const lap = laplacePlan(wide ? Rational.of(a, b * m) : Rational.ONE);
  const gNum = wide ? b : 1n;
  const gDen = wide ? 2n * a : 2n * a * b;
  // Number-path proposals need only lap.small; the accept step stays on numbers when gamma's
  // denominator and the parameters are small too (gSmall), and uses bigints otherwise.
  const small = lap.small;
  const gSmall = gDen <= BigInt(MAX_SMALL) && gNum <= BigInt(MAX_SMALL) && a <= BigInt(MAX_SMALL) && m <= BigInt(MAX_SMALL);
  return {
    a,
    b,
    wide,
    m,
    lap,
    gNum,
    gDen,
    small,
    gSmall,
    mN: Number(m),
    aN: Number(a),
    bN: Number(b),
    gDenN: Number(gDen),
  };
}

/** Algorithm D with number-path proposals (requires p.small). */
function gaussSmall(p: GaussPlan, bits: Bits): bigint {
  const r = gaussNum(p, bits);
  return r === r ? BigInt(r) : overflowDraw;
}

/**
 * gaussSmall's draw as a number, or NaN after storing it in overflowDraw when the proposal left
 * the number range (laplaceNum).
 */
function gaussNum(p: GaussPlan, bits: Bits): number {
  for (;;) {
    const y = laplaceNum(p.lap.tn, p.lap.td, bits);
    if (y !== y) {
      const yb = overflowDraw;
      if (gaussAcceptBig(p, yb < 0n ? -yb : yb, bits)) {
        overflowDraw = yb;
        return NaN;
      }
      continue;
    }
    const yn = Math.abs(y);
    // gamma's numerator on numbers when it stays <= 2^52 (d <= 2^26 keeps d^2 exact)
    let n = -1;
    if (!p.gSmall) {
      // accept step in bigints below
    } else if (p.wide) {
      const d = Math.abs(yn - p.mN);
      if (d <= 67108864) {
        const t = d * d * p.bN;
        if (t <= LIMIT) n = t;
      }
    } else {
      const yb = yn * p.bN;
      if (yb <= LIMIT) {
        const d = Math.abs(yb - p.aN);
        if (d <= 67108864) n = d * d;
      }
    }
    if (n >= 0) {
      if (expSmall(n, p.gDenN, bits)) return y;
      continue;
    }
    if (gaussAcceptBig(p, BigInt(yn), bits)) return y;
  }
}

function gaussAcceptBig(p: GaussPlan, ay: bigint, bits: Bits): boolean {
  const diff = p.wide ? ay - p.m : ay * p.b - p.a;
  return expBig(diff * diff * p.gNum, p.gDen, bits);
}

function gaussBig(p: GaussPlan, bits: Bits): bigint {
  for (;;) {
    const y = laplaceBig(p.lap.tnBig, p.lap.tdBig, bits);
    if (gaussAcceptBig(p, y < 0n ? -y : y, bits)) return y;
  }
}

let lastSigma2: Rational | null = null;
let lastGauss: GaussPlan | null = null;

/** Discrete Gaussian N_Z(0, sigma2): P(x) proportional to exp(-x^2/(2 sigma2)), sigma2 a positive rational. */
export function sampleDiscreteGaussian(sigma2: Rational, bits: Bits): bigint {
  let plan: GaussPlan;
  if (sigma2 === lastSigma2 && lastGauss !== null) plan = lastGauss;
  else {
    plan = gaussPlan(sigma2);
    lastSigma2 = sigma2;
    lastGauss = plan;
  }
  return plan.small ? gaussSmall(plan, bits) : gaussBig(plan, bits);
}

/** out.length draws of sampleDiscreteGaussian, as fillDiscreteLaplace does for the Laplace. */
export function fillDiscreteGaussian(sigma2: Rational, bits: Bits, out: Float64Array): Map<number, bigint> {
  const plan = gaussPlan(sigma2);
  const big = new Map<number, bigint>();
  for (let i = 0; i < out.length; i++) {
    const r = plan.small ? gaussNum(plan, bits) : NaN;
    out[i] = r;
    if (r !== r) big.set(i, plan.small ? overflowDraw : gaussBig(plan, bits));
  }
  return big;
}

/** Bigint-only path of algorithm D, exported so tests can check it separately. */
export function sampleDiscreteGaussianBig(sigma2: Rational, bits: Bits): bigint {
  return gaussBig(gaussPlan(sigma2), bits);
}
