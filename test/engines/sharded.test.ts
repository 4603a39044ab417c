/**
 * The PostgreSQL engine over a table sharded across servers: a coordinator and 3 shard clusters
 * (real PostgreSQL 15, test/helpers/pg-cluster.ts), the coordinator's table hash-partitioned on the
 * privacy unit with one postgres_fdw foreign partition per shard.
 *
 *  - true aggregates equal plain SQL over the same partitioned table and the DuckDB engine's over
 *    the same rows (Parquet in place); per-unit bounding keeps sum(min(rows, maxRows)) rows;
 *  - the shared answer-level suite (answer-suite.ts) over suite tables sharded the same way;
 *  - EXPLAIN VERBOSE shows what runs on the shards: the per-unit counts as an aggregate in the
 *    shards' Remote SQL; for other statements, a scan of only the needed columns per shard (the
 *    per-unit window runs on the coordinator: postgres_fdw does not send window functions);
 *  - the start check refuses a table partitioned on anything but exactly the unit column.
 */
import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import pg from "pg";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { Bits, seededBytes } from "../../runtime/core/index.js";
import { openEngines } from "../../runtime/curator/engines/open.js";
import { PostgresEngine } from "../../runtime/curator/engines/postgres/engine.js";
import type { CellsRequest, DataEngine } from "../../runtime/curator/engines/types.js";
import { type LoadedPolicy, loadPolicy } from "../../runtime/curator/policy.js";
import { ADA_HASH } from "../fixtures/curator-helpers.js";
import { type ShardedSet, createSharded, havePostgres, startShardedSet } from "../helpers/pg-cluster.js";
import { SUITE_COLUMNS, engineSuite } from "./answer-suite.js";
import { COLUMNS_SQL, MARKER, POLICY_COLUMNS, csvToParquet, generate, insertRows, insertSuiteRows, plainFits, suiteColumnsSql, writeCsv } from "./pg-fixture.js";

const ROWS = generate(2400, 6);
let set: ShardedSet;
let dir: string;

function pgSource(table: string): string {
  const o = { host: "127.0.0.1", port: set.coordinator.port, database: "postgres", user: set.reader.user, table, passwordFile: "pw.txt" };
  return `{ postgres: ${JSON.stringify(o)} }`;
}

function dataset(name: string, source: string, unit: string | null): string {
  return (
    `  ${name}:\n    source: ${source}\n` +
    (unit === null ? "" : `    unit: ${unit}\n`) +
    `    accounting: { mode: pure, cap: { epsilon: "10" } }\n    analysts: [ada]\n${POLICY_COLUMNS}`
  );
}

let policyCount = 0;
function policy(datasets: string): LoadedPolicy {
  const file = join(dir, `policy-${++policyCount}.yaml`);
  writeFileSync(file, `analysts:\n  ada: { token: "${ADA_HASH}" }\ndatasets:\n${datasets}`);
  return loadPolicy(file);
}

const run = havePostgres() ? describe : describe.skip;

beforeAll(async () => {
  if (!havePostgres()) return;
  set = await startShardedSet(3);
  dir = mkdtempSync(join(tmpdir(), "hush-shards-"));
  await createSharded(set, "visits", COLUMNS_SQL, "HASH (patient)");
  await createSharded(set, "by_region", COLUMNS_SQL, "HASH (region)");
  const c = await set.coordinator.connect();
  try {
    // Routed to the shards through postgres_fdw (batch_size 1000).
    await insertRows(c, "visits", ROWS);
  } finally {
    await c.end();
  }
  writeFileSync(join(dir, "pw.txt"), `${set.reader.password}\n`);
  writeCsv(join(dir, "visits.csv"), ROWS);
  await csvToParquet(join(dir, "visits.csv"), join(dir, "visits.parquet"));
}, 180_000);

afterAll(async () => {
  await set?.stop();
  if (dir) rmSync(dir, { recursive: true, force: true });
});

async function plain(sql: string): Promise<string[]> {
  const c = await set.coordinator.connect();
  try {
    const r = await c.query({ text: sql, rowMode: "array" });
    return (r.rows[0] as unknown[]).map((v) => (v === null ? "0" : String(v)));
  } finally {
    await c.end();
  }
}

