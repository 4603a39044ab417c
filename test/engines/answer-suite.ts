/**
 * The answer-level suite every data engine must pass (issue 12): the same asks give identical true
 * aggregates, sensitivities, costs, notes, refusals and (with the same noise bits) releases.
 *
 * HOW AN ENGINE REGISTERS. A test file (test/engines/<engine>.test.ts) builds a list of
 * EngineUnderTest entries and calls `engineSuite(entries)`. Each entry:
 *   - `store(dir, table)`: puts the suite's rows (SUITE_COLUMNS, `table.rows`, raw values: numbers,
 *     ISO date strings, booleans, strings or null) where the engine reads them, and returns the
 *     YAML of the policy's `source:` for that table (a string, or a flow mapping such as
 *     `{ files: "flat/*.parquet" }`), plus anything else the entry needs to clean up;
 *   - `open(policy)`: opens the engine over every dataset of the policy (a DataEngine);
 *   - `plain(sql)`: runs plain SQL directly in the engine over the stored rows, where the suite's
 *     tables are named by `plainTable(name)`; the suite checks its own reference against it;
 *   - `close()`: stops whatever `store` started.
 * The reference for every check is computed in JavaScript from the generated rows (outside any
 * engine) and checked against the entry's own plain SQL, then against the engine through the
 * DataEngine interface and through the Answerer. DuckDB in memory over a CSV of the same rows is
 * opened beside every entry to compare answer-level outputs (costs, notes, refusals, releases).
 */
