const todo = (): never => {
  throw new Error("not implemented yet");
};
export interface ByteSource {
  fill(buf: Uint8Array): void;
}
export const cryptoBytes: ByteSource = { fill: () => todo() };
export function seededBytes(_seed: string | number): ByteSource { return todo(); }
export class Bits {
  constructor(_src?: ByteSource) {}
  uniformInt(_m: bigint): bigint { return todo(); }
  uniformSmall(_m: number): number { return todo(); }
  bernoulli(_num: bigint, _den: bigint): boolean { return todo(); }
}
