import { it } from "vitest";
import { Bits, seededBytes } from "/work/wt/hc/runtime/core/index.js";
import { open } from "/work/wt/hc/test/fixtures/curator-helpers.js";
import { penguinPolicy } from "/work/wt/hc/test/fixtures/penguins.js";
import { Allocator } from "/work/wt/hc/runtime/curator/aggregates/budget.js";
import { regressionPiece } from "/work/wt/hc/runtime/curator/aggregates/regression.js";
import { FINISHERS } from "/work/wt/hc/runtime/curator/aggregates/finishers.js";
it("show", async () => {
  const o = await open(penguinPolicy(undefined, false));
  const d = o.policy.datasets.get("d")!;
  for (const eps of ["5", "20", "50"]) {
  const alloc = new Allocator(d, { epsilon: eps }, 0.9);
  const piece = regressionPiece(alloc, { t: o.engine.table("d"), where: undefined }, "mass", ["flipper", "species"], []);
  let cap: any;
  await piece.run(o.engine, { finish: async (n: any, r: any, data: any) => { cap = { r, data }; return []; } } as any);
  const t0 = performance.now();
  for (let s = 0; s < 5; s++) {
  const rows = FINISHERS.moments(cap.r, cap.data, new Bits(seededBytes(s)));
  console.log(eps, rows.map(r => `${r.value} [${r.low}, ${r.high}]`).join(" | "));
  }
  console.log((performance.now() - t0) / 5, "ms");
  }
  await o.engine.close();
});
