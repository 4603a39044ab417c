import type { Rational } from "./rational.js";
const todo = (): never => {
  throw new Error("not implemented yet");
};
export interface GridSpec { lower: string; upper: string; step: string }
export interface Grid { spec: GridSpec; step: Rational; lowerUnits: bigint; upperUnits: bigint; maxAbsUnits: bigint }
export function makeGrid(_spec: GridSpec): Grid { return todo(); }
export function toGridUnits(_x: number, _grid: Grid): bigint | null { return todo(); }
export function fromGridUnits(_units: bigint, _grid: Grid | Rational): Rational { return todo(); }
export function sumSensitivity(_grid: Grid, _rowsPerUnit: number): bigint { return todo(); }
export function centredSumSensitivity(_grid: Grid, _rowsPerUnit: number): { centreUnits2: bigint; sensitivity2: bigint } { return todo(); }
