/**
 * The two-sample Kolmogorov-Smirnov test, for the timing tests: D = sup_x |F1(x) - F2(x)| over the
 * two empirical distribution functions, and its large-sample critical value
 * c(alpha) * sqrt((n + m) / (n m)) with c(alpha) = sqrt(-ln(alpha / 2) / 2) (Smirnov 1948; the
 * form tabulated in e.g. Wikipedia's "Kolmogorov-Smirnov test" article, c(0.001) = 1.949).
 * Ties are handled by stepping over each distinct value at once (the statistic scipy's
 * `ks_2samp` computes; cross-checked in timing.test.ts). The table assumes every observation
 * independent; the timing test's asks are not (pairs and neighbours share the machine's load), so it
 * judges D with pairedPermutationKs below and prints ksCritical only for comparison.
 */
export function ksStatistic(a: readonly number[], b: readonly number[]): number {
  const x = [...a].sort((p, q) => p - q);
  const y = [...b].sort((p, q) => p - q);
  let i = 0;
  let j = 0;
  let d = 0;
  while (i < x.length && j < y.length) {
    const v = Math.min(x[i], y[j]);
    while (i < x.length && x[i] === v) i++;
    while (j < y.length && y[j] === v) j++;
    d = Math.max(d, Math.abs(i / x.length - j / y.length));
  }
  return d;
}

export function ksCritical(alpha: number, n: number, m: number): number {
  return Math.sqrt(-Math.log(alpha / 2) / 2) * Math.sqrt((n + m) / (n * m));
}

/**
 * The within-pair permutation (randomization) test for paired samples, with the KS D as its
 * statistic (Fisher 1935, The Design of Experiments, ch. 3, Darwin's paired plants: the coin within
 * pairs is what makes the reference distribution; Good, Permutation Tests, 2005: Monte Carlo
 * p-values and their "+1"; both from memory). Pair i holds a[i] and b[i]; the order inside each
 * pair was chosen by a fair coin. If the time does not depend on the arm, the two times of a pair
 * are exchangeable, however the load drifted (it is shared, or not, by both members alike), so
 * swapping the labels inside each pair independently with probability 1/2 gives D's exact reference
 * distribution given the times. The asymptotic table (ksCritical) assumes every time independent of
 * every other, which a pair sharing its moment, and pairs sharing a load, are not.
 *
 * p = (1 + #{r : D_r >= D}) / (1 + R) over R resamples: a valid p-value for any R, since the
 * observed labelling is one more draw from the same distribution (Good 2005). The kind fails
 * when p < alpha. `critical` is the smallest D that would have failed against these resamples.
 *
 * D is kept as an integer: with n = m the statistic is max |#a - #b| / n over the pooled sorted
 * values (each run of ties stepped over at once, as in ksStatistic), so ">= D" is compared exactly,
 * never on binary64 quotients that may differ in the last place for the same count.
 */
export interface PairedKsResult {
  /** Number of pairs n. */
  pairs: number;
  /** The observed KS D (the same number ksStatistic gives). */
  d: number;
  /** R, the number of random relabellings. */
  resamples: number;
  /** #{r : D_r >= D}. */
  exceed: number;
  /** (1 + exceed) / (1 + R). */
  p: number;
  /** Smallest D (a multiple of 1/n) with p < alpha against these resamples; (n + 1) / n if none. */
  critical: number;
  /** counts[k] = #{r : D_r = k / n}, k = 0..n. */
  counts: number[];
}

/** The pooled sample sorted once: for each position, its pair and arm, and whether a run of ties ends there. */
interface Pooled {
  n: number;
  pair: Int32Array;
  arm: Uint8Array;
  runEnd: Uint8Array;
}

function pool(a: readonly number[], b: readonly number[]): Pooled {
  const n = a.length;
  if (n < 1 || b.length !== n) throw new Error(`paired samples need equal, non-zero lengths (got ${a.length} and ${b.length})`);
  const values = [...a, ...b];
  if (!values.every(Number.isFinite)) throw new Error("paired samples must be finite numbers");
  const order = values.map((_, j) => j).sort((p, q) => values[p] - values[q]);
  const pair = new Int32Array(2 * n);
  const arm = new Uint8Array(2 * n);
  const runEnd = new Uint8Array(2 * n);
  for (let k = 0; k < 2 * n; k++) {
    const j = order[k];
    pair[k] = j < n ? j : j - n;
    arm[k] = j < n ? 0 : 1;
    runEnd[k] = k === 2 * n - 1 || values[order[k + 1]] !== values[j] ? 1 : 0;
  }
  return { n, pair, arm, runEnd };
}

/** n * D for the labelling where pair i's labels are swapped when swap[i] is 1. */
function scaledD(p: Pooled, swap: Uint8Array): number {
  let diff = 0;
  let best = 0;
  for (let k = 0; k < p.pair.length; k++) {
    diff += (p.arm[k] ^ swap[p.pair[k]]) === 0 ? 1 : -1;
    if (p.runEnd[k] === 1) {
      const m = diff < 0 ? -diff : diff;
      if (m > best) best = m;
    }
  }
  return best;
}

/**
 * The within-pair permutation KS test. `next` returns uniform 32-bit unsigned integers (a seeded
 * test PRNG); each swap uses its top bit.
 */
export function pairedPermutationKs(
  a: readonly number[],
  b: readonly number[],
  opts: { resamples: number; alpha: number; next: () => number },
): PairedKsResult {
  const { resamples, alpha, next } = opts;
  if (!Number.isInteger(resamples) || resamples < 1) throw new Error(`resamples must be a positive integer (got ${resamples})`);
  const p = pool(a, b);
  const n = p.n;
  const swap = new Uint8Array(n);
  const observed = scaledD(p, swap);
  const counts = new Array<number>(n + 1).fill(0);
  for (let r = 0; r < resamples; r++) {
    for (let i = 0; i < n; i++) swap[i] = next() >>> 31;
    counts[scaledD(p, swap)]++;
  }
  const pOf = (tail: number) => (1 + tail) / (1 + resamples);
  // tail(k) = #{r : D_r >= k / n}, walked down from k = n + 1 (tail 0).
  let tail = 0;
  let criticalK = n + 1;
  let exceed = 0;
  for (let k = n + 1; k >= 0; k--) {
    if (k <= n) tail += counts[k];
    if (k === observed) exceed = tail;
    if (pOf(tail) < alpha) criticalK = k;
  }
  return { pairs: n, d: observed / n, resamples, exceed, p: pOf(exceed), critical: criticalK / n, counts };
}

/**
 * The exact within-pair permutation p-value, #{patterns : D >= D_obs} / 2^n over all 2^n swap
 * patterns (the observed one included): the value the Monte Carlo p estimates. For tests (n <= 20).
 */
export function pairedKsExactP(a: readonly number[], b: readonly number[]): number {
  const p = pool(a, b);
  const n = p.n;
  if (n > 20) throw new Error(`exact enumeration is for n <= 20 pairs (got ${n})`);
  const swap = new Uint8Array(n);
  const observed = scaledD(p, swap);
  let atLeast = 0;
  for (let mask = 0; mask < 2 ** n; mask++) {
    for (let i = 0; i < n; i++) swap[i] = (mask >>> i) & 1;
    if (scaledD(p, swap) >= observed) atLeast++;
  }
  return atLeast / 2 ** n;
}
