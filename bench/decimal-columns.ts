/**
 * `node dist/bench/decimal-columns.js [--rows N] [--runs R]`: the same cents stored two ways in
 * one Parquet file queried in place, DOUBLE and DECIMAL(12,2), each declared as a number on a step
 * of 0.01 over [0, 1000] (values run to 1199.99, so about a sixth clamp). A DOUBLE value is
 * converted through binary64 (`round(x / step)`); a DECIMAL value on its grid in exact decimal
 * arithmetic (engines/duckdb/columns.ts decimalPath). Each DP aggregate (Answerer.prepare +
 * compute, exact noise and intervals) is a ratio to plain SQL over the same column on the same
 * DuckDB engine in the same run (harness.timePair). The file (default 20M rows) is generated once
 * into .hush/bench/. Not part of `npm run bench`.
 */
import fs from "node:fs";
import os from "node:os";
import path from "node:path";
import { DuckDBInstance } from "@duckdb/node-api";
import { Bits, cryptoBytes } from "../runtime/core/index.js";
import { Answerer } from "../runtime/curator/answer.js";
import { DuckDBEngine } from "../runtime/curator/engines/duckdb/engine.js";
import { loadPolicy } from "../runtime/curator/policy.js";
import type { QueryPlan } from "../runtime/protocol/messages.js";
import { BENCH_REGIONS } from "./data.js";
import { fmtRatio, fmtTiming, machineFacts, machineMarkdown, markdownTable, progress, summarize, timePair } from "./harness.js";
import { writeWorkspace } from "./workspace.js";

const ANALYST = "bench";
const DATASET = "cents";

function arg(name: string, dflt: string): string {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 && process.argv[i + 1] !== undefined ? process.argv[i + 1] : dflt;
}

/** The Parquet file with `rows` rows, generated first if absent (deterministic, from range()). */
async function ensureData(rows: number): Promise<string> {
  const dir = path.resolve(".hush/bench");
  fs.mkdirSync(dir, { recursive: true });
  const file = path.join(dir, `decimal-v1-${rows}.parquet`);
  if (fs.existsSync(file)) return file;
  progress(`decimal columns: generating ${rows} rows`);
  const tmp = `${file}.${process.pid}.tmp`;
  const db = await DuckDBInstance.create(":memory:");
  const con = await db.connect();
  try {
    const regions = `[${BENCH_REGIONS.map((r) => `'${r}'`).join(", ")}]`;
    await con.run(
      `COPY (SELECT CAST((hash(i, 3) % 120000) / 100.0 AS DOUBLE) AS amount_f, CAST((hash(i, 3) % 120000) / 100.0 AS DECIMAL(12,2)) AS amount_d, ` +
        `(${regions})[1 + (hash(i, 4) % 8)::INTEGER] AS region FROM range(${rows}) t(i)) TO '${tmp.replace(/'/g, "''")}' (FORMAT parquet, ROW_GROUP_SIZE 122880)`,
    );
  } finally {
    con.closeSync();
    db.closeSync();
  }
  fs.renameSync(tmp, file);
  return file;
}

interface Query {
  name: string;
  plan: (column: string, eps: string) => QueryPlan;
  sql: (column: string, file: string) => string;
}

const QUERIES: Query[] = [
  {
    name: "clamped sum",
    plan: (c, e) => ({ v: 1, dataset: DATASET, measure: { kind: "sum", column: c }, privacy: { epsilon: e } }),
    sql: (c, f) => `SELECT sum(${c}) FROM ${f}`,
  },
  {
    name: "grouped mean (8 regions)",
    plan: (c, e) => ({ v: 1, dataset: DATASET, groupBy: [{ column: "region" }], measure: { kind: "mean", column: c }, privacy: { epsilon: e } }),
    sql: (c, f) => `SELECT region, avg(${c}), count(${c}) FROM ${f} GROUP BY 1`,
  },
];

async function main(): Promise<void> {
  const rows = Number(arg("rows", "20000000"));
  const runs = Number(arg("runs", "5"));
  if (!Number.isSafeInteger(rows) || rows < 1 || !Number.isSafeInteger(runs) || runs < 1) throw new Error("--rows and --runs must be positive integers");
  const file = await ensureData(rows);
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), "hush-decimal-"));
  const column = { type: "number", range: [0, 1000], step: "0.01" };
  const ws = writeWorkspace(dir, {
    analysts: [ANALYST],
    datasets: {
      [DATASET]: {
        description: "Generated cents, DOUBLE and DECIMAL(12,2), Parquet in place",
        source: { files: file } as unknown as string,
        accounting: { mode: "pure", cap: { epsilon: "1000000" } },
        analysts: [ANALYST],
        columns: { amount_f: column, amount_d: column, region: { type: "category", values: [...BENCH_REGIONS] } },
      },
    },
  });
  const text = fs.readFileSync(ws.policyFile, "utf8").replace(/^curator:\n/m, "curator:\n  answering: { timeLimit: 3600 }\n");
  fs.writeFileSync(ws.policyFile, `engine: { memoryLimit: "1GB", threads: ${Math.max(1, os.availableParallelism())} }\n${text}`);
  const policy = loadPolicy(ws.policyFile);
  const engine = await DuckDBEngine.open(policy, { quiet: true });
  const out: string[][] = [];
  try {
    const answerer = new Answerer(engine, policy);
    const parquet = `read_parquet('${file.replace(/'/g, "''")}')`;
    for (const q of QUERIES) {
      for (const [c, type] of [["amount_f", "DOUBLE"], ["amount_d", "DECIMAL(12,2)"]] as const) {
        progress(`decimal columns: ${q.name}, ${type}`);
        let k = 0;
        const dp = async () => {
          const prepared = answerer.prepare(ANALYST, q.plan(c, `0.5${String(++k).padStart(6, "0")}`));
          await prepared.compute(new Bits(cryptoBytes));
        };
        const t = await timePair(dp, () => engine.query(q.sql(c, parquet), []), { warmup: 1, runs });
        const d = summarize(t.measured);
        const p = summarize(t.baseline);
        out.push([q.name, type, String(d.n), fmtTiming(d), fmtTiming(p), fmtRatio(d.median / p.median)]);
      }
    }
  } finally {
    await engine.close();
    fs.rmSync(dir, { recursive: true, force: true });
  }
  const table = markdownTable(["query", "column type", "runs", "DP median (min–max)", "plain SQL median (min–max)", "ratio"], out);
  process.stdout.write(`## Cents as DOUBLE and as DECIMAL(12,2), ${rows} rows, Parquet in place\n\n${machineMarkdown(machineFacts())}\n\n${table}\n`);
}

main().catch((e: unknown) => {
  process.stderr.write(`decimal columns bench failed: ${e instanceof Error ? e.stack : String(e)}\n`);
  process.exit(1);
});
