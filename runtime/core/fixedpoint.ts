/**
 * Fixed-point values (docs/methods.md §6–7). Values are rounded to a public grid of step g and clamped
 * to public bounds in integer arithmetic, so sums are exact integers in grid units and the noise is
 * added on that same grid: the remedy for the floating-point attacks of Mironov (2012) and the
 * sensitivity underestimation of Casacuberta, Shoemate, Vadhan & Wagaman (2022).
 */
import { BadInputError } from "../errors.js";
import { Rational } from "./rational.js";

export interface GridSpec {
  lower: string;
  upper: string;
  step: string;
}

export interface Grid {
  spec: GridSpec;
  step: Rational;
  lowerUnits: bigint;
  upperUnits: bigint;
  maxAbsUnits: bigint;
}

/** Largest |bound| in grid units. Keeps x/g meaningful in binary64 before the integer clamp. */
export const MAX_GRID_UNITS = 2n ** 52n;

function parseField(value: unknown, field: string): Rational {
  if (typeof value !== "string") throw new BadInputError(`grid ${field} must be a decimal string, got ${typeof value}`);
  try {
    return Rational.parse(value);
  } catch (e) {
    throw new BadInputError(`grid ${field}: ${e instanceof Error ? e.message : String(e)}`, { cause: e });
  }
}

/** Validates a declared range and step and expresses the bounds in integer grid units. */
export function makeGrid(spec: GridSpec): Grid {
  const lower = parseField(spec.lower, "lower bound");
  const upper = parseField(spec.upper, "upper bound");
  const step = parseField(spec.step, "step");
  if (step.sign() <= 0) throw new BadInputError(`grid step must be positive, got ${spec.step}`);
  if (!lower.lt(upper)) {
    throw new BadInputError(`grid range is empty or reversed: lower ${spec.lower} must be below upper ${spec.upper}`);
  }
  const lu = lower.div(step);
  const uu = upper.div(step);
  if (!lu.isInteger()) throw new BadInputError(`grid lower bound ${spec.lower} is not a multiple of the step ${spec.step}`);
  if (!uu.isInteger()) throw new BadInputError(`grid upper bound ${spec.upper} is not a multiple of the step ${spec.step}`);
  const lowerUnits = lu.num;
  const upperUnits = uu.num;
  const absL = lowerUnits < 0n ? -lowerUnits : lowerUnits;
  const absU = upperUnits < 0n ? -upperUnits : upperUnits;
  const maxAbsUnits = absL > absU ? absL : absU;
  if (maxAbsUnits > MAX_GRID_UNITS) {
    throw new BadInputError(`grid has too many units: bounds reach ${maxAbsUnits} steps, limit is 2^52; use a coarser step`);
  }
  return { spec: { lower: spec.lower, upper: spec.upper, step: spec.step }, step, lowerUnits, upperUnits, maxAbsUnits };
}

// Per-grid cache of the binary64 factors used by toGridUnits.
const factors = new WeakMap<Grid, { stepNum: number; stepDen: number; lo: number; hi: number }>();

/**
 * Rounds x to the nearest grid point (ties away from zero), then clamps in integer arithmetic
 * (docs/methods.md §6 recipe step 2). Clamping after rounding bounds |units| by maxAbsUnits whatever the
 * floating-point error in x/g. Returns null for NaN and infinities: callers drop such values by a
 * rule that does not depend on other rows.
 */
export function toGridUnits(x: number, grid: Grid): bigint | null {
  if (!Number.isFinite(x)) return null;
  let f = factors.get(grid);
  if (f === undefined) {
    f = {
      stepNum: Number(grid.step.num),
      stepDen: Number(grid.step.den),
      lo: Number(grid.lowerUnits),
      hi: Number(grid.upperUnits),
    };
    factors.set(grid, f);
  }
  const v = (x * f.stepDen) / f.stepNum;
  const r = v < 0 ? -Math.round(-v) : Math.round(v);
  if (!(r > f.lo)) return grid.lowerUnits; // also catches NaN from overflowing products
  if (r >= f.hi) return grid.upperUnits;
  return BigInt(r);
}

/** units × step as an exact rational. */
export function fromGridUnits(units: bigint, grid: Grid | Rational): Rational {
  const step = grid instanceof Rational ? grid : grid.step;
  return step.mul(units);
}

function checkRows(rowsPerUnit: number): bigint {
  if (!Number.isSafeInteger(rowsPerUnit) || rowsPerUnit < 1) {
    throw new BadInputError(`rows per privacy unit must be a positive integer, got ${String(rowsPerUnit)}`);
  }
  return BigInt(rowsPerUnit);
}

/** Sum sensitivity in grid units under add/remove: k * max(|L|, |U|)/g (docs/methods.md §7 table, [C6.3a], [C7.1]). */
export function sumSensitivity(grid: Grid, rowsPerUnit: number): bigint {
  return checkRows(rowsPerUnit) * grid.maxAbsUnits;
}

/**
 * Centred sum (docs/methods.md §7): sum of (x - c) with c = (L+U)/2 has sensitivity k (U-L)/2. The
 * centre may fall between grid points, so this works in half-units (step g/2): each row contributes
 * 2*x_units - centreUnits2, where centreUnits2 = L/g + U/g, and the per-unit sensitivity in
 * half-units is k * (U-L)/g. Release half-unit values with step g/2 (fromGridUnits(v, step/2)); the
 * plain sum is recovered as centred + c * count (post-processing).
 */
export function centredSumSensitivity(grid: Grid, rowsPerUnit: number): { centreUnits2: bigint; sensitivity2: bigint } {
  const k = checkRows(rowsPerUnit);
  return { centreUnits2: grid.lowerUnits + grid.upperUnits, sensitivity2: k * (grid.upperUnits - grid.lowerUnits) };
}

/** t when the grid's step is exactly 10^-t (t >= 0), else null: a step a fixed-point column can hold. */
export function decimalStepDigits(grid: Grid): number | null {
  const { num, den } = grid.step;
  if (num !== 1n) return null;
  let t = 0;
  for (let d = den; d > 1n; d /= 10n) {
    if (d % 10n !== 0n) return null;
    t++;
  }
  return t;
}

/**
 * units * 10^-t as a plain decimal text with `digits` decimals ("-12.05"), for SQL literals. With
 * fewer digits than t the value is rounded towards -infinity ("floor") or +infinity ("ceil"), so
 * that a comparison with a value that has only `digits` decimals keeps its outcome (docs/methods.md
 * §6): for such x, x <= v iff x <= floor(v), x >= v iff x >= ceil(v), x < v iff x < ceil(v) and
 * x > v iff x > floor(v).
 */
export function decimalText(units: bigint, t: number, digits = t, dir: "floor" | "ceil" = "floor"): string {
  if (!Number.isInteger(t) || !Number.isInteger(digits) || t < 0 || digits < 0 || digits > t) throw new RangeError("decimalText: need 0 <= digits <= t");
  const drop = 10n ** BigInt(t - digits);
  let v = units / drop; // truncated towards zero
  if (v * drop !== units) {
    if (dir === "floor" && units < 0n) v -= 1n;
    if (dir === "ceil" && units > 0n) v += 1n;
  }
  const sign = v < 0n ? "-" : "";
  const a = (v < 0n ? -v : v).toString().padStart(digits + 1, "0");
  return digits === 0 ? `${sign}${a}` : `${sign}${a.slice(0, -digits)}.${a.slice(-digits)}`;
}
