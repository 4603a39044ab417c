/**
 * `npm run bench:data`: DP aggregates over Parquet files queried in place (issue 12), each as a
 * ratio to plain SQL over the same files on the same DuckDB engine in the same run; the curator's
 * peak memory; and the time from curator start to its first answer.
 *
 *   node dist/bench/data-in-place.js [--rows N] [--runs R] [--memory 2GB] [--threads T]
 *
 * The data (default 100M rows × 6 columns, the generator of data.ts: a unit id with about 4 rows
 * per unit, an integer, a number partly beyond its range, a category, a date, a boolean) is written
 * ONCE into .hush/bench/inplace-v1-<rows>/ as Parquet files of 10M rows each, generated inside
 * DuckDB from range() (deterministic), and reused by later runs.
 *
 * DP path: Answerer.prepare + compute (bounding, exact noise, intervals), as the curator runs it.
 * Plain path: the same aggregate as plain SQL over read_parquet of the same files, on the same
 * DuckDB instance: count(*), sum(amount), sum(age), avg(amount) GROUP BY region, median(amount). Plain SQL
 * neither clamps nor bounds, so the ratio shows everything DP adds, including reading values
 * through the in-place view. Timed alternately (harness.timePair). Not part of `npm run bench`.
 */
import fs from "node:fs";
import os from "node:os";
import path from "node:path";
import { DuckDBInstance } from "@duckdb/node-api";
import { CuratorClient } from "../runtime/client/client.js";
import { Bits, cryptoBytes } from "../runtime/core/index.js";
import { Answerer } from "../runtime/curator/answer.js";
import { DuckDBEngine } from "../runtime/curator/engines/duckdb/engine.js";
import { loadPolicy } from "../runtime/curator/policy.js";
import type { QueryPlan } from "../runtime/protocol/messages.js";
import { BENCH_ANALYST, BENCH_DATASET } from "./bench-policy.js";
import { CuratorProcess } from "./curator-process.js";
import { BENCH_COLUMNS, BENCH_UNIT_COLUMN, benchSelectSql } from "./data.js";
import { fmtMs, fmtRatio, fmtTiming, machineFacts, machineMarkdown, markdownTable, progress, summarize, timePair } from "./harness.js";
import { type Workspace, writeWorkspace } from "./workspace.js";

const FILE_ROWS = 10_000_000;
export const TARGET_NO_UNIT = 1.3;
export const TARGET_WITH_UNIT = 2;
export const RSS_TARGET_BYTES = 2 * 2 ** 30;
export const FIRST_ANSWER_TARGET_MS = 5000;

function arg(name: string, dflt: string): string {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 && process.argv[i + 1] !== undefined ? process.argv[i + 1] : dflt;
}

const label = (n: number) => (n >= 1e6 ? `${n / 1e6}M` : String(n));
const gib = (b: number) => `${(b / 2 ** 30).toFixed(2)} GiB`;

/** The folder of Parquet parts with `rows` rows in total, generating missing parts first. */
export async function ensureInPlaceData(rows: number, dir = path.resolve(".hush/bench")): Promise<string> {
  const folder = path.join(dir, `inplace-v1-${rows}`);
  fs.mkdirSync(folder, { recursive: true });
  const parts = Math.ceil(rows / FILE_ROWS);
  for (let p = 0; p < parts; p++) {
    const file = path.join(folder, `part-${String(p).padStart(3, "0")}.parquet`);
    if (fs.existsSync(file)) continue;
    progress(`data in place: generating part ${p + 1}/${parts} (${label(Math.min(FILE_ROWS, rows - p * FILE_ROWS))} rows)`);
    const tmp = `${file}.${process.pid}.tmp`;
    const db = await DuckDBInstance.create(":memory:");
    const con = await db.connect();
    try {
      // benchSelectSql over the part's own row numbers: the same rows as one big file would hold.
      const sql = benchSelectSql(rows).replace(/FROM range\(\d+\) t\(i\)/, `FROM range(${p * FILE_ROWS}, ${Math.min(rows, (p + 1) * FILE_ROWS)}) t(i)`);
      await con.run(`COPY (${sql}) TO '${tmp.replace(/'/g, "''")}' (FORMAT parquet, ROW_GROUP_SIZE 122880)`);
    } finally {
      con.closeSync();
      db.closeSync();
    }
    fs.renameSync(tmp, file);
  }
  return folder;
}

