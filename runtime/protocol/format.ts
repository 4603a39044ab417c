/**
 * How released numbers are shown. The kernel's display and the notebook audit both use this, so
 * the audit can check that what a notebook shows is what the curator signed.
 */

/** Shows an exact decimal string with at most `sig` significant digits (integers keep all digits). */
export function formatDecimal(value: string | null, sig = 6): string {
  if (value === null) return "n/a";
  const m = /^(-?)(\d+)(?:\.(\d+))?$/.exec(value.trim());
  if (!m) throw new TypeError(`formatDecimal: not a decimal string: ${JSON.stringify(value)}`);
  const [, sign, intPart, frac = ""] = m;
  if (frac === "") return sign + intPart.replace(/^0+(?=\d)/, "");
  const n = Number(value);
  if (Math.abs(n) >= 10 ** sig) return sign + intPart.replace(/^0+(?=\d)/, "");
  let s = Number(n.toPrecision(sig)).toString();
  if (/e/.test(s)) s = n.toFixed(Math.min(20, sig + 6)).replace(/0+$/, "").replace(/\.$/, "");
  return s === "-0" ? "0" : s;
}

/** "12.5 ± 0.75" from an estimate and its interval ends (the half-width is the larger side). */
export function formatWithError(value: string | null, low: string | null, high: string | null, sig = 6): string {
  if (value === null) return "n/a";
  if (low === null || high === null) return formatDecimal(value, sig);
  const v = Number(value);
  const lo = Number(low);
  const hi = Number(high);
  const symmetric = Math.abs(v - lo - (hi - v)) <= 1e-9 * Math.max(1, Math.abs(v));
  if (symmetric) return `${formatDecimal(value, sig)} ± ${formatDecimal(String(hi - v), sig)}`;
  return `${formatDecimal(value, sig)} [${formatDecimal(low, sig)}, ${formatDecimal(high, sig)}]`;
}
