import type { Rational } from "./rational.js";
import type { Bits } from "./random.js";
const todo = (): never => {
  throw new Error("not implemented yet");
};
export function exponentialQuantile(_args: { countsBelow: bigint[]; n: bigint; p: Rational; epsilon: Rational; bits: Bits; costCap?: bigint }): { index: number; epsilonUsed: Rational } { return todo(); }
