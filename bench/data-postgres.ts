/**
 * PostgreSQL bench (npm run bench:pg; not part of npm run bench): DP aggregates through the
 * PostgreSQL engine against plain SQL on the same engine, measured alternately in one run
 * (harness.timePair):
 *
 *   - N rows (default 10M; HUSH_BENCH_PG_ROWS) in one PostgreSQL 15 table;
 *   - the same N rows over 3 local shards (postgres_fdw foreign partitions, hash on the unit), where
 *     plain SQL runs over the same partitioned table on the coordinator.
 * HUSH_BENCH_PG_WHERE=single or shards measures one of the two set-ups only.
 * HUSH_BENCH_PG_INDEX=1 adds a B-tree index on the unit column (patient) before VACUUM ANALYZE (on
 * each shard's partition over shards), as a steward may: PostgreSQL can then count each unit's rows
 * from an index-only scan in unit order instead of hashing every row.
 *
 * Each with each row its own unit and with a privacy unit (patient, maxRows 2: every unit of ~3
 * rows is bounded, so the per-unit window always runs). The DP path is Answerer.prepare + compute
 * (validation, planning, the engine's SQL, exact noise, intervals); the plain twin is the same
 * aggregate written directly (LEAST/GREATEST clamp, percentile_disc for the median). With a unit, a
 * second plain twin bounds by hand the way the engine does (a window over each patient's rows in a
 * hash order of their row ids), to separate what bounding itself costs from what hush adds.
 *
 * Clusters are throwaway (initdb/pg_ctl on free 127.0.0.1 ports, test/helpers/pg-cluster.ts) and
 * removed at the end. Target: DP/plain <= 1.3x. Results print as Markdown for bench/RESULTS.md.
 */
import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { Bits, cryptoBytes } from "../runtime/core/index.js";
import { Answerer } from "../runtime/curator/answer.js";
import { PostgresEngine } from "../runtime/curator/engines/postgres/engine.js";
import { loadPolicy } from "../runtime/curator/policy.js";
import type { QueryPlan } from "../runtime/protocol/messages.js";
import { type PgCluster, createReader, createSharded, startCluster, startShardedSet } from "../test/helpers/pg-cluster.js";
import { fmtRatio, fmtTiming, machineFacts, machineMarkdown, markdownTable, progress, summarize, timeOnce, timePair, type Summary } from "./harness.js";

const ROWS = Number(process.env.HUSH_BENCH_PG_ROWS ?? 10_000_000);
const RUNS = Number(process.env.HUSH_BENCH_PG_RUNS ?? 3);
/** Which set-ups to measure: "single", "shards" or both (default; HUSH_BENCH_PG_WHERE). */
const WHERE = process.env.HUSH_BENCH_PG_WHERE ?? "both";
if (!["single", "shards", "both"].includes(WHERE)) throw new Error("HUSH_BENCH_PG_WHERE: single, shards or both");
const INDEX = process.env.HUSH_BENCH_PG_INDEX === "1";
const TARGET = 1.3;
const COLUMNS = "patient bigint, age integer, income numeric(12,2), region text";
const REGIONS = ["north", "south", "east", "west", "harbour", "hills", "centre", "airport"];
const CONF = ["work_mem = '64MB'", "max_parallel_workers_per_gather = 2", "jit = off"];

/** Deterministic rows g = 1..N: about 3 rows per patient. */
function selectRows(n: number): string {
  const regions = REGIONS.map((r) => `'${r}'`).join(", ");
  return (
    `SELECT (g % ${Math.max(1, Math.floor(n / 3))})::bigint, ((g * 37) % 100)::int, (((g::bigint * 7727) % 6000000) / 100.0)::numeric(12,2), ` +
    `(ARRAY[${regions}])[1 + g % 8] FROM generate_series(1, ${n}) g`
  );
}

interface Query {
  name: string;
  plan: (dataset: string, eps: string) => QueryPlan;
  plain: string;
  /** The same aggregate with per-unit bounding written by hand (at most 2 rows per patient). */
  bounded: string;
}

/** Each patient's rows in a random order of their row ids; m: among the first 2. */
const KEPT = "(SELECT *, row_number() OVER (PARTITION BY patient ORDER BY hashtextextended(ctid::text, 7)) <= 2 AS m FROM visits WHERE patient IS NOT NULL) w";

