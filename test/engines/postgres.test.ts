/**
 * The PostgreSQL engine against a real throwaway PostgreSQL 15 cluster (test/helpers/pg-cluster.ts):
 *
 *  - true aggregates equal plain SQL written by hand and run directly in PostgreSQL over the same
 *    table (pg-fixture.ts plainFits), and equal the DuckDB engine's over the same rows (Parquet in
 *    place, which has the same rule for values that do not fit: missing);
 *  - per-unit bounding keeps at most maxRows rows per unit (count = sum over units of
 *    min(rows, maxRows), from plain SQL), the kept sum lies between the sums of each unit's
 *    smallest and largest maxRows values, and the choice follows the seed, not the values;
 *  - bad configuration fails at start with an error naming the dataset and the problem, never a
 *    data value: unreachable server, wrong credentials, missing table, missing column, a column
 *    type that does not fit the declared type, a password in the policy text, an unset passwordEnv.
 */
import { randomBytes } from "node:crypto";
import { mkdirSync, mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { Bits, seededBytes } from "../../runtime/core/index.js";
import { PostgresEngine, pgBigInt } from "../../runtime/curator/engines/postgres/engine.js";
import { type LoadedPolicy, loadPolicy } from "../../runtime/curator/policy.js";
import { type PgCluster, createReader, havePostgres, startCluster } from "../helpers/pg-cluster.js";
import { ADA_HASH } from "../fixtures/curator-helpers.js";
import { SUITE_COLUMNS, engineSuite } from "./answer-suite.js";
import {
  COLUMNS_SQL,
  MARKER,
  POLICY_COLUMNS,
  REGIONS,
  csvToParquet,
  generate,
  insertRows,
  insertSuiteRows,
  plainFits,
  suiteColumnsSql,
  writeCsv,
} from "./pg-fixture.js";
import type { CellsRequest, DataEngine } from "../../runtime/curator/engines/types.js";
import { openEngines } from "../../runtime/curator/engines/open.js";
import { Answerer } from "../../runtime/curator/answer.js";
import type { QueryPlan } from "../../runtime/protocol/messages.js";
import { stringify } from "yaml";
import { CuratorClient } from "../../runtime/client/client.js";
import { generateCuratorKey } from "../../runtime/curator/keys.js";
import { hashToken } from "../../runtime/curator/tokens.js";
import { loadPublicKey, verifyReceipt } from "../../runtime/protocol/receipts.js";
import { CANARY, type CuratorChild, requireBuild, startCuratorChild } from "../integration/helpers.js";

const ROWS = generate(3000, 6);

let cluster: PgCluster;
let reader: { user: string; password: string };
let dir: string;

function pgSource(table: string, over: Record<string, unknown> = {}): string {
  const o = { host: "127.0.0.1", port: cluster.port, database: "postgres", user: reader.user, table, passwordFile: "pw.txt", ...over };
  return `{ postgres: ${JSON.stringify(o)} }`;
}

function policy(datasets: string, name = "policy.yaml"): LoadedPolicy {
  const file = join(dir, name);
  writeFileSync(file, `analysts:\n  ada: { token: "${ADA_HASH}" }\ndatasets:\n${datasets}`);
  return loadPolicy(file);
}

function dataset(name: string, source: string, unit: string | null): string {
  return (
    `  ${name}:\n    source: ${source}\n` +
    (unit === null ? "" : `    unit: ${unit}\n`) +
    `    accounting: { mode: pure, cap: { epsilon: "10" } }\n    analysts: [ada]\n${POLICY_COLUMNS}`
  );
}

beforeAll(async () => {
  if (!havePostgres()) return;
  cluster = await startCluster();
  dir = mkdtempSync(join(tmpdir(), "hush-pg-test-"));
  const c = await cluster.connect();
  try {
    await c.query(`CREATE TABLE visits (${COLUMNS_SQL})`);
    await insertRows(c, "visits", ROWS);
    await c.query("CREATE VIEW visits_view AS SELECT * FROM visits");
    // Every row costs 5 ms to read: a statement over it runs for about 15 s.
    await c.query("CREATE FUNCTION slow_true() RETURNS boolean LANGUAGE plpgsql VOLATILE AS $$ BEGIN PERFORM pg_sleep(0.005); RETURN true; END $$");
    await c.query("CREATE VIEW visits_slow AS SELECT * FROM visits WHERE slow_true()");
    await c.query("CREATE TABLE wrong_type (patient bigint, age text, income numeric, score float8, dose int, region text, visited date, insured boolean)");
    await c.query("CREATE TABLE no_dose (patient bigint, age int, income numeric, score float8, region text, visited date, insured boolean)");
    await c.query("CREATE SCHEMA hidden");
    await c.query(`CREATE TABLE hidden.visits (${COLUMNS_SQL})`);
    await c.query(`CREATE TABLE by_region (${COLUMNS_SQL}) PARTITION BY HASH (region)`);
    await c.query(`CREATE TABLE by_region_0 PARTITION OF by_region FOR VALUES WITH (MODULUS 2, REMAINDER 0)`);
    await c.query(`CREATE TABLE by_region_1 PARTITION OF by_region FOR VALUES WITH (MODULUS 2, REMAINDER 1)`);
    await c.query(`CREATE TABLE by_range (${COLUMNS_SQL}) PARTITION BY RANGE (patient)`);
    await c.query(`CREATE TABLE by_range_0 PARTITION OF by_range DEFAULT`);
    await c.query(`CREATE TABLE local_parts (${COLUMNS_SQL}) PARTITION BY HASH (patient)`);
    for (let i = 0; i < 3; i++) await c.query(`CREATE TABLE local_parts_${i} PARTITION OF local_parts FOR VALUES WITH (MODULUS 3, REMAINDER ${i})`);
    await insertRows(c, "local_parts", ROWS);
  } finally {
    await c.end();
  }
  reader = await createReader(cluster);
  await cluster.sql(`GRANT SELECT ON ALL TABLES IN SCHEMA public TO ${reader.user}`);
  writeFileSync(join(dir, "pw.txt"), `${reader.password}\n`);
  writeFileSync(join(dir, "wrong.txt"), "not-the-password\n");
  writeCsv(join(dir, "visits.csv"), ROWS);
  await csvToParquet(join(dir, "visits.csv"), join(dir, "visits.parquet"));
});

afterAll(async () => {
  await cluster?.stop();
  if (dir) rmSync(dir, { recursive: true, force: true });
});

const run = havePostgres() ? describe : describe.skip;

/** Plain SQL in PostgreSQL, first row as strings. */
async function plain(sql: string): Promise<string[]> {
  const c = await cluster.connect();
  try {
    const r = await c.query({ text: sql, rowMode: "array" });
    return (r.rows[0] as unknown[]).map((v) => (v === null ? "0" : String(v)));
  } finally {
    await c.end();
  }
}

const ungrouped = (dataset: string, terms: CellsRequest["terms"], where?: CellsRequest["where"]): CellsRequest => ({ dataset, keys: [], terms, where });

run("PostgreSQL engine: true aggregates", () => {
  let engine: PostgresEngine;
  beforeAll(async () => {
    const p = policy(
      dataset("rows", pgSource("visits"), null) +
        dataset("small", pgSource("visits"), "{ column: patient, maxRows: 10 }") +
        dataset("bounded", pgSource("visits"), "{ column: patient, maxRows: 3 }") +
        dataset("viewed", pgSource("visits_view"), "{ column: patient, maxRows: 3 }") +
        dataset("parts", pgSource("local_parts"), "{ column: patient, maxRows: 3 }"),
    );
    engine = await PostgresEngine.open(p, { datasets: [...p.datasets.values()], quiet: true, bits: new Bits(seededBytes("pg-test")) });
  });
  afterAll(async () => {
    await engine?.close();
  });

  const terms: CellsRequest["terms"] = [
    { kind: "count" },
    { kind: "present", column: "age" },
    { kind: "sum", column: "age" },
    { kind: "sum", column: "income" },
    { kind: "sum", column: "score" },
    { kind: "sum", column: "dose" },
    { kind: "sumSquares", column: "score" },
    { kind: "sumProduct", a: "age", b: "dose" },
    { kind: "atLower", column: "age" },
    { kind: "atUpper", column: "income" },
    { kind: "present", column: "score" },
    { kind: "atLower", column: "score" },
  ];
  const plainTerms =
    "count(*), count(age), sum(age_u), sum(income_u), sum(score_u), sum(dose_u), sum(score_u * score_u), sum(age_u * dose_u), " +
    "count(*) FILTER (WHERE age < 0), count(*) FILTER (WHERE income > 50000), count(score_u), count(*) FILTER (WHERE score < -5)";

  for (const ds of ["rows", "small"]) {
    it(`${ds}: ungrouped terms equal plain SQL`, async () => {
      const got = await engine.cells(ungrouped(ds, terms));
      const want = await plain(`SELECT ${plainTerms} FROM (${plainFits("visits", ds === "small")}) f`);
      expect(got[0].map(String)).toEqual(want);
      // Sanity of the fixture: rows without a unit id are left out where there is a unit; some
      // values are missing, some clamped.
      expect(Number(got[0][0]) === ROWS.length).toBe(ds === "rows");
      expect(got[0][1]).toBeLessThan(got[0][0]);
      expect(got[0][8]).toBeGreaterThan(0n);
    });

    it(`${ds}: a filter is a flag; the kept rows equal plain SQL's WHERE`, async () => {
      const where: CellsRequest["where"] = { op: "and", of: [{ op: "ge", column: "age", value: 30 }, { op: "in", column: "region", values: ["north", "west"] }] };
      const got = await engine.cells(ungrouped(ds, terms, where));
      const want = await plain(`SELECT ${plainTerms} FROM (${plainFits("visits", ds === "small")}) f WHERE age_u >= 30 AND region IN ('north', 'west')`);
      expect(got[0].map(String)).toEqual(want);
    });

    it(`${ds}: grouped by region x insured, every declared cell, equal to plain SQL`, async () => {
      const got = await engine.cells({ dataset: ds, keys: [{ column: "region" }, { column: "insured" }], terms: [{ kind: "count" }, { kind: "sum", column: "income" }] });
      expect(got.length).toBe(REGIONS.length * 2);
      const rows = await cluster.sql(
        `SELECT region, insured::int AS i, count(*)::text AS n, sum(income_u)::text AS s FROM (${plainFits("visits", ds === "small")}) f ` +
          `WHERE region IS NOT NULL AND insured IS NOT NULL GROUP BY 1, 2`,
      );
      for (const r of rows) {
        const cell = REGIONS.indexOf(String(r.region)) * 2 + Number(r.i);
        expect(got[cell].map(String)).toEqual([String(r.n), String(r.s ?? "0")]);
      }
      expect(got.reduce((n, c) => n + c[0], 0n)).toBe(BigInt(rows.reduce((n, r) => n + Number(r.n), 0)));
    });

    it(`${ds}: histogram bins of age equal plain SQL`, async () => {
      const got = await engine.cells({ dataset: ds, keys: [{ column: "age", bins: 4 }], terms: [{ kind: "count" }] });
      // Bins of [0, 100]: [0,25) [25,50) [50,75) [75,100], the top edge in the last bin.
      const rows = await cluster.sql(
        `SELECT LEAST(floor(age_u / 25.0), 3)::int AS b, count(*)::text AS n FROM (${plainFits("visits", ds === "small")}) f WHERE age IS NOT NULL GROUP BY 1 ORDER BY 1`,
      );
      expect(got.map((c) => String(c[0]))).toEqual(rows.map((r) => String(r.n)));
    });

    it(`${ds}: quantile buckets of score equal plain SQL`, async () => {
      // Candidates -50, -40, ..., 50 (stride 10 units of 0.1): 11 candidates.
      const got = await engine.buckets({ dataset: ds, column: "score", lowerUnits: -50n, upperUnits: 50n, stride: 10n, count: 11n });
      const rows = await cluster.sql(
        `SELECT CASE WHEN score_u >= 50 THEN 11 ELSE LEAST(floor((score_u + 50) / 10) + 1, 10) END AS b, count(*)::text AS n ` +
          `FROM (${plainFits("visits", ds === "small")}) f WHERE score IS NOT NULL GROUP BY 1 ORDER BY 1`,
      );
      expect(got.map(([b, n]) => [String(b), String(n)])).toEqual(rows.map((r) => [String(r.b), String(r.n)]));
    });
  }

  for (const ds of ["bounded", "viewed", "parts"]) {
    it(`${ds}: each unit keeps at most maxRows rows (count = sum of min(rows, 3), also filtered)`, async () => {
      const per = `SELECT patient, count(*) AS n FROM (${plainFits("visits", true)}) f`;
      const [want] = await plain(`SELECT sum(LEAST(n, 3)) FROM (${per} GROUP BY patient) u`);
      expect(String((await engine.cells(ungrouped(ds, [{ kind: "count" }])))[0][0])).toBe(want);
      const [wantF] = await plain(`SELECT sum(LEAST(n, 3)) FROM (${per} WHERE region = 'east' GROUP BY patient) u`);
      const where: CellsRequest["where"] = { op: "eq", column: "region", value: "east" };
      expect(String((await engine.cells(ungrouped(ds, [{ kind: "count" }], where)))[0][0])).toBe(wantF);
      // The same count through the window (a grouped request takes the window shape).
      const grouped = await engine.cells({ dataset: ds, keys: [{ column: "insured" }], terms: [{ kind: "count" }], where });
      const [inGroups] = await plain(
        `SELECT sum(LEAST(n, 3)) FROM (${per} WHERE region = 'east' AND insured IS NOT NULL GROUP BY patient) u`,
      );
      // Rows with a missing key are kept (and counted against the bound) but not reported.
      expect(grouped[0][0] + grouped[1][0]).toBeLessThanOrEqual(BigInt(inGroups));
    });

    it(`${ds}: the kept sum lies between each unit's smallest and largest 3 values`, async () => {
      const got = (await engine.cells(ungrouped(ds, [{ kind: "sum", column: "dose" }, { kind: "present", column: "dose" }])))[0];
      const ranked = (dir: string) =>
        `SELECT sum(dose_u) FILTER (WHERE k <= 3) FROM (SELECT dose_u, row_number() OVER (PARTITION BY patient ORDER BY dose_u ${dir} NULLS LAST) AS k FROM (${plainFits("visits", true)}) f) r`;
      // Missing doses sort last, so these bracket every choice of 3 rows per unit.
      const [lo] = await plain(ranked("ASC"));
      const [hi] = await plain(ranked("DESC"));
      expect(got[0]).toBeGreaterThanOrEqual(0n);
      expect(BigInt(lo) <= got[0] && got[0] <= BigInt(hi)).toBe(true);
      expect(BigInt(lo)).toBeLessThan(BigInt(hi));
    });
  }

  it("the rows a unit keeps follow the seed, not the values: another seed keeps other rows", async () => {
    const p = policy(dataset("bounded", pgSource("visits"), "{ column: patient, maxRows: 3 }"), "other.yaml");
    const other = await PostgresEngine.open(p, { datasets: [...p.datasets.values()], quiet: true, bits: new Bits(seededBytes("another seed")) });
    try {
      const req = { dataset: "bounded", keys: [], terms: [{ kind: "sum", column: "dose" }] } as CellsRequest;
      const a = await engine.cells(req);
      const b = await other.cells(req);
      const again = await engine.cells(req);
      expect(again).toEqual(a); // fixed for the life of the engine
      expect(b[0][0]).not.toBe(a[0][0]);
    } finally {
      await other.close();
    }
  });

  it("plan values travel as parameters: a filter literal never appears in the SQL text", () => {
    const st = engine.cellsStatement(ungrouped("rows", [{ kind: "count" }], { op: "eq", column: "age", value: 77 }));
    expect(st.sql).not.toMatch(/77/);
    expect(st.params).toContain("77");
  });
});

run("PostgreSQL engine: numeric(p, s) columns stored on the declared grid", () => {
  // A sum over a numeric(p, s) column on a step of 10^-t (t >= s) adds the clamped values in the
  // column's units and scales once (relation.ts onGrid); every other column, and every view or
  // foreign table, rounds each row to grid units. Both must give the same exact integers.
  const N = 2400;
  let engine: PostgresEngine;
  const GRID_COLUMNS = `    columns:
      amount: { type: number, range: [-50, 1000], step: "0.01" }
      tenth:  { type: number, range: [-5, 5], step: "0.01" }
      whole:  { type: integer, range: [0, 500] }
      coarse: { type: number, range: [-50, 1000], step: "0.05" }
      loose:  { type: number, range: [-50, 1000], step: "0.01" }
      region: { type: category, values: [north, south, east, west] }
      milli:  { type: number, range: [-5, 5], step: "0.01" }
      fee:    { type: number, range: [0, 20], step: "0.01" }
      kind:   { type: category, values: [north, south, east] }
      zone:   { type: category, values: ["1", "2", "3"] }
`;
  const grid = (name: string, table: string, unit: string | null) =>
    `  ${name}:\n    source: ${pgSource(table)}\n` +
    (unit === null ? "" : `    unit: ${unit}\n`) +
    `    accounting: { mode: pure, cap: { epsilon: "10" } }\n    analysts: [ada]\n${GRID_COLUMNS}`;
  beforeAll(async () => {
    const cols = "patient bigint, amount numeric(12,2), tenth numeric(6,1), whole numeric(8,0), loose numeric, region text, coarse numeric(12,2), milli numeric(8,3), fee cents_fee, kind cents_kind, zone integer";
    await cluster.sql("CREATE DOMAIN cents_fee AS numeric(10,2) CHECK (VALUE >= -1000)");
    await cluster.sql("CREATE TYPE cents_kind AS ENUM ('west', 'east', 'south', 'north', 'elsewhere')");
    await cluster.sql(`CREATE TABLE cents (${cols})`);
    await cluster.sql(`CREATE TABLE cents_parts (${cols}) PARTITION BY HASH (patient)`);
    for (let i = 0; i < 3; i++) await cluster.sql(`CREATE TABLE cents_parts_${i} PARTITION OF cents_parts FOR VALUES WITH (MODULUS 3, REMAINDER ${i})`);
    // Deterministic rows (test data, not noise): amounts from -99.99 to 1099.99 so that both bounds
    // clamp, the bounds themselves, NaN, NULL; the same in every numeric column kind.
    const rows = `SELECT *, amount AS coarse, (tenth * 7.005)::numeric(8,3) AS milli, (tenth * 3)::numeric(10,2)::cents_fee AS fee, region::cents_kind AS kind, NULLIF(patient % 5, 4)::integer AS zone FROM (SELECT g / 3 AS patient,
        CASE WHEN g % 41 = 0 THEN 'NaN'::numeric WHEN g % 37 = 0 THEN NULL WHEN g % 53 = 0 THEN -50 WHEN g % 59 = 0 THEN 1000
             ELSE ((g * 7919) % 120000 - 10000) / 100.0 END::numeric(12,2) AS amount,
        CASE WHEN g % 43 = 0 THEN 'NaN'::numeric WHEN g % 31 = 0 THEN NULL ELSE ((g * 613) % 140 - 70) / 10.0 END::numeric(6,1) AS tenth,
        CASE WHEN g % 47 = 0 THEN 'NaN'::numeric WHEN g % 29 = 0 THEN NULL ELSE (g * 271) % 700 - 100 END::numeric(8,0) AS whole,
        CASE WHEN g % 41 = 0 THEN 'NaN'::numeric WHEN g % 37 = 0 THEN NULL ELSE ((g * 7919) % 120000 - 10000) / 100.0 END AS loose,
        (ARRAY['north', 'south', 'east', 'west', 'elsewhere'])[1 + g % 5] AS region
      FROM generate_series(1, ${N}) g) AS r`;
    await cluster.sql(`INSERT INTO cents ${rows}`);
    await cluster.sql(`INSERT INTO cents_parts ${rows}`);
    await cluster.sql("CREATE VIEW cents_view AS SELECT * FROM cents");
    await cluster.sql("CREATE MATERIALIZED VIEW cents_mv AS SELECT * FROM cents");
    await cluster.sql(`GRANT SELECT ON cents, cents_parts, cents_view, cents_mv TO ${reader.user}`);
    const p = policy(
      grid("table", "cents", null) +
        grid("view", "cents_view", null) +
        grid("matview", "cents_mv", null) +
        grid("tableUnit", "cents", "{ column: patient, maxRows: 10 }") +
        grid("viewUnit", "cents_view", "{ column: patient, maxRows: 10 }") +
        grid("parts", "cents_parts", "{ column: patient, maxRows: 10 }"),
      "grid.yaml",
    );
    engine = await PostgresEngine.open(p, { datasets: [...p.datasets.values()], quiet: true, bits: new Bits(seededBytes("pg-grid")) });
  });
  afterAll(async () => {
    await engine?.close();
  });

  const terms: CellsRequest["terms"] = [
    { kind: "count" },
    { kind: "sum", column: "amount" },
    { kind: "sum", column: "tenth" },
    { kind: "sum", column: "whole" },
    { kind: "sum", column: "coarse" },
    { kind: "sum", column: "loose" },
    { kind: "sum", column: "milli" },
    { kind: "sum", column: "fee" },
    { kind: "present", column: "amount" },
    { kind: "present", column: "tenth" },
    { kind: "present", column: "whole" },
    { kind: "present", column: "loose" },
    { kind: "sumSquares", column: "amount" },
    { kind: "atLower", column: "amount" },
    { kind: "atUpper", column: "tenth" },
  ];

  it("the table takes the on-grid sum for amount, tenth and whole only; the view rounds every row", () => {
    const t = engine.cellsStatement(ungrouped("table", terms)).sql;
    expect(t).toMatch(/\(sum\(v0\)\) \* 100\b/);
    expect(t).toMatch(/\(sum\(v1\)\) \* 100\b/);
    expect(t).toMatch(/\(sum\(v2\)\) \* 1\b/);
    expect(t).toMatch(/\(sum\(v7\)\) \* 100\b/); // a domain over numeric(10,2)
    // step 0.05; a numeric without typmod; numeric(8,3) on a step of 0.01 (values between points)
    expect(t).not.toMatch(/sum\(v3\)|sum\(v4\)|sum\(v6\)/);
    expect(engine.cellsStatement(ungrouped("view", terms)).sql).not.toMatch(/sum\(v\d\)/);
    expect(engine.cellsStatement(ungrouped("matview", terms)).sql).toMatch(/\(sum\(v0\)\) \* 100\b/);
    expect(engine.cellsStatement(ungrouped("parts", terms)).sql).toMatch(/\(sum\(v0\) FILTER \(WHERE __m\)\) \* 100\b/);
  });

  it("identical cells on the table (on the grid) and on the view (rounded per row): ungrouped, filtered, grouped, with a unit", async () => {
    const where: CellsRequest["where"] = { op: "ge", column: "tenth", value: -1.5 };
    for (const [a, b] of [["table", "view"], ["matview", "view"], ["tableUnit", "viewUnit"], ["parts", "viewUnit"]]) {
      expect(await engine.cells(ungrouped(a, terms))).toEqual(await engine.cells(ungrouped(b, terms)));
      expect(await engine.cells(ungrouped(a, terms, where))).toEqual(await engine.cells(ungrouped(b, terms, where)));
      const g = { keys: [{ column: "region" }], terms, where };
      expect(await engine.cells({ dataset: a, ...g })).toEqual(await engine.cells({ dataset: b, ...g }));
    }
  });

  it("equal to plain SQL written by hand (clamp, scale, NaN and NULL missing)", async () => {
    const got = (await engine.cells(ungrouped("table", terms.slice(0, 12))))[0].map(String);
    const u = (x: string, lo: number, hi: number, k: number) => `sum(round(LEAST(GREATEST(${x}, ${lo}), ${hi}) * ${k})) FILTER (WHERE ${x} <> 'NaN')`;
    const c = (x: string) => `count(${x}) FILTER (WHERE ${x} <> 'NaN')`;
    const want = await plain(
      `SELECT count(*), ${u("amount", -50, 1000, 100)}, ${u("tenth", -5, 5, 100)}, ${u("whole", 0, 500, 1)}, ` +
        `${u("coarse", -50, 1000, 20)}, ${u("loose", -50, 1000, 100)}, ${u("milli", -5, 5, 100)}, ${u("fee", 0, 20, 100)}, ${c("amount")}, ${c("tenth")}, ${c("whole")}, ${c("loose")} FROM cents`,
    );
    expect(got).toEqual(want);
    // The fixture reaches every arm: both bounds clamp, NaN and NULL occur.
    const [below, above, nan] = await plain("SELECT count(*) FILTER (WHERE amount < -50), count(*) FILTER (WHERE amount > 1000 AND amount <> 'NaN'), count(*) FILTER (WHERE amount = 'NaN') FROM cents");
    expect([Number(below) > 0, Number(above) > 0, Number(nan) > 0]).toEqual([true, true, true]);
  });

  it("grouped by a text, an enum and an integer category: stored values first, then the declared index; equal to plain SQL", async () => {
    for (const [key, values, cast] of [
      ["region", ["north", "south", "east", "west"], "region"],
      ["kind", ["north", "south", "east"], "kind::text"],
      ["zone", ["1", "2", "3"], "zone::text"],
    ] as const) {
      const req: CellsRequest = { dataset: "table", keys: [{ column: key }], terms: [{ kind: "count" }, { kind: "sum", column: "amount" }, { kind: "present", column: "tenth" }] };
      const st = engine.cellsStatement(req).sql;
      expect(st).toMatch(/AS __i GROUP BY 1$/); // the two-level shape
      const got = await engine.cells(req);
      const rows = await cluster.sql(
        `SELECT ${cast} AS k, count(*)::text AS n, (sum(round(LEAST(GREATEST(amount, -50), 1000) * 100)) FILTER (WHERE amount <> 'NaN'))::text AS s, ` +
          `(count(tenth) FILTER (WHERE tenth <> 'NaN'))::text AS p FROM cents WHERE ${cast} IN (${values.map((v) => `'${v}'`).join(", ")}) GROUP BY 1`,
      );
      expect(got.length).toBe(values.length);
      const want = values.map((v) => {
        const r = rows.find((x) => x.k === v);
        return r === undefined ? ["0", "0", "0"] : [String(r.n), String(r.s ?? "0"), String(r.p)];
      });
      expect(got.map((c) => c.map(String)), key).toEqual(want);
      expect(got.every((c) => c[0] > 0n), key).toBe(true);
    }
  });

  it("a sum that comes back with a digit after the point is a fault, never rounded", () => {
    expect(pgBigInt("123400.00")).toBe(123400n);
    expect(pgBigInt("-7.0")).toBe(-7n);
    expect(() => pgBigInt("1.50")).toThrow(/not an exact integer/);
    expect(() => pgBigInt("1.")).toThrow(/not an exact integer/);
  });
});

run("PostgreSQL engine: the answering time limit", () => {
  it("a statement past the policy's time limit is cancelled by the server (statement_timeout), not left running", async () => {
    const file = join(dir, "slow.yaml");
    writeFileSync(
      file,
      `curator:\n  answering: { timeLimit: 0.5 }\nanalysts:\n  ada: { token: "${ADA_HASH}" }\ndatasets:\n${dataset("slow", pgSource("visits_slow"), null)}`,
    );
    const p = loadPolicy(file);
    const engine = await PostgresEngine.open(p, { datasets: [...p.datasets.values()], quiet: true });
    try {
      const t0 = performance.now();
      const err = await engine.cells({ dataset: "slow", keys: [], terms: [{ kind: "count" }] }).then(
        () => "answered",
        (e: Error) => e.message,
      );
      const ms = performance.now() - t0;
      expect(err).toMatch(/dataset slow: PostgreSQL cancelled the statement at the answering time limit/);
      // Cancelled near 0.5 s, far from the ~15 s the statement would take (generous for a loaded machine).
      expect(ms).toBeLessThan(8000);
      // Nothing of ours is still running on the server.
      const active = await cluster.sql("SELECT count(*)::int AS n FROM pg_stat_activity WHERE application_name = 'hush-curator' AND state = 'active'");
      expect(active[0].n).toBe(0);
    } finally {
      await engine.close();
    }
  });
});

let badCount = 0;

run("PostgreSQL engine: bad configuration fails at start", () => {
  async function startError(source: string, unit: string | null = null, env?: Record<string, string>): Promise<string> {
    const saved = { ...process.env };
    Object.assign(process.env, env ?? {});
    try {
      const p = policy(dataset("clinic", source, unit), `bad-${++badCount}.yaml`);
      const e = await PostgresEngine.open(p, { datasets: [...p.datasets.values()], quiet: true });
      await e.close();
      return "opened";
    } catch (err) {
      return err instanceof Error ? err.message : String(err);
    } finally {
      process.env = saved;
    }
  }

  function expectClean(msg: string): void {
    expect(msg).toMatch(/datasets\.clinic/);
    expect(msg).not.toContain(MARKER);
    expect(msg).not.toContain(reader.password);
  }

  it("an unreachable server", async () => {
    const msg = await startError(pgSource("visits", { port: 1 }));
    expectClean(msg);
    expect(msg).toMatch(/cannot reach the PostgreSQL server at 127\.0\.0\.1:1/);
  });

  it("wrong credentials", async () => {
    const msg = await startError(pgSource("visits", { passwordFile: "wrong.txt" }));
    expectClean(msg);
    expect(msg).toMatch(/refused the credentials of user hush_reader/);
    expect(msg).not.toContain("not-the-password");
  });

  it("a database that does not exist, TLS required of a server without it", async () => {
    const db = await startError(pgSource("visits", { database: "nowhere" }));
    expectClean(db);
    expect(db).toMatch(/has no database nowhere/);
    const tls = await startError(pgSource("visits", { sslmode: "require" }));
    expectClean(tls);
    expect(tls).toMatch(/TLS with the PostgreSQL server at 127\.0\.0\.1:\d+ failed \(sslmode require\)/);
  });

  it("a missing password file, an unset password variable", async () => {
    expectClean(await startError(pgSource("visits", { passwordFile: "nowhere.txt" })));
    expect(await startError(pgSource("visits", { passwordFile: "nowhere.txt" }))).toMatch(/passwordFile: cannot be read \(ENOENT\)/);
    const msg = await startError(pgSource("visits", { passwordFile: undefined, passwordEnv: "HUSH_TEST_UNSET_PW" }));
    expect(msg).toMatch(/environment variable HUSH_TEST_UNSET_PW is not set/);
    // ... and the same source works once the variable holds the password.
    expect(await startError(pgSource("visits", { passwordFile: undefined, passwordEnv: "HUSH_TEST_PW" }), null, { HUSH_TEST_PW: reader.password })).toBe("opened");
  });

  it("a password written in the policy is refused before any connection", async () => {
    const msg = await startError(pgSource("visits", { password: reader.password }));
    expect(msg).toMatch(/password must not be written in the policy/);
    expect(msg).not.toContain(reader.password);
  });

  it("a missing table, a table the user may not read", async () => {
    const msg = await startError(pgSource("nothere"));
    expectClean(msg);
    expect(msg).toMatch(/no table or view public\.nothere/);
    const hidden = await startError(pgSource("hidden.visits"));
    expectClean(hidden);
    expect(hidden).toMatch(/hush_reader may not read hidden\.visits/);
  });

  it("a declared column the table lacks", async () => {
    const msg = await startError(pgSource("no_dose"));
    expectClean(msg);
    expect(msg).toMatch(/has no column "dose"/);
  });

  it("a column whose type does not fit the declared type", async () => {
    const msg = await startError(pgSource("wrong_type"));
    expectClean(msg);
    expect(msg).toMatch(/column "age" of public\.wrong_type has PostgreSQL type text, which does not fit declared type integer/);
  });

  it("a missing unit column", async () => {
    const msg = await startError(pgSource("visits"), "{ column: person, maxRows: 2 }");
    expectClean(msg);
    expect(msg).toMatch(/has no column "person" \(the privacy unit column\)/);
  });

  it("a partitioned table whose key is not the unit column (hash on another column, range on the unit)", async () => {
    const msg = await startError(pgSource("by_region"), "{ column: patient, maxRows: 2 }");
    expectClean(msg);
    expect(msg).toMatch(/partitioned by HASH \(region\).*HASH on exactly the privacy unit column patient/);
    const range = await startError(pgSource("by_range"), "{ column: patient, maxRows: 2 }");
    expect(range).toMatch(/partitioned by RANGE \(patient\)/);
    // Without a unit column every row is its own unit: any partitioning will do.
    expect(await startError(pgSource("by_region"))).toBe("opened");
  });
});

/**
 * The same rows in DuckDB (Parquet queried in place) and in PostgreSQL: identical true
 * aggregates, and through the Answerer identical releases with the same random bits (so identical
 * sensitivities, costs, mechanisms, notes and digests), and identical refusals.
 */
run("PostgreSQL engine: the same answers as the DuckDB engine (Parquet in place)", () => {
  let pgEngine: DataEngine;
  let duck: DataEngine;
  let pgAnswers: Answerer;
  let duckAnswers: Answerer;
  beforeAll(async () => {
    const p = policy(
      dataset("rows", pgSource("visits"), null) + dataset("small", pgSource("visits"), "{ column: patient, maxRows: 10 }"),
      "pg-side.yaml",
    );
    // DuckDB over the same rows as Parquet in place: the same rule for values that do not fit
    // (missing) as the PostgreSQL engine.
    const files = "{ files: visits.parquet }";
    const d = policy(dataset("rows", files, null) + dataset("small", files, "{ column: patient, maxRows: 10 }"), "duck-side.yaml");
    pgEngine = await openEngines(p, { quiet: true });
    duck = await openEngines(d, { quiet: true });
    pgAnswers = new Answerer(pgEngine, p);
    duckAnswers = new Answerer(duck, d);
  });
  afterAll(async () => {
    await pgEngine?.close();
    await duck?.close();
  });

  const requests = (ds: string): CellsRequest[] => [
    { dataset: ds, keys: [], terms: [{ kind: "count" }, { kind: "sum", column: "income" }, { kind: "sumSquares", column: "score" }, { kind: "sumProduct", a: "age", b: "dose" }] },
    { dataset: ds, keys: [{ column: "region" }], terms: [{ kind: "present", column: "score" }, { kind: "sum", column: "score" }, { kind: "atLower", column: "score" }, { kind: "atUpper", column: "dose" }] },
    { dataset: ds, keys: [{ column: "dose", bins: 7 }, { column: "insured" }], terms: [{ kind: "count" }], where: { op: "between", column: "visited", low: "2021-03-01", high: "2023-10-31" } },
    { dataset: ds, keys: [], terms: [{ kind: "count" }], where: { op: "or", of: [{ op: "lt", column: "score", value: -1.25 }, { op: "isNull", column: "age" }] } },
  ];

  for (const ds of ["rows", "small"]) {
    it(`${ds}: identical cells and buckets`, async () => {
      for (const req of requests(ds)) expect(await pgEngine.cells(req)).toEqual(await duck.cells(req));
      const b = { dataset: ds, column: "income", lowerUnits: 0n, upperUnits: 100000n, stride: 1000n, count: 101n };
      expect(await pgEngine.buckets(b)).toEqual(await duck.buckets(b));
      const f = { ...b, where: { op: "eq", column: "region", value: "south" } as const };
      expect(await pgEngine.buckets(f)).toEqual(await duck.buckets(f));
    });

    it(`${ds}: identical releases with the same random bits (count, sum, grouped mean, std, median, describe)`, async () => {
      const plans: QueryPlan[] = [
        { v: 1, dataset: ds, privacy: { epsilon: "1" }, measure: { kind: "count" } },
        { v: 1, dataset: ds, privacy: { epsilon: "1" }, measure: { kind: "sum", column: "income" }, where: { op: "ge", column: "age", value: 40 } },
        { v: 1, dataset: ds, privacy: { epsilon: "1" }, measure: { kind: "mean", column: "score" }, groupBy: [{ column: "region" }] },
        { v: 1, dataset: ds, privacy: { epsilon: "1" }, measure: { kind: "std", column: "dose" } },
        { v: 1, dataset: ds, privacy: { epsilon: "1" }, measure: { kind: "quantile", column: "income", p: [0.5] } },
        { v: 1, dataset: ds, privacy: { epsilon: "2" }, measure: { kind: "describe" } },
      ];
      for (const [i, plan] of plans.entries()) {
        const a = pgAnswers.prepare("ada", plan);
        const b = duckAnswers.prepare("ada", plan);
        expect(a.digest).toBe(b.digest);
        expect(a.cost.toString()).toBe(b.cost.toString());
        expect(a.notes).toEqual(b.notes);
        const ra = await a.compute(new Bits(seededBytes(`release-${i}`)));
        const rb = await b.compute(new Bits(seededBytes(`release-${i}`)));
        expect(ra).toEqual(rb);
      }
    });
  }

  it("identical refusals, spending nothing", () => {
    const bad: unknown[] = [
      { v: 1, dataset: "small", privacy: { epsilon: "1" }, measure: { kind: "sum", column: "patient" } },
      { v: 1, dataset: "small", privacy: { epsilon: "1" }, measure: { kind: "sum", column: "region" } },
      { v: 1, dataset: "small", privacy: { epsilon: "1" }, measure: { kind: "count" }, where: { op: "eq", column: "region", value: MARKER } },
      { v: 1, dataset: "small", privacy: { epsilon: "1" }, measure: { kind: "count" }, where: { op: "lt", column: "age", value: Number.NaN } },
      { v: 1, dataset: "nowhere", privacy: { epsilon: "1" }, measure: { kind: "count" } },
    ];
    for (const plan of bad) {
      const refusal = (ans: Answerer) => {
        try {
          ans.prepare("ada", plan);
          return "accepted";
        } catch (e) {
          return `${(e as Error).constructor.name}: ${(e as Error).message}`;
        }
      };
      const a = refusal(pgAnswers);
      expect(a).not.toBe("accepted");
      expect(a).toBe(refusal(duckAnswers));
      expect(a).not.toContain(MARKER);
    }
  });
});

// The shared answer-level suite (answer-suite.ts) on one PostgreSQL server: each suite table is a
// plain table in the file's cluster, read by the reader role with a password file.
if (havePostgres()) {
  engineSuite([
    {
      name: "PostgreSQL (one server)",
      async store(suiteDir, table) {
        const c = await cluster.connect();
        try {
          await c.query(`CREATE TABLE suite_${table.name} (${suiteColumnsSql(SUITE_COLUMNS)})`);
          await insertSuiteRows(c, `suite_${table.name}`, SUITE_COLUMNS, table.rows);
          await c.query(`GRANT SELECT ON suite_${table.name} TO ${reader.user}`);
        } finally {
          await c.end();
        }
        writeFileSync(join(suiteDir, "pw.txt"), `${reader.password}\n`);
        const o = { host: "127.0.0.1", port: cluster.port, database: "postgres", user: reader.user, table: `suite_${table.name}`, passwordFile: "pw.txt" };
        return `{ postgres: ${JSON.stringify(o)} }`;
      },
      open: (p) => PostgresEngine.open(p, { datasets: [...p.datasets.values()], quiet: true, bits: new Bits(seededBytes("suite-pg")) }),
      async plain(sql) {
        const c = await cluster.connect();
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

/**
 * The real curator process (dist/runtime/curator/main.js) over a PostgreSQL dataset, on an ipc
 * socket: signed receipts that verify, spend that adds up, a refusal that spends nothing, and no
 * unit id or marker value in any reply. Unit ids here start with a canary text.
 */
run("a real curator process answering from PostgreSQL", () => {
  let ws: { dir: string; policyFile: string; publicKeyB64: string; token: string };
  let cur: CuratorChild;
  let ada: CuratorClient;
  beforeAll(async () => {
    requireBuild();
    const c = await cluster.connect();
    try {
      await c.query("CREATE TABLE clinic (patient_id text, age integer, wait_minutes numeric, district text)");
      await c.query(
        `INSERT INTO clinic SELECT '${CANARY}' || (g % 40), (g * 7) % 110, ((g * 13) % 500) / 2.0, ` +
          `(ARRAY['Northgate', 'Riverside', 'Eastfield', '${MARKER}'])[1 + g % 4] FROM generate_series(1, 200) g`,
      );
      await c.query(`GRANT SELECT ON clinic TO ${reader.user}`);
    } finally {
      await c.end();
    }
    const d = mkdtempSync(join(tmpdir(), "hs-pg-"));
    mkdirSync(join(d, "keys"));
    const { publicKeyB64 } = generateCuratorKey(join(d, "keys", "curator.key"));
    const token = randomBytes(18).toString("base64url");
    const policy = {
      curator: { key: "keys/curator.key", ledger: "state/ledger.sqlite" },
      analysts: { ada: { token: hashToken(token) } },
      datasets: {
        clinic: {
          description: "Invented clinic visits in PostgreSQL",
          source: { postgres: { host: "127.0.0.1", port: cluster.port, database: "postgres", user: reader.user, table: "clinic", passwordEnv: "HUSH_TEST_PG_PASSWORD" } },
          unit: { column: "patient_id", maxRows: 3, maxGroups: 2 },
          accounting: { mode: "pure", cap: { epsilon: "1" } },
          analysts: ["ada"],
          columns: {
            age: { type: "integer", range: [0, 100] },
            wait_minutes: { type: "number", range: [0, 240], step: "0.5" },
            district: { type: "category", values: ["Northgate", "Riverside", "Eastfield"] },
          },
        },
      },
    };
    writeFileSync(join(d, "policy.yaml"), stringify(policy));
    ws = { dir: d, policyFile: join(d, "policy.yaml"), publicKeyB64, token };
    process.env.HUSH_TEST_PG_PASSWORD = reader.password;
    try {
      cur = await startCuratorChild(["--policy", ws.policyFile, "--listen", `ipc://${join(d, "c.sock")}`]);
    } finally {
      delete process.env.HUSH_TEST_PG_PASSWORD;
    }
    ada = await CuratorClient.connect({ address: cur.ready.address, analyst: "ada", token, timeoutMs: 30_000 });
  }, 120_000);
  afterAll(async () => {
    await ada?.close();
    await cur?.stop();
    if (ws) rmSync(ws.dir, { recursive: true, force: true });
  });

  it("releases with receipts that verify; the ledger adds up; nothing leaks", async () => {
    const key = loadPublicKey(cur.ready.publicKey);
    expect(cur.ready.publicKey).toBe(ws.publicKeyB64);
    const plans: QueryPlan[] = [
      { v: 1, dataset: "clinic", measure: { kind: "count" }, privacy: { epsilon: "1/10" } },
      { v: 1, dataset: "clinic", measure: { kind: "mean", column: "wait_minutes" }, groupBy: [{ column: "district" }], privacy: { epsilon: "1/10" } },
      { v: 1, dataset: "clinic", measure: { kind: "quantile", column: "age", p: [0.5] }, where: { op: "ne", column: "district", value: "Riverside" }, privacy: { epsilon: "1/10" } },
    ];
    const texts: string[] = [];
    for (const p of plans) {
      const r = await ada.ask(p);
      expect(verifyReceipt(r.receipt, key)).toEqual({ ok: true });
      texts.push(JSON.stringify(r));
    }
    const refused = await ada.ask({ v: 1, dataset: "clinic", measure: { kind: "sum", column: "patient_id" }, privacy: { epsilon: "1/10" } }).then(
      () => "answered",
      (e: Error) => `${e.name}: ${e.message}`,
    );
    expect(refused).toMatch(/privacy unit column/);
    texts.push(refused);
    expect((await ada.spend("clinic")).spentEpsilon).toBe("3/10");
    for (const t of texts) {
      expect(t).not.toContain(CANARY);
      expect(t).not.toContain(MARKER);
    }
    expect(cur.stderr()).not.toContain(reader.password);
  });
});