run("sharded PostgreSQL (3 shards)", () => {
  let engine: PostgresEngine;
  let duck: DataEngine;
  beforeAll(async () => {
    const p = policy(
      dataset("rows", pgSource("visits"), null) +
        dataset("small", pgSource("visits"), "{ column: patient, maxRows: 10 }") +
        dataset("bounded", pgSource("visits"), "{ column: patient, maxRows: 3 }"),
    );
    engine = await PostgresEngine.open(p, { datasets: [...p.datasets.values()], quiet: true, bits: new Bits(seededBytes("shards")) });
    // DuckDB over the same rows as Parquet in place (the same rule for values that do not fit).
    const d = policy(dataset("rows", "{ files: visits.parquet }", null) + dataset("small", "{ files: visits.parquet }", "{ column: patient, maxRows: 10 }"));
    duck = await openEngines(d, { quiet: true });
  });
  afterAll(async () => {
    await engine?.close();
    await duck?.close();
  });

  it("every row reached a shard, and each shard holds only its own units", async () => {
    const counts = await Promise.all(set.shards.map(async (s, i) => Number((await s.sql(`SELECT count(*)::int AS n FROM visits_p${i}`))[0].n)));
    expect(counts.reduce((a, b) => a + b, 0)).toBe(ROWS.length);
    for (const n of counts) expect(n).toBeGreaterThan(ROWS.length / 6);
    expect(engine.access("small")).toMatch(/hash-partitioned in 3 partitions \(3 foreign\)/);
  });

  it("true aggregates equal plain SQL over the partitioned table and the DuckDB engine over the same rows", async () => {
    for (const ds of ["rows", "small"]) {
      const req: CellsRequest = {
        dataset: ds,
        keys: [],
        terms: [{ kind: "count" }, { kind: "sum", column: "age" }, { kind: "sum", column: "income" }, { kind: "sumSquares", column: "score" }, { kind: "atUpper", column: "dose" }],
      };
      const got = await engine.cells(req);
      const want = await plain(
        `SELECT count(*), sum(age_u), sum(income_u), sum(score_u * score_u), count(*) FILTER (WHERE dose > 1000) FROM (${plainFits("visits", ds === "small")}) f`,
      );
      expect(got[0].map(String)).toEqual(want);
      expect(got).toEqual(await duck.cells(req));
      const grouped: CellsRequest = {
        dataset: ds,
        keys: [{ column: "region" }, { column: "age", bins: 5 }],
        terms: [{ kind: "count" }, { kind: "sum", column: "dose" }],
        where: { op: "eq", column: "insured", value: true },
      };
      expect(await engine.cells(grouped)).toEqual(await duck.cells(grouped));
      const b = { dataset: ds, column: "score", lowerUnits: -50n, upperUnits: 50n, stride: 1n, count: 101n };
      expect(await engine.buckets(b)).toEqual(await duck.buckets(b));
    }
  });

  it("per-unit bounding across shards keeps sum(min(rows, maxRows)) rows, filtered or not", async () => {
    const per = `SELECT patient, count(*) AS n FROM (${plainFits("visits", true)}) f`;
    const [want] = await plain(`SELECT sum(LEAST(n, 3)) FROM (${per} GROUP BY patient) u`);
    const got = await engine.cells({ dataset: "bounded", keys: [], terms: [{ kind: "count" }] });
    expect(String(got[0][0])).toBe(want);
    // The window shape (grouped): cells sum to at most the same total.
    const grouped = await engine.cells({ dataset: "bounded", keys: [{ column: "insured" }], terms: [{ kind: "count" }] });
    expect(grouped[0][0] + grouped[1][0]).toBeLessThanOrEqual(BigInt(want));
    const [wantF] = await plain(`SELECT sum(LEAST(n, 3)) FROM (${per} WHERE age > 50 GROUP BY patient) u`);
    const gotF = await engine.cells({ dataset: "bounded", keys: [], terms: [{ kind: "count" }], where: { op: "gt", column: "age", value: 50 } });
    expect(String(gotF[0][0])).toBe(wantF);
  });

  async function explain(st: { sql: string; params: unknown[] }): Promise<string> {
    const c = new pg.Client({
      host: "127.0.0.1",
      port: set.coordinator.port,
      user: set.reader.user,
      password: set.reader.password,
      database: "postgres",
      options: "-c enable_partitionwise_aggregate=on -c enable_partitionwise_join=on",
    });
    await c.connect();
    try {
      const r = await c.query(`EXPLAIN (VERBOSE, COSTS OFF) ${st.sql}`, st.params);
      return r.rows.map((x) => String(x["QUERY PLAN"])).join("\n");
    } finally {
      await c.end();
    }
  }

  it("EXPLAIN VERBOSE: the per-unit counts are aggregated on each shard", async () => {
    const plan = await explain(engine.cellsStatement({ dataset: "bounded", keys: [], terms: [{ kind: "count" }], where: { op: "ge", column: "age", value: 30 } }));
    const remote = plan.split("\n").filter((l) => l.includes("Remote SQL"));
    expect(remote.length).toBe(3);
    for (const [i, l] of remote.entries()) {
      // The count and the GROUP BY on the unit run on the shard; only per-unit counts come back.
      expect(l).toMatch(/Remote SQL: SELECT count\(\*\) FILTER \(WHERE .*age.*\), patient FROM public\.visits_p\d+ WHERE \(\(patient IS NOT NULL\)\) GROUP BY 2$/);
      expect(l).toContain(`visits_p${i}`);
    }
    expect(plan).not.toMatch(/Foreign Scan on public\.visits_p\d+\s*\n\s*Output: .*__s\.age/);
  });

  it("EXPLAIN VERBOSE: other statements read only the columns they need from each shard", async () => {
    const plan = await explain(engine.cellsStatement({ dataset: "bounded", keys: [{ column: "region" }], terms: [{ kind: "sum", column: "age" }] }));
    const remote = plan.split("\n").filter((l) => l.includes("Remote SQL"));
    expect(remote.length).toBe(3);
    for (const l of remote) {
      // Fetched columns: the unit, the key, the summed column and the row id; rows without a unit id stay on the shard.
      const fetched = /Remote SQL: SELECT (.*?) FROM public\.visits_p\d+ WHERE (.*)$/.exec(l);
      expect(fetched).not.toBeNull();
      expect(fetched![1].split(", ").sort()).toEqual(["age", "ctid", "patient", "region"]);
      expect(fetched![2]).toBe("((patient IS NOT NULL))");
    }
  });

  it("refuses a table sharded on another column, naming the key and the unit, no value", async () => {
    const p = policy(dataset("clinic", pgSource("by_region"), "{ column: patient, maxRows: 3 }"));
    const err = await PostgresEngine.open(p, { datasets: [...p.datasets.values()], quiet: true }).then(
      async (e) => (await e.close(), "opened"),
      (e: Error) => e.message,
    );
    expect(err).toMatch(/datasets\.clinic.*partitioned by HASH \(region\).*exactly the privacy unit column patient/);
    expect(err).not.toContain(MARKER);
  });
});

