/**
 * A real curator process (dist/runtime/curator/main.js, started by the test) over Parquet files in
 * place and over the same files copied into memory: both answer, every receipt verifies against the
 * curator key, and the receipts of the same plan agree in everything but the noisy values, the
 * times and the chain (dataset and population aside): cost, mechanisms and released rows' shape.
 * Needs dist built (npx tsc -p tsconfig.json).
 */
import fs from "node:fs";
import path from "node:path";
import { DuckDBInstance } from "@duckdb/node-api";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { CuratorClient } from "../../runtime/client/client.js";
import type { QueryPlan, Receipt } from "../../runtime/protocol/messages.js";
import { loadPublicKey, verifyReceipt } from "../../runtime/protocol/receipts.js";
import { CuratorProcess } from "../../bench/curator-process.js";
import { writeWorkspace, type Workspace } from "../../bench/workspace.js";
import { shortTempDir } from "../reliability/fixtures.js";

const COLUMNS = {
  age: { type: "integer", range: [0, 100] },
  amount: { type: "number", range: [0, 500], step: "0.5" },
  region: { type: "category", values: ["north", "south", "east"] },
};

let ws: Workspace;
let proc: CuratorProcess;
let client: CuratorClient;

beforeAll(async () => {
  const dir = shortTempDir("hush-cip-");
  fs.mkdirSync(path.join(dir, "parts"));
  const db = await DuckDBInstance.create(":memory:");
  const c = await db.connect();
  for (let p = 0; p < 3; p++) {
    await c.run(
      `COPY (SELECT 'p' || (hash(i, 1) % 700) AS pid, (hash(i, 2) % 110)::INTEGER AS age, ((hash(i, 3) % 1100) / 2.0)::DOUBLE AS amount, ` +
        `['north', 'south', 'east'][1 + (hash(i, 4) % 3)::INTEGER] AS region FROM range(${p * 1000}, ${(p + 1) * 1000}) t(i)) ` +
        `TO '${path.join(dir, "parts", `part-${p}.parquet`)}' (FORMAT parquet)`,
    );
  }
  await c.run(`COPY (SELECT * FROM read_parquet('${path.join(dir, "parts", "*.parquet")}')) TO '${path.join(dir, "all.parquet")}' (FORMAT parquet)`);
  c.closeSync();
  db.closeSync();
  const dataset = (source: unknown, population: string) => ({
    description: "Generated rows",
    source: source as string,
    population,
    unit: { column: "pid", maxRows: 3, maxGroups: 3 },
    accounting: { mode: "pure" as const, cap: { epsilon: "100" } },
    analysts: ["ada"],
    columns: COLUMNS,
  });
  ws = writeWorkspace(dir, {
    analysts: ["ada"],
    datasets: { memory: dataset("all.parquet", "people-a"), inplace: dataset({ files: "parts/*.parquet" }, "people-b") },
  });
  proc = await CuratorProcess.start({ policyFile: ws.policyFile, listen: `ipc://${path.join(dir, "c.sock")}`, startTimeoutMs: 120_000 });
  client = await CuratorClient.connect({ address: proc.address, analyst: "ada", token: ws.tokens.ada, timeoutMs: 60_000 });
});

afterAll(async () => {
  await client?.close();
  await proc?.stop();
  if (ws !== undefined) fs.rmSync(ws.dir, { recursive: true, force: true });
});

describe("a real curator over Parquet in place", () => {
  it("answers, signs verifiable receipts, and agrees with the same files in memory on everything but the noise", async () => {
    // The steward is told before the first start's one slow step, and what it found after it.
    expect(proc.stderr).toMatch(/dataset inplace: first start over these files: reading the unit column of every file to find the units above maxRows \(kept beside the ledger for later starts; `hush prepare` does this ahead of a start\)\n/);
    expect(proc.stderr).toMatch(/dataset inplace: Parquet in place, 3 files; \d+ units? above maxRows \(\d+ rows? of (it|them) copied beside the ledger\), 3000 rows in the files/);
    const key = loadPublicKey(fs.readFileSync(`${ws.keyFile}.pub`, "utf8"));
    const plans = (dataset: string): QueryPlan[] => [
      { v: 1, dataset, measure: { kind: "count" }, privacy: { epsilon: "1" } },
      { v: 1, dataset, groupBy: [{ column: "region" }], measure: { kind: "mean", column: "amount" }, privacy: { epsilon: "1" } },
      { v: 1, dataset, where: { op: "ge", column: "age", value: 50 }, measure: { kind: "quantile", column: "amount", p: [0.5] }, privacy: { epsilon: "1" } },
    ];
    const strip = (r: Receipt) => ({
      unit: r.unit,
      cost: r.cost,
      total: r.total,
      cap: r.cap,
      mechanisms: r.mechanisms,
      shape: r.result.map(([k, stat, column]) => [k, stat, column]),
    });
    const a = plans("memory");
    const b = plans("inplace");
    for (let i = 0; i < a.length; i++) {
      const ra = await client.ask(a[i]);
      const rb = await client.ask(b[i]);
      expect(verifyReceipt(ra.receipt, key).ok).toBe(true);
      expect(verifyReceipt(rb.receipt, key).ok).toBe(true);
      expect(rb.receipt.dataset).toBe("inplace");
      expect(strip(rb.receipt)).toEqual(strip(ra.receipt));
    }
  });
});
