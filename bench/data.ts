/**
 * Deterministic bench data, generated inside DuckDB from range() and hashes of the row number, so
 * the same size always gives the same bytes on the same DuckDB version, with no random source.
 * Written once as Parquet into a cache folder (default .hush/bench/) and reused by later runs.
 *
 * Six columns: a unit id (about 4 rows per unit, Poisson-like, so bounding at 8 rows drops a few),
 * an integer, a number partly beyond its declared range (so clamping matters), a category of 8
 * values, a date and a boolean. The data is invented for benchmarking only.
 */
import fs from "node:fs";
import path from "node:path";
import { DuckDBInstance } from "@duckdb/node-api";

export const BENCH_REGIONS = ["north", "south", "east", "west", "centre", "coast", "hills", "lakes"] as const;

/** The public schema the bench policy declares for the generated file. */
export const BENCH_COLUMNS = {
  age: { type: "integer", range: [18, 90], step: "1" },
  amount: { type: "number", range: [0, 1000], step: "0.01" },
  region: { type: "category", values: [...BENCH_REGIONS] },
  day: { type: "date", range: ["2025-01-01", "2025-12-31"] },
  member: { type: "boolean" },
} as const;

export const BENCH_UNIT_COLUMN = "pid";
export const BENCH_DATA_VERSION = 1;

/** The SELECT that produces `rows` rows; also used by tests that want a small sample in memory. */
export function benchSelectSql(rows: number): string {
  if (!Number.isSafeInteger(rows) || rows < 1) throw new RangeError(`bench rows must be a positive integer, got ${rows}`);
  const units = Math.max(1, Math.floor(rows / 4));
  const regions = `[${BENCH_REGIONS.map((r) => `'${r}'`).join(", ")}]`;
  return `SELECT
      (hash(i, 1) % ${units})::BIGINT AS pid,
      (18 + hash(i, 2) % 73)::INTEGER AS age,
      round((hash(i, 3) % 120000) / 100.0, 2)::DOUBLE AS amount,
      (${regions})[1 + (hash(i, 4) % 8)::INTEGER] AS region,
      (DATE '2025-01-01' + (hash(i, 5) % 365)::INTEGER)::DATE AS day,
      (hash(i, 6) % 3 = 0) AS member
    FROM range(${rows}) t(i)`;
}

/** Path of the cached Parquet file with `rows` rows, generating it first if absent. */
export async function ensureBenchData(rows: number, dir = path.resolve(".hush/bench")): Promise<string> {
  fs.mkdirSync(dir, { recursive: true });
  const file = path.join(dir, `bench-v${BENCH_DATA_VERSION}-${rows}.parquet`);
  if (fs.existsSync(file)) return file;
  const tmp = `${file}.${process.pid}.tmp`;
  const db = await DuckDBInstance.create(":memory:");
  const con = await db.connect();
  try {
    await con.run(`COPY (${benchSelectSql(rows)}) TO '${tmp.replace(/'/g, "''")}' (FORMAT parquet, ROW_GROUP_SIZE 122880)`);
  } finally {
    con.closeSync();
    db.closeSync();
  }
  // Rename last, so an interrupted run never leaves a truncated file under the cached name.
  fs.renameSync(tmp, file);
  return file;
}
