/**
 * Values crossing to and from the worker threads. Structured clone keeps bigints, arrays and plain
 * objects but drops class prototypes, so Rationals travel as { $rational: [num, den] } and are
 * rebuilt exactly on the other side. Nothing else needs help: recipes and SQL results are plain.
 */
import { Rational } from "../../core/index.js";

const TAG = "$rational";

export function toWire(x: unknown): unknown {
  if (x instanceof Rational) return { [TAG]: [x.num, x.den] };
  if (Array.isArray(x)) return x.map(toWire);
  if (x !== null && typeof x === "object") {
    const out: Record<string, unknown> = {};
    for (const [k, v] of Object.entries(x)) out[k] = toWire(v);
    return out;
  }
  return x;
}

export function fromWire(x: unknown): unknown {
  if (Array.isArray(x)) return x.map(fromWire);
  if (x !== null && typeof x === "object") {
    const o = x as Record<string, unknown>;
    const r = o[TAG];
    if (Array.isArray(r) && r.length === 2 && typeof r[0] === "bigint" && typeof r[1] === "bigint") return Rational.of(r[0], r[1]);
    const out: Record<string, unknown> = {};
    for (const [k, v] of Object.entries(o)) out[k] = fromWire(v);
    return out;
  }
  return x;
}
