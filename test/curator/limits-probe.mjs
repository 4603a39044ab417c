// Child process for test/curator/answer-limits.test.ts: runs plans through a real Answerer (built
// dist/, real DuckDB on the given policy) and prints one JSON line per plan. Run in a child so that
// a plan that never returns fails the test by its timeout instead of freezing the test runner.
import { readFileSync } from "node:fs";
import { Answerer } from "../../dist/runtime/curator/answer.js";
import { DuckDBEngine } from "../../dist/runtime/curator/engines/duckdb/engine.js";
import { loadPolicy } from "../../dist/runtime/curator/policy.js";
import { Bits, cryptoBytes } from "../../dist/runtime/core/index.js";

const { policy: file, plans, ask } = JSON.parse(readFileSync(0, "utf8"));
const policy = loadPolicy(file);
const engine = await DuckDBEngine.open(policy, { quiet: true });
const answerer = new Answerer(engine, policy);
for (const plan of plans) {
  const t0 = performance.now();
  let out;
  try {
    const p = await answerer.preview("ada", plan);
    const previewMs = performance.now() - t0;
    let rows = null;
    let askMs = null;
    if (ask) {
      const t1 = performance.now();
      const r = await answerer.prepare("ada", plan).compute(new Bits(cryptoBytes));
      askMs = performance.now() - t1;
      rows = r.rows.length;
    }
    out = { ok: true, cost: p.prepared.cost.toString(), halfWidths: p.halfWidths.map((h) => h.halfWidth), rows, previewMs, askMs };
  } catch (e) {
    out = { ok: false, name: e instanceof Error ? e.name : "unknown", message: e instanceof Error ? e.message : String(e), ms: performance.now() - t0 };
  }
  process.stdout.write(`${JSON.stringify(out)}\n`);
}
await answerer.close();
await engine.close();
