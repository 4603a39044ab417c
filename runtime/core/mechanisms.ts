import type { Rational } from "./rational.js";
import type { Bits } from "./random.js";
const todo = (): never => {
  throw new Error("not implemented yet");
};
export type PrivacyParam = { epsilon: Rational } | { rho: Rational };
export type NoiseLaw = { family: "discrete-laplace"; scale: Rational } | { family: "discrete-gaussian"; sigma2: Rational };
export function calibrate(_sensitivity: bigint, _param: PrivacyParam): NoiseLaw { return todo(); }
export function costOf(_law: NoiseLaw, _sensitivity: bigint): PrivacyParam { return todo(); }
export function addNoise(_value: bigint, _law: NoiseLaw, _bits: Bits): bigint { return todo(); }
