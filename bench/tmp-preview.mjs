import fs from "node:fs"; import os from "node:os"; import path from "node:path";
import { CuratorClient } from "../dist/runtime/client/client.js";
import { CuratorProcess } from "../dist/bench/curator-process.js";
import { writeWorkspace } from "../dist/bench/workspace.js";
const dir = fs.mkdtempSync(path.join(os.tmpdir(), "hush-pv-"));
const lines = ["pid,age,region"]; for (let i = 0; i < 300; i++) lines.push(`${i % 100},${20 + ((i * 37) % 60)},${["a","b","c"][i%3]}`);
fs.mkdirSync(path.join(dir, "data")); fs.writeFileSync(path.join(dir, "data", "visits.csv"), lines.join("\n") + "\n");
const ws = writeWorkspace(dir, { analysts: ["ward"], datasets: { visits: { description: "x", source: "data/visits.csv", unit: { column: "pid", maxRows: 4, maxGroups: 2 }, accounting: { mode: "pure", cap: { epsilon: "10" } }, analysts: ["ward"], columns: { age: { type: "number", range: [0, 1000000], step: "0.001" }, region: { type: "category", values: ["a","b","c"] } } } } });
const proc = await CuratorProcess.start({ policyFile: ws.policyFile, listen: "tcp://127.0.0.1:0" });
const client = await CuratorClient.connect({ address: proc.address, analyst: "ward", token: ws.tokens.ward, curveServerKey: proc.ready.curvePublicKey, timeoutMs: 30000 });
const p20 = Array.from({ length: 20 }, (_, i) => Number(((i + 1) / 21).toFixed(3)));
const e = () => `${1 + Math.floor(Math.random() * 999999)}e-9`;
const plans = {
  count: () => ({ measure: { kind: "count" }, privacy: { epsilon: e() } }),
  sumWithin: () => ({ measure: { kind: "sum", column: "age" }, privacy: { within: 0.001 + Math.random() * 1e3, atMost: "1e9" } }),
  histWithin: () => ({ measure: { kind: "histogram", column: "age", bins: 1000 }, privacy: { within: 1 + Math.random() * 10, atMost: "1e9" }, confidence: 0.999999999999 }),
  meanEps: () => ({ measure: { kind: "mean", column: "age" }, privacy: { epsilon: e() }, confidence: 0.999999999999, assume: 1e15 }),
  stdEps: () => ({ measure: { kind: "std", column: "age" }, privacy: { epsilon: e() }, confidence: 0.999999999999, assume: 1e15 }),
  varRho: () => ({ measure: { kind: "variance", column: "age" }, privacy: { epsilon: e() }, confidence: 0.999999999999 }),
  q20: () => ({ measure: { kind: "quantile", column: "age", p: p20 }, privacy: { epsilon: e() }, confidence: 0.999999999999 }),
  describe: () => ({ measure: { kind: "describe" }, privacy: { epsilon: e() }, confidence: 0.999999999999, assume: 1e15 }),
  regr: () => ({ measure: { kind: "regression", response: "age", predictors: ["region"] }, privacy: { epsilon: e() }, confidence: 0.999999999999 }),
  meanByRegion: () => ({ measure: { kind: "mean", column: "age" }, privacy: { epsilon: e() }, confidence: 0.999999999999, groupBy: [{ column: "region" }, { column: "age", bins: 1000 }] }),
};
for (const [k, f] of Object.entries(plans)) {
  const ts = [];
  for (let r = 0; r < 6; r++) {
    const p = f();
    const t = performance.now();
    try { await client.preview({ v: 1, dataset: "visits", measure: p.measure, privacy: p.privacy, ...(p.confidence ? { confidence: p.confidence } : {}), ...(p.groupBy ? { groupBy: p.groupBy } : {}) }, p.assume); } catch (e) { if (r === 0) console.log(k, "refused:", e.message.slice(0, 120)); }
    ts.push(performance.now() - t);
  }
  console.log(k.padEnd(12), ts.map((x) => x.toFixed(1)).join(" "));
}
await client.close(); await proc.kill9(); fs.rmSync(dir, { recursive: true, force: true });
