/**
 * Clamped shares (docs/methods.md §21) on the real DuckDB engine: true counts against plain SQL on
 * the raw file (a separate DuckDB instance reading the CSV with no policy), the budget split and
 * cost note, describe's option, and the refusals at prepare time (before any data is read).
 *
 * At a huge epsilon the discrete Laplace noise is 0 except with probability about
 * 2 exp(-10^9 / 30) (docs/methods.md §4 tail), so released counts are the true ones.
 * The data are invented for this test.
 */
import { DuckDBInstance } from "@duckdb/node-api";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { Bits, Rational, seededBytes } from "../../runtime/core/index.js";
import type { QueryPlan } from "../../runtime/protocol/messages.js";
import { type Opened, open, policyWith, tempPolicy } from "../fixtures/curator-helpers.js";

/** 400 rows: u (units of at most 2 rows), a in [-30, 130] with gaps, b with missing values, bounds hit exactly. */
function csv(): string {
  const lines = ["u,a,b,g"];
  for (let i = 0; i < 400; i++) {
    const a = i % 50 === 0 ? "" : String(((i * 37) % 161) - 30); // -30..130, declared [0, 100]
    const b = i % 9 === 0 ? "" : i % 13 === 0 ? "2.5" : i % 17 === 0 ? "-0.25" : String(((i * 11) % 50) / 10); // declared [0, 2.5]
    lines.push(`u${Math.floor(i / 2)},${a},${b},${["x", "y"][i % 2]}`);
  }
  return lines.join("\n") + "\n";
}

let o: Opened;
let dir: string;
beforeAll(async () => {
  const file = tempPolicy(
    policyWith(`    source: data.csv
    unit: { column: u, maxRows: 2 }
    accounting: { mode: pure, cap: { epsilon: "1000000000000" } }
    analysts: [ada]
    columns:
      a: { type: integer, range: [0, 100] }
      b: { type: number, range: [0, 2.5], step: "0.25" }
      g: { type: category, values: [x, y] }
`),
    { "data.csv": csv() },
  );
  dir = join(file, "..");
  o = await open(file);
});
afterAll(async () => {
  await o.engine.close();
});

const plan = (measure: QueryPlan["measure"], privacy: QueryPlan["privacy"] = { epsilon: "1000000000" }, where?: QueryPlan["where"]): QueryPlan => ({
  v: 1,
  dataset: "d",
  privacy,
  measure,
  ...(where ? { where } : {}),
});

/** Plain SQL on the raw CSV: rows below / above the declared bounds, rows with a value. */
async function plainSql(column: string, lower: number, upper: number, where = "TRUE"): Promise<number[]> {
  const db = await DuckDBInstance.create(":memory:");
  const conn = await db.connect();
  const r = await conn.runAndReadAll(
    `SELECT count(*) FILTER (WHERE ${column} < ${lower}), count(*) FILTER (WHERE ${column} > ${upper}), count(${column}) ` +
      `FROM read_csv('${join(dir, "data.csv")}', header = true, all_varchar = false) WHERE ${where}`,
  );
  const row = r.getRows()[0].map((v) => Number(v));
  conn.closeSync();
  return row;
}