const QUERIES: Query[] = [
    {
    name: "count",
    plan: (d, e) => ({ v: 1, dataset: d, measure: { kind: "count" }, privacy: { epsilon: e } }),
    plain: "SELECT count(*) FROM visits",
    bounded: "SELECT sum(LEAST(n, 2)) FROM (SELECT count(*) AS n FROM visits WHERE patient IS NOT NULL GROUP BY patient) u",
  },
  {
    name: "clamped sum",
    plan: (d, e) => ({ v: 1, dataset: d, measure: { kind: "sum", column: "income" }, privacy: { epsilon: e } }),
    plain: "SELECT sum(LEAST(GREATEST(income, 0), 50000)) FROM visits",
    bounded: `SELECT sum(LEAST(GREATEST(income, 0), 50000)) FILTER (WHERE m) FROM ${KEPT}`,
  },
  {
    name: "grouped mean (8 regions)",
    plan: (d, e) => ({ v: 1, dataset: d, groupBy: [{ column: "region" }], measure: { kind: "mean", column: "income" }, privacy: { epsilon: e } }),
    plain: "SELECT region, sum(LEAST(GREATEST(income, 0), 50000)), count(income) FROM visits GROUP BY 1",
    bounded: `SELECT region, sum(LEAST(GREATEST(income, 0), 50000)) FILTER (WHERE m), count(income) FILTER (WHERE m) FROM ${KEPT} GROUP BY 1`,
  },
  {
    name: "median",
    plan: (d, e) => ({ v: 1, dataset: d, measure: { kind: "quantile", column: "income", p: [0.5] }, privacy: { epsilon: e } }),
    plain: "SELECT percentile_disc(0.5) WITHIN GROUP (ORDER BY income) FROM visits",
    bounded: `SELECT percentile_disc(0.5) WITHIN GROUP (ORDER BY income) FROM ${KEPT} WHERE m`,
  },
];

interface Row {
  where: string;
  unit: boolean;
  query: string;
  dp: Summary;
  plain: Summary;
  ratio: number;
  /** With a unit: plain SQL with the same per-unit bounding written by hand, and DP's ratio to it. */
  bounded: Summary | null;
  boundedRatio: number | null;
}

function policyText(port: number, user: string): string {
  const src = `{ postgres: { host: "127.0.0.1", port: ${port}, database: postgres, user: ${user}, table: visits, passwordFile: pw.txt } }`;
  const cols = `    columns:
      age:    { type: integer, range: [0, 100] }
      income: { type: number, range: [0, 50000], step: "0.01" }
      region: { type: category, values: [${REGIONS.join(", ")}] }
`;
  const acct = `    accounting: { mode: pure, cap: { epsilon: "1000000" } }\n    analysts: [bench]\n`;
  return (
    `curator:\n  answering: { timeLimit: 3600 }\nanalysts:\n  bench: { token: "scrypt$16384$8$1$aHVzaC1maXh0dXJlLWJlbg==$Dod8/ASkBkjqXo5ytb54+51eC/kEbNghB+k6OLZ/7i0=" }\ndatasets:\n` +
    `  rows:\n    source: ${src}\n${acct}${cols}` +
    `  units:\n    source: ${src}\n    unit: { column: patient, maxRows: 2 }\n${acct}${cols}`
  );
}

async function measure(where: string, coordinator: PgCluster, reader: { user: string; password: string }, out: Row[]): Promise<void> {
  const dir = mkdtempSync(join(tmpdir(), "hush-bench-pg-"));
  writeFileSync(join(dir, "pw.txt"), `${reader.password}\n`);
  writeFileSync(join(dir, "policy.yaml"), policyText(coordinator.port, reader.user));
  const policy = loadPolicy(join(dir, "policy.yaml"));
  const engine = await PostgresEngine.open(policy, { datasets: [...policy.datasets.values()], quiet: true });
  const answerer = new Answerer(engine, policy);
  // The plain twin runs as the same reader, with the same session settings as the engine's pool.
  const plainClient = await coordinator.connect();
  await plainClient.query("SET enable_partitionwise_aggregate = on");
  await plainClient.query("SET enable_partitionwise_join = on");
  try {
    for (const dataset of ["rows", "units"]) {
      for (const q of QUERIES) {
        progress(`bench:pg ${where} ${dataset}: ${q.name}`);
        let k = 0;
        const dp = async () => {
          const prepared = answerer.prepare("bench", q.plan(dataset, `0.5${String(++k).padStart(6, "0")}`));
          await prepared.compute(new Bits(cryptoBytes));
        };
        const plain = async () => plainClient.query(q.plain);
        const t = await timePair(dp, plain, { warmup: 1, runs: RUNS });
        const dpS = summarize(t.measured);
        const plainS = summarize(t.baseline);
        let bounded: Summary | null = null;
        if (dataset === "units") {
          const b: number[] = [];
          for (let i = 0; i < RUNS; i++) b.push(await timeOnce(() => plainClient.query(q.bounded)));
          bounded = summarize(b);
        }
        out.push({
          where, unit: dataset === "units", query: q.name, dp: dpS, plain: plainS, ratio: dpS.median / plainS.median,
          bounded, boundedRatio: bounded === null ? null : dpS.median / bounded.median,
        });
        const last = out[out.length - 1];
        progress(`  DP ${fmtTiming(last.dp)}  plain ${fmtTiming(last.plain)}  ${fmtRatio(last.ratio)}${bounded ? `  plain bounded ${fmtTiming(bounded)} ${fmtRatio(last.boundedRatio!)}` : ""}`);
      }
    }
  } finally {
    await plainClient.end();
    await engine.close();
    rmSync(dir, { recursive: true, force: true });
  }
}

