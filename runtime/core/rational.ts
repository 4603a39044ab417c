import { BadInputError } from "../errors.js";

const todo = (): never => {
  throw new Error("not implemented yet");
};

/** Exact rational on bigint, always in lowest terms with den > 0. */
export class Rational {
  readonly num: bigint;
  readonly den: bigint;
  constructor(num: bigint, den: bigint) {
    if (den === 0n) throw new BadInputError("rational with zero denominator");
    this.num = num;
    this.den = den;
  }
  static readonly ZERO = new Rational(0n, 1n);
  static readonly ONE = new Rational(1n, 1n);
  static parse(_s: string): Rational { return todo(); }
  static of(_n: bigint | number, _d?: bigint | number): Rational { return todo(); }
  static fromNumberUp(_x: number, _sig?: number): Rational { return todo(); }
  static fromNumberDown(_x: number, _sig?: number): Rational { return todo(); }
  add(_o: Rational): Rational { return todo(); }
  sub(_o: Rational): Rational { return todo(); }
  mul(_o: Rational): Rational { return todo(); }
  div(_o: Rational): Rational { return todo(); }
  cmp(_o: Rational): -1 | 0 | 1 { return todo(); }
  lt(_o: Rational): boolean { return todo(); }
  le(_o: Rational): boolean { return todo(); }
  gt(_o: Rational): boolean { return todo(); }
  ge(_o: Rational): boolean { return todo(); }
  eq(_o: Rational): boolean { return todo(); }
  isZero(): boolean { return todo(); }
  sign(): -1 | 0 | 1 { return todo(); }
  floor(): bigint { return todo(); }
  ceil(): bigint { return todo(); }
  min(_o: Rational): Rational { return todo(); }
  max(_o: Rational): Rational { return todo(); }
  toString(): string { return todo(); }
  toDecimal(_maxFractionDigits?: number): string { return todo(); }
  toNumber(): number { return todo(); }
}
