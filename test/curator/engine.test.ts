/**
 * The DuckDB engine: load-time schema checks (steward report), grid units, per-unit bounding, and
 * SQL parameterization (no plan value ever reaches SQL text).
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { DuckDBInstance } from "@duckdb/node-api";
import { join } from "node:path";
import { Bits, seededBytes } from "../../runtime/core/index.js";
import { DuckDBEngine } from "../../runtime/curator/engines/duckdb/engine.js";
import { keptRowsFrom } from "../../runtime/curator/engines/shapes.js";
import { loadPolicy } from "../../runtime/curator/policy.js";
import { Params, compileWhere } from "../../runtime/curator/sql.js";
import { PolicyError } from "../../runtime/errors.js";
import { type Opened, open, policyWith, tempPolicy } from "../fixtures/curator-helpers.js";

let ctx: Opened;
beforeAll(async () => {
  ctx = await open();
});
afterAll(async () => {
  await ctx.engine.close();
});

describe("loading", () => {
  it("reports rows left out, per reason, to the steward", () => {
    // test/fixtures/visits.csv: 68 rows; 6 crafted not to fit the schema (see the generator comments).
    expect(ctx.engine.loadReport("visits")).toEqual({
      rows: 62,
      rejected: 6,
      reasons: {
        "age: not a number": 1,
        "age: not a whole number": 1,
        "district: value outside the declared list": 1,
        "unit id missing": 1,
        "visit_date: date outside the declared range": 1,
        "wait_minutes: not a finite number": 1,
      },
    });
    // Without a unit column a missing patient id does not matter.
    expect(ctx.engine.loadReport("rows").rows).toBe(63);
  });

  it("stores numbers as clamped grid units and keeps empty cells missing", async () => {
    const t = ctx.engine.relation("visits");
    const age = t.schema.columns.get("age")!.ident;
    const wait = t.schema.columns.get("wait_minutes")!.ident;
    const rows = await ctx.engine.query(`SELECT min(${age}), max(${age}), min(${wait}), max(${wait}), count(*) - count(${age}) FROM ${t.from}`, []);
    // age 130 is clamped to 100; wait 500 to 240 = 480 half-minute units; one row has no age.
    const [minAge, maxAge, minWait, maxWait, missing] = rows[0] as bigint[];
    expect(minAge).toBeGreaterThanOrEqual(0n);
    expect(maxAge).toBe(100n);
    expect(minWait).toBeGreaterThanOrEqual(0n);
    expect(maxWait).toBe(480n);
    expect(missing).toBe(1n);
    // A value of 38.5 minutes is stored as 77 half-minute units (fixture rows of p01 and p09).
    const w77 = await ctx.engine.query(`SELECT count(*) FROM ${t.from} WHERE ${wait} = 77`, []);
    expect(w77[0][0]).toBeGreaterThanOrEqual(1n);
  });

  it("names the dataset and column when the data file lacks a declared column", async () => {
    const file = tempPolicy(
      policyWith(`    source: data.csv
    accounting: { mode: pure, cap: { epsilon: "1" } }
    analysts: [ada]
    columns:
      height: { type: integer, range: [0, 300] }
`),
      { "data.csv": "age\n3\n" },
    );
    await expect(DuckDBEngine.open(loadPolicy(file), { quiet: true })).rejects.toThrow(/datasets\.d\.columns\.height: the data file has no column "height"/);
    const missing = tempPolicy(
      policyWith(`    source: nowhere.csv
    accounting: { mode: pure, cap: { epsilon: "1" } }
    columns:
      age: { type: integer, range: [0, 300] }
`),
    );
    await expect(DuckDBEngine.open(loadPolicy(missing), { quiet: true })).rejects.toThrow(PolicyError);
  });

  it("counts ragged CSV lines as rows left out and reads the header from the first line", async () => {
    // A longer ragged line early in the file once made DuckDB's sniffer take it for the header
    // (bench/RESULTS.md, reliability tests); the header must come from line 1 whatever follows.
    const body = `    source: data.csv
    accounting: { mode: pure, cap: { epsilon: "1" } }
    analysts: [ada]
    columns:
      age: { type: integer, range: [0, 100] }
      place: { type: category, values: ["a, b", c], from: "Place, town" }
`;
    const file = tempPolicy(policyWith(body), {
      "data.csv": '\uFEFFage,"Place, town"\r\n3,c,SECRET-7,extra\r\n4\r\n5,"a, b"\r\n6,c\r\nx,c\r\n7,"c",1,2,3\r\n',
    });
    const e = await DuckDBEngine.open(loadPolicy(file), { quiet: true });
    // Lines 2, 3 and 7 have the wrong number of fields (each counted once); line 6 has text for age.
    expect(e.loadReport("d")).toEqual({ rows: 2, rejected: 4, reasons: { "wrong number of fields": 3, "age: not a number": 1 } });
    const t = e.relation("d");
    const rows = await e.query(`SELECT ${t.schema.columns.get("age")!.ident}, ${t.schema.columns.get("place")!.ident} FROM ${t.from} ORDER BY 1`, []);
    expect(rows).toEqual([
      [5n, 0],
      [6n, 1],
    ]);
    await e.close();
  });

  it("refuses a CSV whose first line is not a header, naming the line but no value", async () => {
    const body = `    source: data.csv
    accounting: { mode: pure, cap: { epsilon: "1" } }
    analysts: [ada]
    columns:
      age: { type: integer, range: [0, 100] }
`;
    const open1 = tempPolicy(policyWith(body), { "data.csv": 'age,"SECRET-8\n' });
    const err = await DuckDBEngine.open(loadPolicy(open1), { quiet: true }).then(
      () => null,
      (x: unknown) => x,
    );
    expect(err).toBeInstanceOf(PolicyError);
    expect((err as Error).message).toMatch(/datasets\.d\.source: line 1 is not a CSV header/);
    expect((err as Error).message).not.toContain("SECRET");
    const dup = tempPolicy(policyWith(body), { "data.csv": "age,age\n1,2\n" });
    await expect(DuckDBEngine.open(loadPolicy(dup), { quiet: true })).rejects.toThrow(/columns\.age: the data file has more than one column "age"/);
  });

  it("shares one table among datasets that differ only in caps and analysts", async () => {
    // Only d is granted: one analyst's datasets over one file share one cap, so their caps must agree.
    const body = (cap: string, analysts = "[]") => `    source: data.csv
    accounting: { mode: pure, cap: { epsilon: "${cap}" } }
    analysts: ${analysts}
    columns:
      age: { type: integer, range: [0, 100] }
`;
    const file = tempPolicy(`${policyWith(body("1", "[ada]"))}  e:\n${body("2")}  f:\n${body("3").replace("range: [0, 100]", "range: [0, 50]")}`, {
      "data.csv": "age\n3\n70\nx\n",
    });
    const e = await DuckDBEngine.open(loadPolicy(file), { quiet: true });
    expect(e.relation("e").from).toBe(e.relation("d").from);
    expect(e.relation("e").schema.dataset.accounting.capEpsilon.toString()).toBe("2");
    expect(e.relation("f").from).not.toBe(e.relation("d").from); // another range: its own table
    expect(e.loadReport("e")).toEqual({ rows: 2, rejected: 1, reasons: { "age: not a number": 1 } });
    await e.close();
  });

  it("loads Parquet sources the same way", async () => {
    const csv = join(ctx.policy.dir, "visits.csv");
    const dir = tempPolicy("x: 1\n").replace(/policy\.yaml$/, "");
    const parquet = join(dir, "visits.parquet");
    const inst = await DuckDBInstance.create(":memory:");
    const conn = await inst.connect();
    await conn.run(`COPY (SELECT * FROM read_csv('${csv}', header = true, all_varchar = true)) TO '${parquet}' (FORMAT parquet)`);
    conn.closeSync();
    inst.closeSync();
    const file = tempPolicy(
      policyWith(`    source: ${parquet}
    unit: { column: patient_id, maxRows: 4 }
    accounting: { mode: pure, cap: { epsilon: "1" } }
    analysts: [ada]
    columns:
      age: { type: integer, range: [0, 100] }
      district: { type: category, values: [Northgate, Riverside, Old Town] }
`),
    );
    const e = await DuckDBEngine.open(loadPolicy(file), { quiet: true });
    expect(e.loadReport("d")).toEqual({
      rows: 64,
      rejected: 4,
      reasons: { "age: not a number": 1, "age: not a whole number": 1, "district: value outside the declared list": 1, "unit id missing": 1 },
    });
    await e.close();
  });
});

describe("contribution bounding", () => {
  /** Kept rows per unit (unit hash -> sorted row numbers in the source file order) for a filter. */
  async function keptPerUnit(e: DuckDBEngine, where?: Parameters<typeof compileWhere>[0]) {
    const t = e.relation("visits");
    const ps = new Params();
    const w = where === undefined ? null : compileWhere(where, t.schema, ps);
    const from = keptRowsFrom(t, w, ["__u", t.schema.columns.get("age")!.ident, t.schema.columns.get("visit_date")!.ident], ps);
    const rows = await e.query(
      `SELECT __u, count(*), list(CAST(c3 AS VARCHAR) || '/' || coalesce(CAST(c0 AS VARCHAR), '-') ORDER BY c3, c0) FROM ${from}${w === null ? "" : " WHERE __m"} GROUP BY __u`,
      ps.values(),
    );
    return new Map(rows.map((r) => [String(r[0]), { n: Number(r[1]), rows: String(r[2]) }]));
  }

  it("keeps at most maxRows rows per unit and every row of smaller units", async () => {
    const t = ctx.engine.relation("visits");
    const k = t.schema.dataset.unit.maxRows;
    const all = await ctx.engine.query(`SELECT __u, count(*) FROM ${t.from} GROUP BY __u`, []);
    const full = new Map(all.map((r) => [String(r[0]), Number(r[1])]));
    const kept = await keptPerUnit(ctx.engine);
    expect(kept.size).toBe(full.size);
    let bounded = 0;
    for (const [u, { n }] of kept) {
      expect(n).toBe(Math.min(full.get(u)!, k));
      if (full.get(u)! > k) bounded++;
    }
    expect(bounded).toBe(1); // p01 has 12 rows in the fixture
  });

  it("chooses the kept rows at random (CSPRNG at load; seeded here), the same for every query of an engine", async () => {
    // The kept rows of the one unit with 12 rows (p01), asked twice of the same engine.
    const choice = async (seed: string) => {
      const e = await DuckDBEngine.open(ctx.policy, { quiet: true, datasets: [ctx.policy.datasets.get("visits")!], bits: new Bits(seededBytes(seed)) });
      const t = e.relation("visits");
      const big = String((await e.query(`SELECT DISTINCT __u FROM ${t.from} WHERE __n = 12`, []))[0][0]);
      const once = (await keptPerUnit(e)).get(big)!.rows;
      const twice = (await keptPerUnit(e)).get(big)!.rows;
      await e.close();
      expect(twice).toBe(once);
      return once;
    };
    const picks = [];
    for (const seed of ["a", "b", "c", "d", "e"]) picks.push(await choice(seed));
    expect(await choice("a")).toBe(picks[0]); // same seed, same choice
    expect(new Set(picks).size).toBeGreaterThan(1); // other seeds, other choices
  });

  it("bounds after filtering: a unit keeps min(maxRows, matching rows)", async () => {
    const t = ctx.engine.relation("visits");
    const cond = { op: "ge", column: "visit_date", value: "2025-04-01" } as const;
    const ps = new Params();
    const w = compileWhere(cond, t.schema, ps);
    const matching = await ctx.engine.query(`SELECT __u, count(*) FROM ${t.from} WHERE ${w} GROUP BY __u`, ps.values());
    const kept = await keptPerUnit(ctx.engine, cond);
    expect(kept.size).toBe(matching.length);
    for (const [u, n] of matching) expect(kept.get(String(u))!.n).toBe(Math.min(4, Number(n)));
  });
});