function workspace(folder: string, unit: boolean, limits: { memory: string; threads: number }): Workspace {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), "hush-inplace-"));
  const ws = writeWorkspace(dir, {
    analysts: [BENCH_ANALYST],
    datasets: {
      [BENCH_DATASET]: {
        description: "Generated bench rows, Parquet in place",
        source: { files: path.join(folder, "*.parquet") } as unknown as string,
        ...(unit ? { unit: { column: BENCH_UNIT_COLUMN, maxRows: 8, maxGroups: 2 } } : {}),
        accounting: { mode: "pure", cap: { epsilon: "1000000" } },
        analysts: [BENCH_ANALYST],
        columns: BENCH_COLUMNS as unknown as Record<string, unknown>,
      },
    },
  });
  // A generous time limit: a bench measures how long releases take, it must not refuse them.
  const text = fs.readFileSync(ws.policyFile, "utf8").replace(/^curator:\n/m, "curator:\n  answering: { timeLimit: 3600 }\n");
  if (!text.includes("timeLimit: 3600")) throw new Error("bench policy: no curator section to extend");
  fs.writeFileSync(ws.policyFile, `engine: { memoryLimit: "${limits.memory}", threads: ${limits.threads} }\n${text}`);
  return ws;
}

interface Query {
  name: string;
  plan: (eps: string) => QueryPlan;
  sql: (files: string) => string;
}

const QUERIES: Query[] = [
  { name: "count", plan: (e) => ({ v: 1, dataset: BENCH_DATASET, measure: { kind: "count" }, privacy: { epsilon: e } }), sql: (f) => `SELECT count(*) FROM ${f}` },
  {
    name: "clamped sum",
    plan: (e) => ({ v: 1, dataset: BENCH_DATASET, measure: { kind: "sum", column: "amount" }, privacy: { epsilon: e } }),
    sql: (f) => `SELECT sum(amount) FROM ${f}`,
  },
  {
    // An INTEGER column on a step of 1: converted in integer arithmetic (columns.ts integerPath).
    name: "clamped sum (integer column)",
    plan: (e) => ({ v: 1, dataset: BENCH_DATASET, measure: { kind: "sum", column: "age" }, privacy: { epsilon: e } }),
    sql: (f) => `SELECT sum(age) FROM ${f}`,
  },
  {
    name: "grouped mean (8 regions)",
    plan: (e) => ({ v: 1, dataset: BENCH_DATASET, groupBy: [{ column: "region" }], measure: { kind: "mean", column: "amount" }, privacy: { epsilon: e } }),
    sql: (f) => `SELECT region, avg(amount), count(amount) FROM ${f} GROUP BY 1`,
  },
  {
    name: "median",
    plan: (e) => ({ v: 1, dataset: BENCH_DATASET, measure: { kind: "quantile", column: "amount", p: [0.5] }, privacy: { epsilon: e } }),
    sql: (f) => `SELECT median(amount) FROM ${f}`,
  },
];

interface Row {
  unit: boolean;
  query: string;
  dp: ReturnType<typeof summarize>;
  plain: ReturnType<typeof summarize>;
  ratio: number;
}

async function ratios(folder: string, unit: boolean, runs: number, limits: { memory: string; threads: number }): Promise<{ rows: Row[]; openMs: number }> {
  const ws = workspace(folder, unit, limits);
  const policy = loadPolicy(ws.policyFile);
  const t0 = performance.now();
  const engine = await DuckDBEngine.open(policy, { quiet: true });
  const openMs = performance.now() - t0;
  const files = `read_parquet('${path.join(folder, "*.parquet").replace(/'/g, "''")}')`;
  const out: Row[] = [];
  try {
    const answerer = new Answerer(engine, policy);
    for (const q of QUERIES) {
      progress(`data in place: ${unit ? "with unit" : "no unit"}: ${q.name}`);
      let k = 0;
      const dp = async () => {
        const prepared = answerer.prepare(BENCH_ANALYST, q.plan(`0.5${String(++k).padStart(6, "0")}`));
        await prepared.compute(new Bits(cryptoBytes));
      };
      const plain = () => engine.query(q.sql(files), []);
      // A count takes milliseconds, where a few runs are mostly noise: at least 21 of them.
      const t = await timePair(dp, plain, { warmup: 1, runs: q.name === "count" ? Math.max(runs, 21) : runs });
      const d = summarize(t.measured);
      const p = summarize(t.baseline);
      out.push({ unit, query: q.name, dp: d, plain: p, ratio: d.median / p.median });
      progress(`data in place: ${unit ? "with unit" : "no unit"}: ${q.name}: DP ${fmtTiming(d)}, plain ${fmtTiming(p)}, ratio ${fmtRatio(d.median / p.median)}`);
    }
  } finally {
    await engine.close();
    fs.rmSync(ws.dir, { recursive: true, force: true });
  }
  return { rows: out, openMs };
}

/**
 * The real curator process: time from spawn to its first answer, and its peak RSS after the four
 * asks; started twice on one workspace, so the second start shows what the first one kept (the
 * per-unit order of in-place files).
 */
