import type { Rational } from "./rational.js";
import type { Bits } from "./random.js";
const todo = (): never => {
  throw new Error("not implemented yet");
};
export function sampleBernoulliExp(_gamma: Rational, _bits: Bits): boolean { return todo(); }
export function sampleDiscreteLaplace(_scale: Rational, _bits: Bits): bigint { return todo(); }
export function sampleDiscreteGaussian(_sigma2: Rational, _bits: Bits): bigint { return todo(); }
