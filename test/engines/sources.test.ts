/**
 * Policy `source` forms and the DuckDB engine's start checks for them: files in place (Parquet and
 * CSV), prepared DuckDB files, PostgreSQL connection settings (parsed here; the engine is in
 * engines/postgres/), and the engine limits. Every bad configuration is a clear error at start
 * that names the dataset and the problem and shows no data value.
 */
import { mkdirSync, utimesSync, writeFileSync } from "node:fs";
import { dirname, join } from "node:path";
import { DuckDBInstance } from "@duckdb/node-api";
import { describe, expect, it } from "vitest";
import { Bits, seededBytes } from "../../runtime/core/index.js";
import { DuckDBEngine } from "../../runtime/curator/engines/duckdb/engine.js";
import { prepareDataset } from "../../runtime/curator/engines/duckdb/prepare.js";
import { loadPolicy, parsePolicy } from "../../runtime/curator/policy.js";
import { PolicyError, UnreachableError } from "../../runtime/errors.js";
import { policyWith, tempPolicy } from "../fixtures/curator-helpers.js";

const COLUMNS = `    accounting: { mode: pure, cap: { epsilon: "10" } }
    analysts: [ada]
    columns:
      age: { type: integer, range: [0, 100] }
      town: { type: category, values: [a, b] }
`;

async function duck(sql: string[]): Promise<void> {
  const i = await DuckDBInstance.create(":memory:");
  const c = await i.connect();
  for (const s of sql) await c.run(s);
  c.closeSync();
  i.closeSync();
}

describe("policy source forms", () => {
  const parse = (source: string, extra = "") => parsePolicy(policyWith(`    source: ${source}\n${COLUMNS}`, extra), "/srv/p/policy.yaml").datasets.get("d")!;

  it("a path is copied into memory; files, duckdb and postgres forms parse to their kinds", () => {
    expect(parse("data.csv").origin).toEqual({ kind: "memory", path: "/srv/p/data.csv", format: "csv" });
    expect(parse('{ files: "parts/*.parquet" }').origin).toEqual({ kind: "files", pattern: "/srv/p/parts/*.parquet", format: "parquet" });
    expect(parse('{ files: "parts/*.txt", format: csv }').origin).toMatchObject({ kind: "files", format: "csv" });
    const db = parse("{ duckdb: v.duckdb, table: visits }");
    expect(db.origin).toEqual({ kind: "duckdb", path: "/srv/p/v.duckdb", table: "visits" });
    expect(db.source).toBe("/srv/p/v.duckdb#visits");
    const pg = parse("{ postgres: { host: 127.0.0.1, port: 5433, database: clinic, user: hush, table: care.visits, passwordEnv: HUSH_PG } }");
    expect(pg.origin).toEqual({
      kind: "postgres", host: "127.0.0.1", port: 5433, database: "clinic", user: "hush", schema: "care", table: "visits",
      passwordFile: null, passwordEnv: "HUSH_PG", sslmode: null,
    });
    expect(pg.source).toBe("postgresql://hush@127.0.0.1:5433/clinic/care.visits");
    expect(parse("{ postgres: { host: db, database: c, user: u, table: visits, passwordFile: pw.txt } }").origin).toMatchObject({ port: 5432, schema: "public", passwordFile: "/srv/p/pw.txt" });
  });

  it("refuses a password in the policy text, and other bad connection settings, naming the path", () => {
    const bad = (src: string, path: RegExp, what: RegExp) => {
      let err: unknown;
      try {
        parse(src);
      } catch (e) {
        err = e;
      }
      expect(err).toBeInstanceOf(PolicyError);
      expect((err as Error).message).toMatch(path);
      expect((err as Error).message).toMatch(what);
      expect((err as Error).message).not.toContain("s3cret");
    };
    bad("{ postgres: { host: db, database: c, user: u, table: t, password: s3cret } }", /datasets\.d\.source\.postgres\.password/, /must not be written in the policy/);
    bad("{ postgres: { host: db, database: c, user: u, table: t, passwordFile: a, passwordEnv: B } }", /source\.postgres/, /not both/);
    bad("{ postgres: { host: db, database: c, user: u, table: a.b.c } }", /source\.postgres\.table/, /schema\.table/);
    bad("{ postgres: { host: db, database: c, user: u, table: t, port: 70000 } }", /source\.postgres\.port/, /./);
    bad("{ postgres: { host: db, database: c, user: u, table: t, sslmode: maybe } }", /source\.postgres\.sslmode/, /disable, prefer/);
    bad("{ postgres: { host: db, database: c, table: t } }", /source\.postgres\.user/, /./);
    bad('{ files: "x/*.xlsx" }', /datasets\.d\.source\.files/, /\.csv or \.parquet/);
    bad("{ duckdb: v.duckdb }", /datasets\.d\.source/, /must be a file path/);
  });

  it("engine limits: DuckDB's memory_limit and threads, checked", () => {
    const p = parsePolicy(policyWith(`    source: data.csv\n${COLUMNS}`, 'engine: { memoryLimit: "1.5GB", threads: 2 }\n'), "/srv/p/policy.yaml");
    expect(p.engine).toEqual({ memoryLimit: "1.5GB", threads: 2 });
    expect(parsePolicy(policyWith(`    source: data.csv\n${COLUMNS}`), "/srv/p/policy.yaml").engine).toEqual({ memoryLimit: null, threads: null });
    expect(() => parsePolicy(policyWith(`    source: data.csv\n${COLUMNS}`, 'engine: { memoryLimit: "lots" }\n'), "/p.yaml")).toThrow(/engine\.memoryLimit: must be a size/);
    expect(() => parsePolicy(policyWith(`    source: data.csv\n${COLUMNS}`, "engine: { threads: 0 }\n"), "/p.yaml")).toThrow(/engine\.threads/);
    expect(() => parsePolicy(policyWith(`    source: data.csv\n${COLUMNS}`, "engine: { threads: 1.5 }\n"), "/p.yaml")).toThrow(/engine\.threads/);
  });
});

