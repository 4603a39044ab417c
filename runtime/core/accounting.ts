import type { Rational } from "./rational.js";
const todo = (): never => {
  throw new Error("not implemented yet");
};
export type AccountingMode = "pure" | "zcdp";
export function rhoFromEpsilonDelta(_epsilon: Rational, _delta: Rational): Rational { return todo(); }
export function epsilonFromRho(_rho: Rational, _delta: Rational): Rational { return todo(); }
export function pureToRho(_epsilon: Rational): Rational { return todo(); }
export function composeSequential(_costs: Rational[]): Rational { return todo(); }
export function composeParallel(_costs: Rational[]): Rational { return todo(); }
export function checkCost(_cost: Rational): void { return todo(); }
export class Reservation {
  readonly cost: Rational;
  constructor(cost: Rational) { this.cost = cost; }
  commit(): void { return todo(); }
  release(): void { return todo(); }
}
export class BudgetAccount {
  constructor(_args: { mode: AccountingMode; cap: Rational; spent?: Rational }) {}
  get spent(): Rational { return todo(); }
  get remaining(): Rational { return todo(); }
  get cap(): Rational { return todo(); }
  canAfford(_cost: Rational): boolean { return todo(); }
  reserve(_cost: Rational): Reservation { return todo(); }
}