describe("clamped shares", () => {
  it("true counts match plain SQL on the raw data, for two columns and under a filter", async () => {
    const r = await o.answerer.prepare("ada", plan({ kind: "clamped", columns: ["a", "b"] })).compute(new Bits(seededBytes(1)));
    const byStat = (column: string, stat: string) => r.rows.find((x) => x.column === column && x.stat === stat)!.value;
    for (const [col, lo, hi] of [["a", 0, 100], ["b", 0, 2.5]] as const) {
      const [below, above, total] = await plainSql(col, lo, hi);
      expect(below).toBeGreaterThan(0);
      expect(above).toBeGreaterThan(0);
      expect(Number(byStat(col, "below lower"))).toBe(below);
      expect(Number(byStat(col, "above upper"))).toBe(above);
      expect(Number(byStat(col, "values"))).toBe(total);
      expect(Number(byStat(col, "share below lower"))).toBeCloseTo(below / total, 12);
      expect(Number(byStat(col, "share above upper"))).toBeCloseTo(above / total, 12);
    }
    // A value exactly at a bound is not clamped: b has rows at exactly 2.5 (i % 13 == 0) and they
    // are not in "above upper" (plain SQL uses > 2.5 too, and they exist).
    const [atBound] = (await (async () => {
      const db = await DuckDBInstance.create(":memory:");
      const c = await db.connect();
      const x = await c.runAndReadAll(`SELECT count(*) FROM read_csv('${join(dir, "data.csv")}', header = true) WHERE b = 2.5`);
      c.closeSync();
      return x.getRows()[0];
    })()) as bigint[];
    expect(Number(atBound)).toBeGreaterThan(0);

    const f = await o.answerer.prepare("ada", plan({ kind: "clamped", columns: ["a"] }, undefined, { op: "eq", column: "g", value: "x" })).compute(new Bits(seededBytes(2)));
    const [fb, fa, ft] = await plainSql("a", 0, 100, "g = 'x'");
    expect(f.rows.map((x) => Number(x.value)).slice(0, 3)).toEqual([fb, fa, ft]);
  });

  it("records k per count, splits the budget exactly and states the cost", async () => {
    const p = o.answerer.prepare("ada", plan({ kind: "clamped", columns: ["a", "b"] }, { epsilon: "1" }));
    expect(p.cost.toString()).toBe("1");
    const q = await o.answerer.preview("ada", plan({ kind: "clamped", columns: ["a", "b"] }, { epsilon: "1" }));
    expect(q.halfWidths.map((h) => `${h.column} ${h.stat}`)).toEqual(["a below lower", "a above upper", "a values", "b below lower", "b above upper", "b values"]);
    expect(p.notes.join(" ")).toMatch(/Clamped shares cost ε 1 of your cap/);
    expect(p.notes.join(" ")).toMatch(/The 2 columns share the budget evenly/);
  });

  it("[C21.1] every part: sensitivity k = 2, a quarter of epsilon each for two columns", async () => {
    const r = await o.answerer.prepare("ada", plan({ kind: "clamped", columns: ["a", "b"] }, { epsilon: "1" })).compute(new Bits(seededBytes(3)));
    expect(r.mechanisms.map((m) => [m.sensitivity, m.cost, m.scale])).toEqual([
      ["2", "1/4", "8"],
      ["2", "1/4", "8"],
      ["2", "1/4", "8"],
      ["2", "1/4", "8"],
    ]);
    expect(r.rows).toHaveLength(10);
    for (const row of r.rows) expect(Rational.parse(row.low!).le(Rational.parse(row.high!))).toBe(true);
  });

  it("describe can include it as one more part", async () => {
    const d = o.answerer.prepare("ada", plan({ kind: "describe", clamped: true }, { epsilon: "9" }));
    // 1 count + 3 x 2 numeric + 1 keyed + 1 clamped = 9 parts
    expect(d.notes.join(" ")).toMatch(/evenly over 9 parts: .*clamped shares of the numeric columns \(each part gets 1\/9\)/);
    const r = await d.compute(new Bits(seededBytes(4)));
    expect(r.rows.filter((x) => x.stat === "share above upper").map((x) => x.column)).toEqual(["a", "b"]);
    const plain = o.answerer.prepare("ada", plan({ kind: "describe" }, { epsilon: "8" }));
    expect(plain.notes.join(" ")).toMatch(/evenly over 8 parts/);
  });

  it("refuses, before any SQL, what it cannot answer", () => {
    o.statements.length = 0;
    const bad: [QueryPlan, RegExp][] = [
      [plan({ kind: "clamped", columns: ["g"] }), /needs a numeric column/],
      [plan({ kind: "clamped", columns: ["zz"] }), /zz/],
      [plan({ kind: "clamped", columns: ["a", "a"] }), /same column twice/],
      [plan({ kind: "clamped", columns: [] }), /at least one column/],
      [plan({ kind: "clamped", columns: Array.from({ length: 51 }, () => "a") }), /at most 50 columns/],
      [plan({ kind: "clamped", columns: ["a"] }, { within: 5 } as QueryPlan["privacy"]), /accuracy-first/],
      [{ ...plan({ kind: "clamped", columns: ["a"] }), measure: { kind: "clamped", columns: ["a"], extra: 1 } } as unknown as QueryPlan, /./],
      [plan({ kind: "describe", clamped: "yes" } as unknown as QueryPlan["measure"]), /true or false/],
    ];
    for (const [p, msg] of bad) expect(() => o.answerer.prepare("ada", p), JSON.stringify(p.measure).slice(0, 80)).toThrow(msg);
    expect(o.statements).toHaveLength(0);
  });
});
