/**
 * The engine suite (answer-suite.ts) on the DuckDB engine's three sources: a CSV copied into
 * memory, Parquet queried in place (three files, matched by a glob), and a DuckDB database file
 * prepared once (`hush prepare`). Plain SQL runs in a separate DuckDB instance over the same files.
 */
import { mkdirSync, writeFileSync } from "node:fs";
import { join } from "node:path";
import { DuckDBInstance, type DuckDBConnection } from "@duckdb/node-api";
import { Bits, seededBytes } from "../../runtime/core/index.js";
import { DuckDBEngine } from "../../runtime/curator/engines/duckdb/engine.js";
import { prepareDataset } from "../../runtime/curator/engines/duckdb/prepare.js";
import type { LoadedPolicy } from "../../runtime/curator/policy.js";
import { SUITE_COLUMNS, type EngineUnderTest, engineSuite, suiteCsv } from "./answer-suite.js";

function quote(s: string): string {
  return `'${s.replace(/'/g, "''")}'`;
}

/** read_csv of a suite CSV with the suite's column types (no sniffing). */
function typedCsv(file: string): string {
  const cols = SUITE_COLUMNS.map((c) => `${quote(c.name)}: ${quote(c.type)}`).join(", ");
  return `read_csv(${quote(file)}, header = true, auto_detect = false, columns = {${cols}})`;
}

/** A DuckDB instance for plain SQL, where each stored table is a view named after it. */
function plainDuckDB(): { conn: () => Promise<DuckDBConnection>; view: (name: string, from: string) => Promise<void>; close: () => void } {
  let inst: DuckDBInstance | null = null;
  let c: DuckDBConnection | null = null;
  const conn = async () => {
    inst ??= await DuckDBInstance.create(":memory:");
    c ??= await inst.connect();
    return c;
  };
  return {
    conn,
    view: async (name, from) => void (await (await conn()).run(`CREATE OR REPLACE VIEW "${name}" AS SELECT * FROM ${from}`)),
    close: () => {
      c?.closeSync();
      inst?.closeSync();
    },
  };
}

function entry(name: string, store: (dir: string, table: string, csv: string, plain: ReturnType<typeof plainDuckDB>) => Promise<string>, beforeOpen?: (policy: LoadedPolicy) => Promise<void>): EngineUnderTest {
  const plain = plainDuckDB();
  return {
    name,
    async store(dir, table) {
      const csv = join(dir, `${table.name}-raw.csv`);
      writeFileSync(csv, suiteCsv(table.rows));
      return store(dir, table.name, csv, plain);
    },
    async open(policy) {
      await beforeOpen?.(policy);
      return DuckDBEngine.open(policy, { quiet: true, bits: new Bits(seededBytes(`engine-${name}`)) });
    },
    async plain(sql) {
      return (await (await plain.conn()).runAndReadAll(sql)).getRows() as unknown[][];
    },
    plainTable: (n) => `"${n}"`,
    async close() {
      plain.close();
    },
  };
}

engineSuite([
  entry("DuckDB in memory (CSV)", async (_dir, table, csv, plain) => {
    await plain.view(table, typedCsv(csv));
    return csv.split("/").pop()!;
  }),
  entry("DuckDB over Parquet in place (3 files, a glob)", async (dir, table, csv, plain) => {
    const folder = join(dir, `${table}-parquet`);
    mkdirSync(folder, { recursive: true });
    const c = await plain.conn();
    for (let i = 0; i < 3; i++) {
      await c.run(
        `COPY (SELECT * EXCLUDE (__rn) FROM (SELECT *, row_number() OVER () AS __rn FROM ${typedCsv(csv)}) WHERE __rn % 3 = ${i}) ` +
          `TO ${quote(join(folder, `part-${i}.parquet`))} (FORMAT parquet)`,
      );
    }
    await plain.view(table, `read_parquet(${quote(`${folder}/*.parquet`)})`);
    return `{ files: "${table}-parquet/*.parquet" }`;
  }),
  entry(
    "DuckDB prepared database file",
    async (dir, table, csv, plain) => {
      const file = join(dir, "suite.duckdb");
      const inst = await DuckDBInstance.create(file);
      const c = await inst.connect();
      await c.run(`CREATE TABLE "${table}" AS SELECT * FROM ${typedCsv(csv)}`);
      c.closeSync();
      inst.closeSync();
      await plain.view(table, typedCsv(csv));
      return `{ duckdb: suite.duckdb, table: ${table} }`;
    },
    // Prepared once by the steward before the curator starts.
    async (policy) => {
      for (const d of policy.datasets.values()) await prepareDataset(policy, d, new Bits(seededBytes(`prepare-${d.name}`)));
    },
  ),
]);

