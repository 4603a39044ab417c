/**
 * Quantile asks end to end, at the epsilons where the exponential mechanism's base is near 1 (a
 * small epsilon per quantile, or a quantile with a large denominator such as 0.048 = 6/125).
 *
 * A real curator process (ipc, pacing off so the figure is the work, not its reply slot) holds a
 * generated dataset of 20,000 rows whose amounts sit in the lowest few of 2001 candidates (a
 * range of [0, 10^6] on a 0.001 grid, thinned): the weight is on one or two candidates, so most
 * proposals are rejected, the worst case for the draw (docs/methods.md §15). Each ask is at a fresh
 * epsilon (no replay). Baseline, measured alternately in the same run: a DP count of the same
 * dataset at the same epsilon (the cheapest release on the same path: sign-in, plan, SQL, noise,
 * ledger, signing). No target is set for these; the figures show what an analyst waits.
 */
import fs from "node:fs";
import os from "node:os";
import path from "node:path";
import { stringify, parse } from "yaml";
import { CuratorClient } from "../runtime/client/client.js";
import type { QueryPlan } from "../runtime/protocol/messages.js";
import { CuratorProcess } from "./curator-process.js";
import { fmtRatio, fmtTiming, markdownTable, progress, summarize } from "./harness.js";
import { writeWorkspace } from "./workspace.js";

const ANALYST = "quinn";
const DATASET = "payments";

function workspace(): { dir: string; policyFile: string; token: string } {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), "hush-qbench-"));
  const lines = ["pid,amount"];
  for (let i = 0; i < 20_000; i++) lines.push(`${i % 5000},${(i * 7919) % 1000}.25`);
  fs.mkdirSync(path.join(dir, "data"));
  fs.writeFileSync(path.join(dir, "data", "payments.csv"), lines.join("\n") + "\n");
  const ws = writeWorkspace(dir, {
    analysts: [ANALYST],
    datasets: {
      [DATASET]: {
        description: "Generated payments for the quantile bench",
        source: "data/payments.csv",
        unit: { column: "pid", maxRows: 4, maxGroups: 1 },
        accounting: { mode: "pure", cap: { epsilon: "1000000" } },
        analysts: [ANALYST],
        columns: { amount: { type: "number", range: [0, 1000000], step: "0.001" } },
      },
    },
  });
  // Pacing off: the figure is the work itself.
  const doc = parse(fs.readFileSync(ws.policyFile, "utf8")) as { curator: Record<string, unknown> };
  doc.curator.answering = { pace: 0 };
  fs.writeFileSync(ws.policyFile, stringify(doc));
  return { dir, policyFile: ws.policyFile, token: ws.tokens[ANALYST] };
}

/** k evenly spaced quantiles with three decimals (so most have denominators of 125 to 1000). */
function spaced(k: number): number[] {
  return Array.from({ length: k }, (_, i) => Number(((i + 1) / (k + 1)).toFixed(3)));
}

export async function benchQuantileAsks(opts: { quick: boolean }): Promise<string> {
  const runs = opts.quick ? 2 : 5;
  const ws = workspace();
  const proc = await CuratorProcess.start({ policyFile: ws.policyFile, listen: `ipc://${path.join(ws.dir, "c.sock")}` });
  try {
    const client = await CuratorClient.connect({ address: proc.address, analyst: ANALYST, token: ws.token, timeoutMs: 120_000 });
    try {
      let fresh = 0;
      // A fresh epsilon for every ask: base + a tiny distinct step, written as an exact decimal.
      const eps = (base: number) => (base * (1 + ++fresh / 1e6)).toPrecision(12);
      let refused = 0;
      // A refusal (the curator's time limit) counts at its time, and is reported.
      const ask = async (measure: QueryPlan["measure"], base: number): Promise<number> => {
        const t0 = performance.now();
        await client.ask({ v: 1, dataset: DATASET, measure, privacy: { epsilon: eps(base) } }).catch(() => refused++);
        return performance.now() - t0;
      };
      for (let i = 0; i < 3; i++) await ask({ kind: "count" }, 0.5); // warm-up: sign-in, JIT, workers
      const cases: { label: string; measure: QueryPlan["measure"]; epsilon: number }[] = [
        { label: "median", measure: { kind: "quantile", column: "amount", p: [0.5] }, epsilon: 0.5 },
        { label: "5 quantiles (1/6 ... 5/6 to 3 decimals)", measure: { kind: "quantile", column: "amount", p: spaced(5) }, epsilon: 0.5 },
        { label: "20 quantiles", measure: { kind: "quantile", column: "amount", p: spaced(20) }, epsilon: 0.5 },
        { label: "20 quantiles", measure: { kind: "quantile", column: "amount", p: spaced(20) }, epsilon: 0.001 },
        { label: "median", measure: { kind: "quantile", column: "amount", p: [0.5] }, epsilon: 1e-5 },
      ];
      const rows: string[][] = [];
      for (const c of cases) {
        progress(`quantile asks: ${c.label} at epsilon ${c.epsilon}`);
        refused = 0;
        const measured: number[] = [];
        const baseline: number[] = [];
        for (let r = 0; r < runs; r++) {
          measured.push(await ask(c.measure, c.epsilon));
          baseline.push(await ask({ kind: "count" }, c.epsilon));
        }
        const a = summarize(measured);
        const b = summarize(baseline);
        rows.push([c.label, String(c.epsilon), fmtTiming(a), String(refused), fmtTiming(b), fmtRatio(a.median / b.median)]);
      }
      return (
        markdownTable(["quantile ask (20,000 rows, 2001 candidates)", "epsilon", "ask", "refused", "DP count, same epsilon", "ratio"], rows) +
        `\n\n${runs} asks each, alternating with the count, pacing off, real curator over ipc.`
      );
    } finally {
      await client.close();
    }
  } finally {
    await proc.kill9();
    fs.rmSync(ws.dir, { recursive: true, force: true });
  }
}
