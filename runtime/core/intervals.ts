import type { Rational } from "./rational.js";
import type { NoiseLaw } from "./mechanisms.js";
const todo = (): never => {
  throw new Error("not implemented yet");
};
export interface NoisyPart { noisy: bigint; law: NoiseLaw }
export interface IntervalResult { estimate: Rational | null; low: Rational; high: Rational; method: string }
export interface VarianceIntervalArgs {
  /** noisy sum of squares of centred grid values, in (step)^2 units */
  sumSquares: NoisyPart;
  sum: NoisyPart;
  count: NoisyPart;
  sumStep: Rational;
  lower: Rational;
  upper: Rational;
  confidence: number;
  centre?: Rational;
}
export function checkConfidence(_c: number): void { return todo(); }
export function tailProbability(_law: NoiseLaw, _h: bigint): number { return todo(); }
export function halfWidth(_law: NoiseLaw, _confidence: number): bigint { return todo(); }
export function ratioInterval(_args: { sum: NoisyPart; count: NoisyPart; sumStep: Rational; lower: Rational; upper: Rational; confidence: number; centre?: Rational }): IntervalResult { return todo(); }
export function varianceInterval(_args: VarianceIntervalArgs): IntervalResult { return todo(); }