async function curatorRuns(folder: string, unit: boolean, limits: { memory: string; threads: number }): Promise<{ firstMs: number; readyMs: number; hwm: number }[]> {
  const ws = workspace(folder, unit, limits);
  const out: { firstMs: number; readyMs: number; hwm: number }[] = [];
  try {
    for (let start = 0; start < 2; start++) {
      const listen = `ipc://${path.join(ws.dir, `c${start}.sock`)}`;
      const t0 = performance.now();
      const proc = await CuratorProcess.start({ policyFile: ws.policyFile, listen, startTimeoutMs: 1_800_000 });
      const readyMs = performance.now() - t0;
      try {
        const client = await CuratorClient.connect({ address: listen, analyst: BENCH_ANALYST, token: ws.tokens[BENCH_ANALYST], timeoutMs: 1_800_000 });
        let firstMs = 0;
        try {
          await client.ask(QUERIES[0].plan(`0.1${start}`));
          firstMs = performance.now() - t0;
          for (const q of QUERIES.slice(1)) await client.ask(q.plan(`0.1${start}`));
        } finally {
          await client.close();
        }
        const mem = proc.memory();
        out.push({ firstMs, readyMs, hwm: mem?.hwm ?? NaN });
      } finally {
        await proc.stop();
      }
    }
  } finally {
    fs.rmSync(ws.dir, { recursive: true, force: true });
  }
  return out;
}

async function main(): Promise<void> {
  const rows = Number(arg("rows", "100000000"));
  const runs = Number(arg("runs", "3"));
  const limits = { memory: arg("memory", "1GB"), threads: Number(arg("threads", String(Math.max(1, os.availableParallelism())))) };
  if (!Number.isSafeInteger(rows) || rows < 1 || !Number.isSafeInteger(runs) || runs < 1) throw new Error("--rows and --runs must be positive integers");
  const folder = await ensureInPlaceData(rows);
  const all: Row[] = [];
  const opens: { unit: boolean; ms: number }[] = [];
  const procs: { unit: boolean; start: number; firstMs: number; readyMs: number; hwm: number }[] = [];
  for (const unit of [false, true]) {
    progress(`data in place: curator process, ${unit ? "with unit" : "no unit"}`);
    const runs2 = await curatorRuns(folder, unit, limits);
    runs2.forEach((run, start) => {
      procs.push({ unit, start, ...run });
      progress(`data in place: curator ${unit ? "with unit" : "no unit"}, start ${start + 1}: ready ${fmtMs(run.readyMs)}, first answer ${fmtMs(run.firstMs)}, peak RSS ${gib(run.hwm)}`);
    });
    const r = await ratios(folder, unit, runs, limits);
    all.push(...r.rows);
    opens.push({ unit, ms: r.openMs });
  }
  const table = markdownTable(
    ["privacy unit", "query", "runs", "DP median (min–max)", "plain SQL median (min–max)", "ratio", "target", "met"],
    all.map((r) => {
      const target = r.unit ? TARGET_WITH_UNIT : TARGET_NO_UNIT;
      return [r.unit ? "pid, ≤8 rows" : "each row", r.query, String(r.dp.n), fmtTiming(r.dp), fmtTiming(r.plain), fmtRatio(r.ratio), `≤ ${fmtRatio(target)}`, r.ratio <= target ? "yes" : "**no**"];
    }),
  );
  const proc = markdownTable(
    ["privacy unit", "curator start", "engine open (in process, first start)", "curator ready", "first answer (from spawn)", "target ≤ 5 s", "peak RSS (VmHWM)", "target ≤ 2 GiB"],
    procs.map((p) => [
      p.unit ? "pid, ≤8 rows" : "each row",
      p.start === 0 ? "first" : "second (same files)",
      fmtMs(opens.find((o) => o.unit === p.unit)!.ms),
      fmtMs(p.readyMs),
      fmtMs(p.firstMs),
      p.firstMs <= FIRST_ANSWER_TARGET_MS ? "yes" : "**no**",
      gib(p.hwm),
      p.hwm <= RSS_TARGET_BYTES ? "yes" : "**no**",
    ]),
  );
  const md =
    `## Data in place: ${label(rows)} rows × 6 columns, Parquet (${Math.ceil(rows / FILE_ROWS)} files)\n\n` +
    `DuckDB memory_limit ${limits.memory}, threads ${limits.threads}.\n\n${table}\n\n${proc}\n\n${machineMarkdown(machineFacts())}\n`;
  process.stdout.write(md);
  const out = path.resolve(".hush/bench/data-in-place.md");
  fs.writeFileSync(out, md);
  progress(`data in place: written to ${out}`);
}

if (process.argv[1] !== undefined && /data-in-place\.(js|ts)$/.test(process.argv[1])) {
  main().catch((e: unknown) => {
    process.stderr.write(`${e instanceof Error ? (e.stack ?? e.message) : String(e)}\n`);
    process.exitCode = 1;
  });
}
