/**
 * The two-sample Kolmogorov-Smirnov test, for the timing tests: D = sup_x |F1(x) - F2(x)| over the
 * two empirical distribution functions, and its large-sample critical value
 * c(alpha) * sqrt((n + m) / (n m)) with c(alpha) = sqrt(-ln(alpha / 2) / 2) (Smirnov 1948; the
 * form tabulated in e.g. Wikipedia's "Kolmogorov-Smirnov test" article, c(0.001) = 1.949).
 * Ties are handled by stepping over each distinct value at once (the statistic scipy's
 * `ks_2samp` computes; cross-checked in timing.test.ts).
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