// The shared answer-level suite on the sharded set: each suite table hash-partitioned on pid (the
// unit) across the 3 shards, rows routed through the coordinator.
if (havePostgres()) {
  engineSuite([
    {
      name: "PostgreSQL sharded (3 shards, postgres_fdw)",
      async store(suiteDir, table) {
        await createSharded(set, `suite_${table.name}`, suiteColumnsSql(SUITE_COLUMNS), "HASH (pid)");
        const c = await set.coordinator.connect();
        try {
          await insertSuiteRows(c, `suite_${table.name}`, SUITE_COLUMNS, table.rows);
        } finally {
          await c.end();
        }
        writeFileSync(join(suiteDir, "pw.txt"), `${set.reader.password}\n`);
        const o = { host: "127.0.0.1", port: set.coordinator.port, database: "postgres", user: set.reader.user, table: `suite_${table.name}`, passwordFile: "pw.txt" };
        return `{ postgres: ${JSON.stringify(o)} }`;
      },
      open: (p) => PostgresEngine.open(p, { datasets: [...p.datasets.values()], quiet: true, bits: new Bits(seededBytes("suite-shards")) }),
      async plain(sql) {
        const c = await set.coordinator.connect();
        try {
          return (await c.query({ text: sql, rowMode: "array" })).rows as unknown[][];
        } finally {
          await c.end();
        }
      },
      plainTable: (n) => `suite_${n}`,
      async close() {},
    },
  ]);
}
