import type { NoiseLaw, PrivacyParam } from "./mechanisms.js";
const todo = (): never => {
  throw new Error("not implemented yet");
};
export function planForHalfWidth(_args: { family: NoiseLaw["family"]; sensitivity: bigint; halfWidthUnits: bigint; confidence: number }): { law: NoiseLaw; param: PrivacyParam; halfWidthUnits: bigint } { return todo(); }
export function halfWidthFor(_args: { sensitivity: bigint; param: PrivacyParam; confidence: number }): bigint { return todo(); }