import { seededRandom } from "../reliability/seeded-random.js";
import { mkdtempSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { Bits, seededBytes } from "../../runtime/core/index.js";
import { Answerer } from "../../runtime/curator/answer.js";
import { DuckDBEngine } from "../../runtime/curator/engines/duckdb/engine.js";
import type { CellTerm, DataEngine } from "../../runtime/curator/engines/types.js";
import { type LoadedPolicy, loadPolicy } from "../../runtime/curator/policy.js";
import type { Condition, GroupKey } from "../../runtime/protocol/messages.js";
import { ADA_HASH } from "../fixtures/curator-helpers.js";

export type Raw = number | string | boolean | null;

/** The suite's columns: name and SQL type of the raw values an engine must store. */
export const SUITE_COLUMNS: readonly { name: string; type: "BIGINT" | "DOUBLE" | "VARCHAR" | "DATE" | "BOOLEAN" }[] = [
  { name: "pid", type: "VARCHAR" },
  { name: "age", type: "BIGINT" },
  { name: "wait", type: "DOUBLE" },
  { name: "district", type: "VARCHAR" },
  { name: "region", type: "VARCHAR" },
  { name: "score", type: "BIGINT" },
  { name: "day", type: "DATE" },
  { name: "insured", type: "BOOLEAN" },
];

export interface SuiteTable {
  name: string;
  rows: Raw[][];
}

export interface EngineUnderTest {
  name: string;
  store(dir: string, table: SuiteTable): Promise<string>;
  open(policy: LoadedPolicy): Promise<DataEngine>;
  plain(sql: string): Promise<unknown[][]>;
  plainTable(name: string): string;
  close(): Promise<void>;
}

// ---- the rows (deterministic; invented for tests) ------------------------------------------------

const DISTRICTS = ["Northgate", "Riverside", "Old Town"];
const REGIONS = ["north", "south"];

/** A small seeded generator for test data only (never for noise). */
const rng = seededRandom;

/**
 * 500 units with 1..12 rows each (about 3000 rows). Ages include values below 0 and above 100,
 * waits above 240 (clamped); about 5% of values are missing; region and score are the same on
 * every row of a unit (so bounded counts and sums of them do not depend on which rows are kept);
 * a few rows have no unit id. Values lie on their grids (so rounding is exact in any engine).
 */
export function suiteRows(): Raw[][] {
  const r = rng(20261202);
  const rows: Raw[][] = [];
  for (let u = 0; u < 500; u++) {
    const n = 1 + Math.floor(r() * (u % 5 === 0 ? 12 : 4));
    const region = REGIONS[Math.floor(r() * 2)];
    const score = Math.floor(r() * 50);
    for (let j = 0; j < n; j++) {
      const miss = () => r() < 0.05;
      const age = miss() ? null : Math.floor(r() * 120) - 10;
      const wait = miss() ? null : Math.floor(r() * 560) / 2;
      const district = miss() ? null : DISTRICTS[Math.floor(r() * 3)];
      const month = 1 + Math.floor(r() * 12);
      const day = `2025-${String(month).padStart(2, "0")}-${String(1 + Math.floor(r() * 28)).padStart(2, "0")}`;
      const insured = miss() ? null : r() < 0.6;
      rows.push([u % 97 === 3 && j === 0 ? null : `p${u}`, age, wait, district, region, score, day, insured]);
    }
  }
  return rows;
}

/** CSV text of the rows (header line, empty cells for missing values). */
export function suiteCsv(rows: readonly Raw[][]): string {
  return `${SUITE_COLUMNS.map((c) => c.name).join(",")}\n${rows.map((row) => row.map((v) => (v === null ? "" : String(v))).join(",")).join("\n")}\n`;
}

const COLUMNS_YAML = `    columns:
      age:      { type: integer, range: [0, 100] }
      wait:     { type: number, range: [0, 240], step: "0.5" }
      district: { type: category, values: [Northgate, Riverside, Old Town] }
      region:   { type: category, values: [north, south] }
      score:    { type: integer, range: [0, 60] }
      day:      { type: date, range: ["2025-01-01", "2025-12-31"] }
      insured:  { type: boolean }
`;

/** The suite's policy over given sources: `flat` (each row its own unit) and `people` (unit pid, at most 4 rows). */
export function suitePolicy(dir: string, flat: string, people: string, extra = ""): string {
  const file = join(dir, `policy-${Math.random().toString(36).slice(2)}.yaml`);
  writeFileSync(
    file,
    `${extra}analysts:
  ada: { token: "${ADA_HASH}" }
datasets:
  flat:
    source: ${flat}
    population: suite-flat
    accounting: { mode: pure, cap: { epsilon: "1000" } }
    analysts: [ada]
${COLUMNS_YAML}  people:
    source: ${people}
    population: suite-people
    unit: { column: pid, maxRows: 4 }
    accounting: { mode: pure, cap: { epsilon: "1000" } }
    analysts: [ada]
${COLUMNS_YAML}`,
  );
  return file;
}

// ---- the reference, in JavaScript ------------------------------------------------------------------

const COL = Object.fromEntries(SUITE_COLUMNS.map((c, i) => [c.name, i]));
const clampUnits = (v: number, lo: number, hi: number, step: number) => Math.round(Math.min(Math.max(v, lo), hi) / step);
const UNITS: Record<string, (v: number) => number> = {
  age: (v) => clampUnits(v, 0, 100, 1),
  wait: (v) => clampUnits(v, 0, 240, 0.5),
  score: (v) => clampUnits(v, 0, 60, 1),
};
const BOUNDS: Record<string, [number, number]> = { age: [0, 100], wait: [0, 240], score: [0, 60] };

/** Rows as they count for a dataset: `people` leaves out rows without a unit id. */
function rowsOf(rows: readonly Raw[][], dataset: string): Raw[][] {
  return dataset === "people" ? rows.filter((r) => r[COL.pid] !== null) : rows.slice();
}

function refTerm(rows: readonly Raw[][], t: CellTerm): bigint {
  let s = 0n;
  for (const r of rows) {
    switch (t.kind) {
      case "count":
        s += 1n;
        break;
      case "present":
        if (r[COL[t.column]] !== null) s += 1n;
        break;
      case "sum":
      case "sumSquares": {
        const v = r[COL[t.column]];
        if (v !== null) {
          const u = BigInt(UNITS[t.column](v as number));
          s += t.kind === "sum" ? u : u * u;
        }
        break;
      }
      case "sumProduct": {
        const a = r[COL[t.a]];
        const b = r[COL[t.b]];
        if (a !== null && b !== null) s += BigInt(UNITS[t.a](a as number)) * BigInt(UNITS[t.b](b as number));
        break;
      }
      case "atLower":
      case "atUpper": {
        const v = r[COL[t.column]];
        const [lo, hi] = BOUNDS[t.column];
        if (v !== null && (t.kind === "atLower" ? (v as number) < lo : (v as number) > hi)) s += 1n;
        break;
      }
    }
  }
  return s;
}

/** Index of a row's group key (declared order), or null when its value is missing. */
function keyIndex(r: Raw[], k: GroupKey): number | null {
  const v = r[COL[k.column]];
  if (v === null) return null;
  if (k.column === "district") return DISTRICTS.indexOf(v as string);
  if (k.column === "region") return REGIONS.indexOf(v as string);
  if (k.column === "insured") return v ? 1 : 0;
  if ("bins" in k && k.bins !== undefined) {
    const [lo, hi] = BOUNDS[k.column];
    const step = k.column === "wait" ? 0.5 : 1;
    const u = UNITS[k.column](v as number);
    const span = (hi - lo) / step;
    return Math.min(Math.floor(((u - lo / step) * k.bins) / span), k.bins - 1);
  }
  throw new Error(`suite: no key rule for ${k.column}`);
}

function refCells(rows: readonly Raw[][], keys: readonly GroupKey[], terms: readonly CellTerm[]): bigint[][] {
  const sizes = keys.map((k) => (k.column === "district" ? 3 : k.column === "region" || k.column === "insured" ? 2 : (k as { bins: number }).bins));
  const n = sizes.reduce((a, b) => a * b, 1);
  const groups: Raw[][][] = Array.from({ length: n }, () => []);
  for (const r of rows) {
    let index = 0;
    let skip = false;
    keys.forEach((k, i) => {
      const x = keyIndex(r, k);
      if (x === null) skip = true;
      else index = index * sizes[i] + x;
    });
    if (!skip) groups[index].push(r);
  }
  return groups.map((g) => terms.map((t) => refTerm(g, t)));
}

/** A JavaScript filter for the suite's conditions (the few shapes used here). */
type RowTest = (r: Raw[]) => boolean;

const FILTERS: { name: string; where: Condition; test: RowTest }[] = [
  {
    name: "age between 20 and 60 (clamped values)",
    where: { op: "between", column: "age", low: 20, high: 60 },
    test: (r) => r[COL.age] !== null && UNITS.age(r[COL.age] as number) >= 20 && UNITS.age(r[COL.age] as number) <= 60,
  },
  {
    name: "district in [Northgate, Old Town] and not insured",
    where: { op: "and", of: [{ op: "in", column: "district", values: ["Northgate", "Old Town"] }, { op: "eq", column: "insured", value: false }] },
    test: (r) => (r[COL.district] === "Northgate" || r[COL.district] === "Old Town") && r[COL.insured] === false,
  },
  {
    name: "day from 2025-07-01, region south",
    where: { op: "and", of: [{ op: "ge", column: "day", value: "2025-07-01" }, { op: "eq", column: "region", value: "south" }] },
    test: (r) => (r[COL.day] as string) >= "2025-07-01" && r[COL.region] === "south",
  },
];

/** Kept rows of `people` under a filter when only the count matters: per unit min(matching, 4). */
function boundedCount(rows: readonly Raw[][], test: RowTest, k = 4): bigint {
  const per = new Map<string, number>();
  for (const r of rows) if (test(r)) per.set(r[COL.pid] as string, (per.get(r[COL.pid] as string) ?? 0) + 1);
  let s = 0n;
  for (const n of per.values()) s += BigInt(Math.min(n, k));
  return s;
}

const TERMS: CellTerm[] = [
  { kind: "count" },
  { kind: "present", column: "age" },
  { kind: "sum", column: "age" },
  { kind: "sumSquares", column: "age" },
  { kind: "sum", column: "wait" },
  { kind: "sumSquares", column: "wait" },
  { kind: "sumProduct", a: "age", b: "wait" },
  { kind: "atLower", column: "age" },
  { kind: "atUpper", column: "age" },
  { kind: "atUpper", column: "wait" },
];

const KEYSETS: GroupKey[][] = [[], [{ column: "district" }], [{ column: "region" }, { column: "insured" }], [{ column: "wait", bins: 7 }]];

/** Candidate buckets of a quantile (as quantile.ts asks them): b(x) = #{candidates <= x}. */
function refBuckets(rows: readonly Raw[][], column: "age" | "wait", stride: bigint, count: bigint, lo: bigint, hi: bigint): [bigint, bigint][] {
  const m = new Map<bigint, bigint>();
  for (const r of rows) {
    const v = r[COL[column]];
    if (v === null) continue;
    const u = BigInt(UNITS[column](v as number));
    const b = u >= hi ? count : (() => {
      const q = (u - lo) / stride + 1n;
      return q < count - 1n ? q : count - 1n;
    })();
    m.set(b, (m.get(b) ?? 0n) + 1n);
  }
  return [...m.entries()].sort((a, b) => (a[0] < b[0] ? -1 : 1));
}

// ---- the suite -------------------------------------------------------------------------------------

export function engineSuite(entries: readonly EngineUnderTest[]): void {
  const rows = suiteRows();
  for (const entry of entries) {
    describe(`engine: ${entry.name}`, () => {
      let dir: string;
      let policy: LoadedPolicy;
      let engine: DataEngine;
      let reference: DuckDBEngine;
      let refPolicy: LoadedPolicy;

      beforeAll(async () => {
        dir = mkdtempSync(join(tmpdir(), "hush-engine-suite-"));
        const flat = await entry.store(dir, { name: "flat", rows });
        const people = await entry.store(dir, { name: "people", rows });
        policy = loadPolicy(suitePolicy(dir, flat, people));
        engine = await entry.open(policy);
        writeFileSync(join(dir, "ref-flat.csv"), suiteCsv(rows));
        writeFileSync(join(dir, "ref-people.csv"), suiteCsv(rows));
        refPolicy = loadPolicy(suitePolicy(dir, "ref-flat.csv", "ref-people.csv"));
        reference = await DuckDBEngine.open(refPolicy, { quiet: true });
      });
      afterAll(async () => {
        await engine?.close();
        await reference?.close();
        await entry.close();
      });

      it("plain SQL over the stored rows agrees with the JavaScript reference", async () => {
        const t = entry.plainTable("flat");
        const [r] = await entry.plain(`SELECT count(*), count(age), sum(age), count(district) FROM ${t}`);
        const ages = rows.filter((x) => x[COL.age] !== null);
        expect(r.map((v) => BigInt(String(v)))).toEqual([
          BigInt(rows.length),
          BigInt(ages.length),
          ages.reduce((s, x) => s + BigInt(x[COL.age] as number), 0n),
          BigInt(rows.filter((x) => x[COL.district] !== null).length),
        ]);
        // Clamped and on the grid, in plain SQL: the numbers the engine must give for `flat`.
        const [c] = await entry.plain(
          `SELECT sum(CASE WHEN age < 0 THEN 0 WHEN age > 100 THEN 100 ELSE age END), sum(CASE WHEN wait > 240 THEN 480 ELSE CAST(wait * 2 AS BIGINT) END) FROM ${t}`,
        );
        const ref = refCells(rows, [], [{ kind: "sum", column: "age" }, { kind: "sum", column: "wait" }])[0];
        expect(c.map((v) => BigInt(String(v)))).toEqual(ref);
      });

      it("cells of every term and key set, unfiltered and filtered, equal the reference (each row its own unit)", async () => {
        for (const keys of KEYSETS) {
          expect(await engine.cells({ dataset: "flat", keys, terms: TERMS }), JSON.stringify(keys)).toEqual(refCells(rows, keys, TERMS));
          for (const f of FILTERS) {
            const got = await engine.cells({ dataset: "flat", where: f.where, keys, terms: TERMS });
            expect(got, `${JSON.stringify(keys)} where ${f.name}`).toEqual(refCells(rows.filter(f.test), keys, TERMS));
          }
        }
      });

      it("quantile buckets equal the reference, at grid stride and thinned, with and without a filter", async () => {
        const grids = [
          { column: "age" as const, stride: 1n, count: 101n, lo: 0n, hi: 100n },
          { column: "wait" as const, stride: 7n, count: 70n, lo: 0n, hi: 480n },
        ];
        for (const g of grids) {
          const req = { dataset: "flat", column: g.column, lowerUnits: g.lo, upperUnits: g.hi, stride: g.stride, count: g.count };
          // A bucket with no kept rows may be given as 0 or left out (the same ranks either way).
          const nonzero = (b: [bigint, bigint][]) => b.filter(([, n]) => n !== 0n);
          expect(nonzero(await engine.buckets(req))).toEqual(refBuckets(rows, g.column, g.stride, g.count, g.lo, g.hi));
          const f = FILTERS[1];
          expect(nonzero(await engine.buckets({ ...req, where: f.where }))).toEqual(refBuckets(rows.filter(f.test), g.column, g.stride, g.count, g.lo, g.hi));
        }
      });

      it("per-unit bounding keeps min(maxRows, matching rows) of every unit, with and without filters", async () => {
        const people = rowsOf(rows, "people");
        const all = () => true;
        const [[n]] = await engine.cells({ dataset: "people", keys: [], terms: [{ kind: "count" }] });
        expect(n).toBe(boundedCount(people, all));
        expect(n).toBeLessThan(BigInt(people.length)); // some units are bounded
        for (const f of FILTERS) {
          const [[m]] = await engine.cells({ dataset: "people", where: f.where, keys: [], terms: [{ kind: "count" }] });
          expect(m, f.name).toBe(boundedCount(people, f.test));
        }
        // Region and score are constant within a unit: their bounded counts and sums do not depend on the kept rows.
        const byRegion = await engine.cells({ dataset: "people", keys: [{ column: "region" }], terms: [{ kind: "count" }, { kind: "sum", column: "score" }] });
        const want = REGIONS.map((reg) => {
          const per = new Map<string, { n: number; score: number }>();
          for (const r of people) if (r[COL.region] === reg) per.set(r[COL.pid] as string, { n: (per.get(r[COL.pid] as string)?.n ?? 0) + 1, score: r[COL.score] as number });
          let c = 0n;
          let s = 0n;
          for (const { n: k, score } of per.values()) {
            c += BigInt(Math.min(k, 4));
            s += BigInt(Math.min(k, 4) * score);
          }
          return [c, s];
        });
        expect(byRegion).toEqual(want);
      });

      it("the same kept rows for every statement of one open engine", async () => {
        const req = { dataset: "people", keys: [{ column: "district" }], terms: [{ kind: "sum", column: "age" } as CellTerm, { kind: "sumSquares", column: "wait" } as CellTerm] };
        const a = await engine.cells(req);
        const b = await engine.cells(req);
        expect(b).toEqual(a);
      });

      it("previews, costs, notes, refusals and releases equal DuckDB in memory's", async () => {
        const mine = new Answerer(engine, policy);
        const ref = new Answerer(reference, refPolicy);
        const plans: unknown[] = [
          { v: 1, dataset: "flat", measure: { kind: "count" }, privacy: { epsilon: "1" } },
          { v: 1, dataset: "flat", measure: { kind: "sum", column: "wait" }, groupBy: [{ column: "district" }], privacy: { epsilon: "1" } },
          { v: 1, dataset: "flat", measure: { kind: "mean", column: "age" }, where: FILTERS[0].where, privacy: { epsilon: "1" } },
          { v: 1, dataset: "flat", measure: { kind: "variance", column: "wait" }, groupBy: [{ column: "region" }], privacy: { epsilon: "1" } },
          { v: 1, dataset: "flat", measure: { kind: "quantile", column: "age", p: [0.25, 0.5] }, privacy: { epsilon: "1" } },
          { v: 1, dataset: "flat", measure: { kind: "histogram", column: "wait", bins: 6 }, privacy: { epsilon: "1" } },
          { v: 1, dataset: "flat", measure: { kind: "crosstab", rows: "district", cols: "insured" }, privacy: { epsilon: "1" } },
          { v: 1, dataset: "flat", measure: { kind: "describe" }, privacy: { epsilon: "1" } },
          { v: 1, dataset: "people", measure: { kind: "count" }, where: FILTERS[2].where, privacy: { epsilon: "1" } },
          { v: 1, dataset: "people", measure: { kind: "count" }, groupBy: [{ column: "region" }], privacy: { epsilon: "1" } },
        ];
        for (const [i, plan] of plans.entries()) {
          const a = await mine.preview("ada", plan);
          const b = await ref.preview("ada", plan);
          expect(a.prepared.cost.toString(), `plan ${i}`).toBe(b.prepared.cost.toString());
          expect(a.halfWidths).toEqual(b.halfWidths);
          expect(a.notes).toEqual(b.notes);
          const ra = await a.prepared.compute(new Bits(seededBytes(`suite-${i}`)));
          const rb = await b.prepared.compute(new Bits(seededBytes(`suite-${i}`)));
          // Same true aggregates and the same noise bits: the same release, row for row.
          expect(ra, `plan ${i}`).toEqual(rb);
        }
        const bad: unknown[] = [
          { v: 1, dataset: "flat", measure: { kind: "sum", column: "nope" }, privacy: { epsilon: "1" } },
          { v: 1, dataset: "flat", measure: { kind: "sum", column: "district" }, privacy: { epsilon: "1" } },
          { v: 1, dataset: "flat", measure: { kind: "count" }, where: { op: "eq", column: "district", value: "Elsewhere" }, privacy: { epsilon: "1" } },
          { v: 1, dataset: "people", measure: { kind: "count" }, where: { op: "eq", column: "pid", value: "p1" }, privacy: { epsilon: "1" } },
          { v: 1, dataset: "flat", measure: { kind: "count" }, where: { op: "between", column: "age", low: 9, high: 3 }, privacy: { epsilon: "1" } },
        ];
        for (const plan of bad) {
          const msg = (f: () => unknown) => {
            try {
              f();
              return "answered";
            } catch (e) {
              return `${(e as Error).name}: ${(e as Error).message}`;
            }
          };
          const a = msg(() => mine.prepare("ada", plan));
          expect(a).not.toBe("answered");
          expect(a).toBe(msg(() => ref.prepare("ada", plan)));
        }
      });
    });
  }
}