async function oneServer(label: string, out: Row[], loads: string[][]): Promise<void> {
  progress(`bench:pg: one server, ${label} rows`);
  const single = await startCluster({ conf: CONF });
  try {
    const loadMs = await timeOnce(async () => {
      await single.sql(`CREATE TABLE visits (${COLUMNS})`);
      await single.sql(`INSERT INTO visits ${selectRows(ROWS)}`);
      if (INDEX) await single.sql("CREATE INDEX visits_patient ON visits (patient)");
      await single.sql("VACUUM ANALYZE visits");
    });
    loads.push(["one server", label, `${(loadMs / 1000).toFixed(1)} s`]);
    const reader = await createReader(single);
    await single.sql(`GRANT SELECT ON visits TO ${reader.user}`);
    await measure("one server", single, reader, out);
  } finally {
    await single.stop();
  }
}

async function shards(label: string, out: Row[], loads: string[][]): Promise<void> {
  progress(`bench:pg: 3 shards, ${label} rows`);
  const set = await startShardedSet(3, { conf: CONF });
  try {
    const loadMs = await timeOnce(async () => {
      await createSharded(set, "visits", COLUMNS, "HASH (patient)");
      // Each shard generates the rows whose patient hashes to its partition (the same hash the
      // coordinator routes with: satisfies_hash_partition over a partitioned twin on the shard).
      await Promise.all(
        set.shards.map(async (s, i) => {
          await s.sql(`CREATE TABLE hp (${COLUMNS}) PARTITION BY HASH (patient)`);
          await s.sql(
            `INSERT INTO visits_p${i} SELECT * FROM (${selectRows(ROWS)}) AS r(patient, age, income, region) ` +
              `WHERE satisfies_hash_partition('hp'::regclass, 3, ${i}, patient)`,
          );
          if (INDEX) await s.sql(`CREATE INDEX visits_p${i}_patient ON visits_p${i} (patient)`);
          await s.sql(`VACUUM ANALYZE visits_p${i}`);
        }),
      );
    });
    const total = Number((await set.coordinator.sql("SELECT count(*)::bigint AS n FROM visits"))[0].n);
    if (total !== ROWS) throw new Error(`shards hold ${total} rows, expected ${ROWS}`);
    loads.push(["3 shards", label, `${(loadMs / 1000).toFixed(1)} s`]);
    await measure("3 shards", set.coordinator, set.reader, out);
  } finally {
    await set.stop();
  }
}

async function main(): Promise<void> {
  const facts = machineFacts();
  const out: Row[] = [];
  const loads: string[][] = [];
  const label = ROWS >= 1_000_000 ? `${ROWS / 1_000_000}M` : String(ROWS);
  if (WHERE !== "shards") await oneServer(label, out, loads);
  if (WHERE !== "single") await shards(label, out, loads);

  const table = markdownTable(
    ["where", "rows", "privacy unit", "query", "runs", "DP median (min–max)", "plain SQL median (min–max)", "ratio of medians", "target", "met", "plain SQL with the same bounding", "DP / bounded plain"],
    out.map((r) => [
      r.where,
      label,
      r.unit ? "patient, ≤2 rows" : "each row",
      r.query,
      String(r.dp.n),
      fmtTiming(r.dp),
      fmtTiming(r.plain),
      fmtRatio(r.ratio),
      `≤ ${fmtRatio(TARGET)}`,
      r.ratio <= TARGET ? "yes" : "**no**",
      r.bounded === null ? "–" : fmtTiming(r.bounded),
      r.boundedRatio === null ? "–" : fmtRatio(r.boundedRatio),
    ]),
  );
  const loadTable = markdownTable(["where", "rows", "generate + VACUUM ANALYZE (once)"], loads);
  process.stdout.write(`## DP aggregates vs plain SQL in PostgreSQL${INDEX ? " (index on the unit column)" : ""}\n\n${machineMarkdown(facts)}\n\n${table}\n\nData generation (not part of the ratios):\n\n${loadTable}\n`);
}

main().catch((e) => {
  process.stderr.write(`bench:pg failed: ${e instanceof Error ? e.stack : String(e)}\n`);
  process.exit(1);
});
