/**
 * Generated visits for the PostgreSQL engine tests: the same rows go into a PostgreSQL table
 * (typed columns) and a CSV file (for the DuckDB engine), so both engines answer over one data set.
 * Invented data, deterministic (a fixed-seed LCG; test data only, never noise).
 *
 * Rows are crafted to exercise every row-level rule: values past the declared ranges (clamped),
 * off-grid values (rounded; never an exact tie after binary64 division, so DuckDB's binary64 and
 * PostgreSQL's exact rounding agree), NULLs in every column, and rows that do not fit the schema
 * (a NaN score, a region outside the list, a date outside the range: each such value is missing;
 * a missing unit id: the row is left out where there is a unit).
 */
import { writeFileSync } from "node:fs";
import type pg from "pg";
import { DuckDBInstance } from "@duckdb/node-api";

export const COLUMNS_SQL =
  "patient bigint, age integer, income numeric(12,2), score double precision, dose integer, region text, visited date, insured boolean";

/** A value no error message may ever show (it is in the data, never in the policy). */
export const MARKER = "zq-marker-region";

export interface Row {
  patient: number | null;
  age: number | null;
  income: string | null;
  score: number | null;
  dose: number | null;
  region: string | null;
  visited: string | null;
  insured: boolean | null;
}

export const REGIONS = ["north", "south", "east", "west"];

/**
 * `n` rows; patients 1..units, each with 1..maxPer rows. With maxPer <= 10 the "small" dataset
 * (maxRows 10) never bounds.
 */
export function generate(n: number, maxPer: number): Row[] {
  let s = 20261202n;
  const next = (m: number): number => {
    s = (s * 6364136223846793005n + 1442695040888963407n) & ((1n << 64n) - 1n);
    return Number((s >> 33n) % BigInt(m));
  };
  const rows: Row[] = [];
  let patient = 1;
  while (rows.length < n) {
    const per = 1 + next(maxPer);
    for (let j = 0; j < per && rows.length < n; j++) {
      const i = rows.length;
      const cents = next(7_000_000) - 10_000; // -100.00 .. 69899.99
      let scoreHund = next(1400) - 700; // -7.00 .. 6.99, never ending in 5
      if (Math.abs(scoreHund) % 10 === 5) scoreHund += 1;
      rows.push({
        patient: i % 97 === 13 ? null : patient,
        age: i % 31 === 7 ? null : next(130) - 5,
        income: i % 29 === 3 ? null : (cents / 100).toFixed(2),
        score: i % 53 === 11 ? Number.NaN : i % 23 === 5 ? null : scoreHund / 100,
        dose: i % 19 === 2 ? null : next(1150),
        region: i % 89 === 17 ? MARKER : i % 17 === 4 ? null : REGIONS[next(4)],
        visited:
          i % 83 === 19
            ? "2019-06-30"
            : i % 41 === 9
              ? null
              : new Date(Date.UTC(2020, 0, 1) + next(1827) * 86_400_000).toISOString().slice(0, 10),
        insured: i % 13 === 6 ? null : next(2) === 1,
      });
    }
    patient++;
  }
  return rows;
}

function csvCell(v: unknown): string {
  if (v === null) return "";
  if (typeof v === "number" && Number.isNaN(v)) return "NaN";
  return String(v);
}

export function writeCsv(file: string, rows: readonly Row[]): void {
  const head = "patient,age,income,score,dose,region,visited,insured";
  const lines = rows.map((r) => [r.patient, r.age, r.income, r.score, r.dose, r.region, r.visited, r.insured].map(csvCell).join(","));
  writeFileSync(file, `${head}\n${lines.join("\n")}\n`);
}

/** Inserts rows into `table` (already created with COLUMNS_SQL) in batches. */
export async function insertRows(client: pg.Client, table: string, rows: readonly Row[]): Promise<void> {
  const batch = 500;
  for (let at = 0; at < rows.length; at += batch) {
    const part = rows.slice(at, at + batch);
    const values: unknown[] = [];
    const tuples = part.map((r, i) => {
      values.push(r.patient, r.age, r.income, r.score === null ? null : Number.isNaN(r.score) ? "NaN" : r.score, r.dose, r.region, r.visited, r.insured);
      const b = i * 8;
      return `($${b + 1}::bigint, $${b + 2}::integer, $${b + 3}::numeric, $${b + 4}::double precision, $${b + 5}::integer, $${b + 6}::text, $${b + 7}::date, $${b + 8}::boolean)`;
    });
    await client.query(`INSERT INTO ${table} VALUES ${tuples.join(", ")}`, values);
  }
}