describe("DuckDB files in place", () => {
  const CSV = "age,town,pid\n3,a,x\n140,b,x\n-2,c,y\nold,a,y\n50,,z\n";

  it("CSV in place: values that do not fit are missing (the same rule for every query), limits applied", async () => {
    const file = tempPolicy(policyWith(`    source: { files: "parts/*.csv" }\n${COLUMNS}`, 'engine: { memoryLimit: "256MB", threads: 1 }\n'));
    mkdirSync(join(dirname(file), "parts"));
    writeFileSync(join(dirname(file), "parts", "one.csv"), CSV);
    writeFileSync(join(dirname(file), "parts", "two.csv"), "age,town,pid\n7,b,q\n");
    const e = await DuckDBEngine.open(loadPolicy(file), { quiet: true });
    try {
      const [[rows, ages, sum, lower, upper, towns]] = await e.cells({
        dataset: "d",
        keys: [],
        terms: [
          { kind: "count" }, { kind: "present", column: "age" }, { kind: "sum", column: "age" },
          { kind: "atLower", column: "age" }, { kind: "atUpper", column: "age" }, { kind: "present", column: "town" },
        ],
      });
      // 6 rows; "old" is not a number (missing); 140 clamps to 100, -2 to 0; "c" is not a declared town (missing).
      expect([rows, ages, sum, lower, upper, towns]).toEqual([6n, 5n, 3n + 100n + 0n + 50n + 7n, 1n, 1n, 4n]);
      expect(e.access("d")).toBe("CSV in place, 2 files");
      const [[mem, threads]] = await e.query("SELECT current_setting('memory_limit'), current_setting('threads')", []);
      expect(String(mem)).toMatch(/^24[0-9.]+ MiB$|^256\.0 MiB$|MB|MiB/);
      expect(Number(threads)).toBe(1);
    } finally {
      await e.close();
    }
  });

  it("refuses at start: CSV in place with a unit column, no matching file, a column of the wrong type", async () => {
    const withUnit = tempPolicy(policyWith(`    source: { files: "*.csv" }\n    unit: { column: pid, maxRows: 2 }\n${COLUMNS}`), { "a.csv": CSV });
    await expect(DuckDBEngine.open(loadPolicy(withUnit), { quiet: true })).rejects.toThrow(/datasets\.d\.unit\.column: CSV files queried in place give no row positions/);
    const none = tempPolicy(policyWith(`    source: { files: "nothing/*.parquet" }\n${COLUMNS}`));
    await expect(DuckDBEngine.open(loadPolicy(none), { quiet: true })).rejects.toThrow(/datasets\.d\.source\.files: no file matches/);
    const typed = tempPolicy(policyWith(`    source: { files: "t.parquet" }\n${COLUMNS}`));
    await duck([`COPY (SELECT DATE '2025-01-01' AS age, 'a' AS town) TO '${join(dirname(typed), "t.parquet")}' (FORMAT parquet)`]);
    const err = await DuckDBEngine.open(loadPolicy(typed), { quiet: true }).then(() => null, (x: unknown) => x as Error);
    expect(err).toBeInstanceOf(PolicyError);
    expect(err!.message).toMatch(/datasets\.d\.columns\.age: the files' column "age" has type DATE, which cannot hold a integer column/);
    expect(err!.message).not.toContain("2025-01-01");
  });

  it("a file changed after start refuses the next statement (nothing is read from the changed data)", async () => {
    const file = tempPolicy(policyWith(`    source: { files: "p.parquet" }\n    unit: { column: pid, maxRows: 2 }\n${COLUMNS}`));
    const pq = join(dirname(file), "p.parquet");
    await duck([`COPY (SELECT range % 100 AS age, 'a' AS town, 'u' || (range % 7) AS pid FROM range(100)) TO '${pq}' (FORMAT parquet)`]);
    const e = await DuckDBEngine.open(loadPolicy(file), { quiet: true, bits: new Bits(seededBytes("change")) });
    try {
      const req = { dataset: "d", keys: [], terms: [{ kind: "count" as const }] };
      expect(await e.cells(req)).toEqual([[14n]]); // 7 units, 2 rows each
      utimesSync(pq, new Date(), new Date(Date.now() + 5000));
      await expect(e.cells(req)).rejects.toThrow(UnreachableError);
      await expect(e.cells(req)).rejects.toThrow(/data files of dataset d changed after the curator started; nothing was spent/);
    } finally {
      await e.close();
    }
  });
});

describe("prepared DuckDB files", () => {
  it("refuses to start on a file not prepared, or prepared for another declaration; starts once prepared", async () => {
    const file = tempPolicy(policyWith(`    source: { duckdb: v.duckdb, table: visits }\n    unit: { column: pid, maxRows: 2 }\n${COLUMNS}`));
    const db = join(dirname(file), "v.duckdb");
    const i = await DuckDBInstance.create(db);
    const c = await i.connect();
    await c.run("CREATE TABLE visits AS SELECT range % 100 AS age, CASE WHEN range % 3 = 0 THEN 'a' ELSE 'b' END AS town, 'u' || (range % 9) AS pid FROM range(90)");
    c.closeSync();
    i.closeSync();
    const policy = loadPolicy(file);
    await expect(DuckDBEngine.open(policy, { quiet: true })).rejects.toThrow(/datasets\.d\.source: table "visits" has not been prepared for this declaration; run `hush prepare/);
    const report = await prepareDataset(policy, policy.datasets.get("d")!, new Bits(seededBytes("prep")));
    expect(report).toEqual({ rows: 90, rejected: 0, reasons: {} });
    const e = await DuckDBEngine.open(policy, { quiet: true });
    try {
      expect(await e.cells({ dataset: "d", keys: [{ column: "town" }], terms: [{ kind: "count" }] })).toEqual([[6n], [12n]]); // 9 units of 10 rows, 2 kept each; town is a for units 0, 3, 6
      expect(e.loadReport("d")).toEqual(report);
    } finally {
      await e.close();
    }
    const changed = tempPolicy(policyWith(`    source: { duckdb: ${db}, table: visits }\n    unit: { column: pid, maxRows: 3 }\n${COLUMNS}`));
    await expect(DuckDBEngine.open(loadPolicy(changed), { quiet: true })).rejects.toThrow(/was prepared for another declaration/);
  });
});