describe("SQL parameterization", () => {
  const SAFE_SQL = /^[A-Za-z0-9_\s"$(),*<>=.+\-/]*$/;

  it("puts tricky declared values and every literal into bound parameters, never into SQL text", async () => {
    const evil = "x'); DROP TABLE d0; --";
    const file = tempPolicy(
      policyWith(`    source: data.csv
    accounting: { mode: pure, cap: { epsilon: "100" } }
    analysts: [ada]
    columns:
      tag: { type: category, values: ["${evil}", "O'Brien", "plain"] }
      day: { type: date, range: ["2025-01-01", "2025-12-31"] }
      n:   { type: number, range: [-5, 5], step: "0.25" }
`),
      { "data.csv": `tag,day,n\n"${evil}",2025-02-01,1.5\nO'Brien,2025-03-01,-2\nplain,2025-04-01,4.75\n` },
    );
    const o = await open(file);
    const plan = {
      v: 1,
      dataset: "d",
      where: {
        op: "and",
        of: [
          { op: "in", column: "tag", values: [evil, "O'Brien"] },
          { op: "between", column: "day", low: "2025-01-15", high: "2025-03-15" },
          { op: "gt", column: "n", value: -4.125 },
        ],
      },
      groupBy: [{ column: "tag" }],
      measure: { kind: "sum", column: "n" },
      privacy: { epsilon: "100" },
    };
    const prepared = o.answerer.prepare("ada", plan);
    const release = await prepared.compute(new Bits(seededBytes("param")));
    expect(release.rows.map((r) => r.key[0])).toEqual([evil, "O'Brien", "plain"]);
    expect(o.statements.length).toBeGreaterThan(0);
    for (const s of o.statements) {
      expect(s.sql).toMatch(SAFE_SQL);
      for (const text of [evil, "O'Brien", "2025-01-15", "tag", "day", "-4.125"]) expect(s.sql).not.toContain(text);
      // The date literals travel as parameters.
      expect(s.params.some((p) => p.type === "varchar" && p.value === "2025-01-15")).toBe(true);
    }
    await o.engine.close();
  });

  it("every statement of every measure kind is built from internal names and placeholders only", async () => {
    ctx.statements.length = 0;
    const kinds = [
      { kind: "count" },
      { kind: "sum", column: "age" },
      { kind: "mean", column: "wait_minutes" },
      { kind: "variance", column: "age" },
      { kind: "quantile", column: "age", p: [0.5] },
      { kind: "histogram", column: "age", bins: 5 },
      { kind: "crosstab", rows: "district", cols: "insured" },
      { kind: "describe" },
    ];
    for (const m of kinds) {
      const p = ctx.answerer.prepare("ada", {
        v: 1,
        dataset: "visits",
        where: { op: "and", of: [{ op: "eq", column: "district", value: "Old Town" }, { op: "le", column: "visit_date", value: "2025-11-30" }] },
        measure: m,
        privacy: { epsilon: "1" },
      });
      await p.compute(new Bits(seededBytes(1)));
    }
    expect(ctx.statements.length).toBeGreaterThanOrEqual(kinds.length);
    for (const s of ctx.statements) {
      expect(s.sql).toMatch(SAFE_SQL);
      expect(s.sql).not.toMatch(/Old Town|2025|district|visit_date|age|wait_minutes|patient_id/);
    }
  });
});

describe("prepared statements kept per connection", () => {
  it("re-binds a kept statement on every call and survives evicting old ones", async () => {
    const t = ctx.engine.relation("visits");
    const age = t.schema.columns.get("age")!.ident;
    const sql = `SELECT count(*) FROM ${t.from} WHERE ${age} <= $1`;
    // Reference counts with the bound value spelled into fresh SQL (one statement per call).
    const direct = async (v: bigint) => (await ctx.engine.query(`SELECT count(*) FROM ${t.from} WHERE ${age} <= ${v} AND ${v - 1n} = ${v - 1n}`, []))[0][0];
    for (const v of [30n, 60n, 30n, 100n, 0n]) {
      expect((await ctx.engine.query(sql, [{ type: "bigint", value: v }]))[0][0]).toBe(await direct(v));
    }
    // More distinct statements than a connection keeps (64): the oldest are dropped, answers stay right.
    for (let i = 0; i < 80; i++) {
      const r = await ctx.engine.query(`SELECT ${i} + $1`, [{ type: "integer", value: 1 }]);
      expect(Number(r[0][0])).toBe(i + 1);
    }
    expect((await ctx.engine.query(sql, [{ type: "bigint", value: 60n }]))[0][0]).toBe(await direct(60n));
    // Parallel calls use separate connections, each with its own statements.
    const many = await Promise.all([10n, 20n, 30n, 40n, 50n, 60n].map((v) => ctx.engine.query(sql, [{ type: "bigint", value: v }])));
    for (const [i, v] of [10n, 20n, 30n, 40n, 50n, 60n].entries()) expect(many[i][0][0]).toBe(await direct(v));
  });
});