/** The columns block of a policy dataset over these rows (indented for policyWith-style YAML). */
export const POLICY_COLUMNS = `    columns:
      age:     { type: integer, range: [0, 100] }
      income:  { type: number, range: [0, 50000], step: "0.5" }
      score:   { type: number, range: [-5, 5], step: "0.1" }
      dose:    { type: integer, range: [0, 1000], step: "10" }
      region:  { type: category, values: [north, south, east, west] }
      visited: { type: date, range: ["2020-01-01", "2024-12-31"] }
      insured: { type: boolean }
`;

/**
 * Plain SQL (written here by hand, not by the engine) for the rows and the clamped grid units of
 * each numeric column, as the policy above declares them. A value that does not fit its declared
 * type is missing (NULL): a NaN score, a region outside the list, a date outside the range; with a
 * unit column, rows without a unit id are left out.
 */
export function plainFits(table: string, withUnit: boolean): string {
  // PostgreSQL's LEAST/GREATEST skip NULLs, so a missing value is kept missing explicitly.
  const units = (x: string, e: string) => `CASE WHEN ${x} IS NULL THEN NULL ELSE ${e} END`;
  return (
    `SELECT patient, age, income, dose, ` +
    `CASE WHEN score <> 'NaN' THEN score END AS score, ` +
    `CASE WHEN region IN ('north', 'south', 'east', 'west') THEN region END AS region, ` +
    `CASE WHEN visited BETWEEN '2020-01-01' AND '2024-12-31' THEN visited END AS visited, insured, ` +
    `${units("age", "LEAST(GREATEST(age, 0), 100)")} AS age_u, ${units("income", "round(LEAST(GREATEST(income, 0), 50000) * 2)")} AS income_u, ` +
    `CASE WHEN score IS NULL OR score = 'NaN' THEN NULL ELSE round(LEAST(GREATEST(score::numeric, -5), 5) * 10) END AS score_u, ` +
    `${units("dose", "round(LEAST(GREATEST(dose, 0), 1000) / 10.0)")} AS dose_u ` +
    `FROM ${table}${withUnit ? " WHERE patient IS NOT NULL" : ""}`
  );
}

/** The CSV as a Parquet file (DuckDB's own CSV reader and types), for DuckDB's in-place engine. */
export async function csvToParquet(csv: string, parquet: string): Promise<void> {
  const db = await DuckDBInstance.create(":memory:");
  const c = await db.connect();
  try {
    const q = (s: string) => `'${s.replace(/'/g, "''")}'`;
    await c.run(
      `COPY (SELECT * FROM read_csv(${q(csv)}, header = true, columns = {'patient': 'BIGINT', 'age': 'BIGINT', 'income': 'DOUBLE', ` +
        `'score': 'DOUBLE', 'dose': 'BIGINT', 'region': 'VARCHAR', 'visited': 'DATE', 'insured': 'BOOLEAN'})) TO ${q(parquet)} (FORMAT parquet)`,
    );
  } finally {
    c.closeSync();
    db.closeSync();
  }
}

/** PostgreSQL types of the shared suite's columns (answer-suite.ts SUITE_COLUMNS). */
const SUITE_PG: Record<string, string> = { BIGINT: "bigint", DOUBLE: "double precision", VARCHAR: "text", DATE: "date", BOOLEAN: "boolean" };

export function suiteColumnsSql(cols: readonly { name: string; type: string }[]): string {
  return cols.map((c) => `${c.name} ${SUITE_PG[c.type]}`).join(", ");
}

/** Inserts the suite's raw rows (arrays in SUITE_COLUMNS order) into `table`. */
export async function insertSuiteRows(client: pg.Client, table: string, cols: readonly { name: string; type: string }[], rows: readonly unknown[][]): Promise<void> {
  const batch = 400;
  for (let at = 0; at < rows.length; at += batch) {
    const part = rows.slice(at, at + batch);
    const values: unknown[] = [];
    const tuples = part.map((r, i) => {
      values.push(...r);
      return `(${cols.map((c, j) => `$${i * cols.length + j + 1}::${SUITE_PG[c.type]}`).join(", ")})`;
    });
    await client.query(`INSERT INTO ${table} VALUES ${tuples.join(", ")}`, values);
  }
}
