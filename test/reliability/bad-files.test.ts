/**
 * Bad input corpus, part 2: what the steward hands the curator. Policy files (parsePolicy must
 * refuse each with a PolicyError naming the file and the place in it) and data files (the curator
 * either loads the rows that fit and reports how many it left out and why, or refuses to start
 * with a clear policy error). A marker string planted in bad cells must never appear in any
 * message, since errors may name columns but never show a data value.
 */
import fs from "node:fs";
import path from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { stringify } from "yaml";
import { CuratorClient } from "../../runtime/client/client.js";
import { parsePolicy } from "../../runtime/curator/policy.js";
import { hashToken } from "../../runtime/curator/tokens.js";
import { PolicyError } from "../../runtime/errors.js";
import { CuratorProcess, CuratorStartError } from "../../bench/curator-process.js";
import { writeWorkspace } from "../../bench/workspace.js";
import { REL_COLUMNS, shortTempDir, writeCsv } from "./fixtures.js";

const MARKER = "ZQXJ7SECRET";

// ---- policies --------------------------------------------------------------------------------

type Doc = Record<string, any>; // eslint-disable-line @typescript-eslint/no-explicit-any

let TOKEN_HASH = "";
function basePolicy(): Doc {
  return {
    curator: { key: "keys/curator.key", ledger: "state/ledger.sqlite" },
    analysts: { ada: { token: TOKEN_HASH } },
    datasets: {
      visits: {
        description: "d",
        source: "data/visits.csv",
        unit: { column: "pid", maxRows: 4, maxGroups: 2 },
        accounting: { mode: "pure", cap: { epsilon: "1" } },
        analysts: ["ada"],
        columns: structuredClone(REL_COLUMNS),
      },
    },
  };
}

const ds = (d: Doc) => d.datasets.visits;
const POLICY_CASES: [string, string | ((d: Doc) => void), string][] = [
  ["empty file", "", "(top level)"],
  ["not YAML", "datasets: [unclosed\n  - :", "YAML"],
  ["a list at the top", "- a\n- b\n", "(top level)"],
  ["a plain string", "hello", "(top level)"],
  ["datasets missing", (d) => delete d.datasets, "datasets"],
  ["unknown top-level key", (d) => (d.curators = {}), "curators"],
  ["accounting missing", (d) => delete ds(d).accounting, "accounting"],
  ["unknown accounting mode", (d) => (ds(d).accounting = { mode: "approx", cap: { epsilon: "1" } }), "accounting"],
  ["cap epsilon negative", (d) => (ds(d).accounting.cap.epsilon = "-1"), "cap.epsilon"],
  ["cap epsilon zero", (d) => (ds(d).accounting.cap.epsilon = "0"), "cap.epsilon"],
  ["cap epsilon not a number", (d) => (ds(d).accounting.cap.epsilon = "lots"), "cap.epsilon"],
  ["zcdp without delta", (d) => (ds(d).accounting = { mode: "zcdp", cap: { epsilon: "1" } }), "accounting"],
  ["zcdp delta of 2", (d) => (ds(d).accounting = { mode: "zcdp", cap: { epsilon: "1", delta: "2" } }), "delta"],
  ["zcdp delta of 0", (d) => (ds(d).accounting = { mode: "zcdp", cap: { epsilon: "1", delta: "0" } }), "delta"],
  ["unknown column type", (d) => (ds(d).columns.age = { type: "text" }), "columns.age"],
  ["range reversed", (d) => (ds(d).columns.age.range = [90, 18]), "columns.age.range"],
  ["range of one value", (d) => (ds(d).columns.age.range = [5]), "columns.age.range"],
  ["step zero", (d) => (ds(d).columns.amount.step = "0"), "columns.amount.step"],
  ["step negative", (d) => (ds(d).columns.amount.step = "-0.01"), "columns.amount.step"],
  ["number column without step", (d) => delete ds(d).columns.amount.step, "columns.amount.step"],
  ["integer with a fractional step", (d) => (ds(d).columns.age.step = "0.5"), "columns.age.step"],
  ["bounds off the step grid", (d) => (ds(d).columns.amount.range = [0, 200.005]), "columns.amount.range"],
  ["grid too fine", (d) => (ds(d).columns.amount = { type: "number", range: [0, 1e12], step: "0.000001" }), "columns.amount"],
  ["category without values", (d) => (ds(d).columns.region.values = []), "columns.region.values"],
  ["category value twice", (d) => (ds(d).columns.region.values = ["a", "a"]), "columns.region.values"],
  ["category with 1001 values", (d) => (ds(d).columns.region.values = Array.from({ length: 1001 }, (_, i) => `v${i}`)), "columns.region.values"],
  ["impossible date", (d) => (ds(d).columns.day.range = ["2025-02-30", "2025-12-31"]), "columns.day.range"],
  ["dates reversed", (d) => (ds(d).columns.day.range = ["2025-12-31", "2025-01-01"]), "columns.day.range"],
  ["maxRows zero", (d) => (ds(d).unit.maxRows = 0), "unit.maxRows"],
  ["maxRows fractional", (d) => (ds(d).unit.maxRows = 1.5), "unit.maxRows"],
  ["maxGroups above maxRows", (d) => (ds(d).unit.maxGroups = 9), "unit.maxGroups"],
  ["unit column also public", (d) => (ds(d).columns.pid = { type: "integer", range: [0, 10] }), "unit.column"],
  ["token not a hash", (d) => (d.analysts.ada.token = "hunter2"), "analysts.ada.token"],
  ["dataset analyst not declared", (d) => (ds(d).analysts = ["ada", "bob"]), "analysts[1]"],
  ["source of unknown format", (d) => (ds(d).source = "data/visits.txt"), "source"],
  ["dataset name with spaces", (d) => (d.datasets = { "clinic visits": ds(d) }), "datasets.clinic visits"],
  ["no columns", (d) => (ds(d).columns = {}), "columns"],
  ["alias bomb", Array.from({ length: 12 }, (_, i) => (i === 0 ? "a0: &a0 [x, x, x, x, x, x, x, x, x]" : `a${i}: &a${i} [${Array(9).fill(`*a${i - 1}`).join(", ")}]`)).join("\n") + "\ndatasets: {}\n", "YAML"],
];

describe("bad input: policy files", () => {
  beforeAll(() => {
    TOKEN_HASH = hashToken("a-token");
    // The base policy is valid, so each refusal below is caused by its one change.
    expect(() => parsePolicy(stringify(basePolicy()), "/tmp/base.yaml")).not.toThrow();
  });

  it.each(POLICY_CASES)("%s", (_name, change, where) => {
    let text: string;
    if (typeof change === "string") text = change;
    else {
      const d = basePolicy();
      change(d);
      text = stringify(d);
    }
    const file = "/tmp/hush-policy-under-test.yaml";
    let err: unknown = null;
    try {
      parsePolicy(text, file);
    } catch (e: unknown) {
      err = e;
    }
    expect(err).toBeInstanceOf(PolicyError);
    const message = (err as PolicyError).message;
    expect(message).toContain(file);
    expect(message).toContain(where);
  });
});

// ---- data files ------------------------------------------------------------------------------

interface CsvCase {
  name: string;
  write: (file: string) => void;
  /** "loads": starts and reports rows left out (at least `leftOut`); "refuses": a policy error naming `mentions`. */
  expect: { loads: true; leftOut: number } | { loads: false; mentions: string[] };
}

const HEADER = "pid,age,amount,region,day,member";
const goodRows = (n: number) => Array.from({ length: n }, (_, i) => `${i % 50},${20 + (i % 60)},${(i % 190) + 0.5},north,2025-03-0${1 + (i % 9)},true`);
const csv = (lines: string[]) => (file: string) => fs.writeFileSync(file, lines.join("\n") + "\n");

const CSV_CASES: CsvCase[] = [
  { name: "empty file", write: (f) => fs.writeFileSync(f, ""), expect: { loads: false, mentions: ["source", "has no column"] } },
  { name: "header only", write: csv([HEADER]), expect: { loads: true, leftOut: 0 } },
  { name: "missing column", write: csv(["pid,age,region,day,member", "1,30,north,2025-01-01,true"]), expect: { loads: false, mentions: ["amount"] } },
  { name: "missing unit column", write: csv(["age,amount,region,day,member", "30,1,north,2025-01-01,true"]), expect: { loads: false, mentions: ["unit.column"] } },
  { name: "text in a number column", write: csv([HEADER, ...goodRows(20), `7,${MARKER},3,north,2025-01-01,true`]), expect: { loads: true, leftOut: 1 } },
  { name: "fraction in an integer column", write: csv([HEADER, ...goodRows(20), "7,30.5,3,north,2025-01-01,true"]), expect: { loads: true, leftOut: 1 } },
  { name: "undeclared category value", write: csv([HEADER, ...goodRows(20), `7,30,3,${MARKER},2025-01-01,true`]), expect: { loads: true, leftOut: 1 } },
  { name: "malformed date", write: csv([HEADER, ...goodRows(20), "7,30,3,north,2025-02-31,true", `8,30,3,north,${MARKER},true`]), expect: { loads: true, leftOut: 2 } },
  { name: "date out of range", write: csv([HEADER, ...goodRows(20), "7,30,3,north,1999-01-01,true"]), expect: { loads: true, leftOut: 1 } },
  { name: "not a boolean", write: csv([HEADER, ...goodRows(20), `7,30,3,north,2025-01-01,${MARKER}`]), expect: { loads: true, leftOut: 1 } },
  { name: "huge and non-finite numbers", write: csv([HEADER, ...goodRows(20), "7,30,1e308,north,2025-01-01,true", "7,99999999999999999999999,3,north,2025-01-01,true", "8,30,inf,north,2025-01-01,true", "9,30,NaN,north,2025-01-01,true"]), expect: { loads: true, leftOut: 2 } },
  { name: "missing unit id", write: csv([HEADER, ...goodRows(20), ",30,3,north,2025-01-01,true"]), expect: { loads: true, leftOut: 1 } },
  // The engine reads the header from line 1 and counts lines with the wrong number of fields as
  // rows left out (DuckDB's sniffer once took the longer ragged line for the header).
  { name: "ragged rows", write: csv([HEADER, ...goodRows(20), "7,30,3", `7,30,3,north,2025-01-01,true,${MARKER},extra`]), expect: { loads: true, leftOut: 2 } },
  { name: "binary garbage", write: (f) => fs.writeFileSync(f, Buffer.from(Array.from({ length: 4096 }, (_, i) => (i * 131 + 7) % 256))), expect: { loads: false, mentions: ["source", "has no column"] } },
  { name: "file not found", write: () => undefined, expect: { loads: false, mentions: ["not found"] } },
];

describe("bad input: data files", () => {
  const root = shortTempDir("badf");
  const started: CuratorProcess[] = [];
  afterAll(async () => {
    await Promise.all(started.map((p) => p.stop()));
    fs.rmSync(root, { recursive: true, force: true });
  });

  it.each(CSV_CASES.map((c) => [c.name, c] as const))("%s", async (_name, c) => {
    const dir = path.join(root, c.name.replace(/[^a-z]+/g, "-"));
    fs.mkdirSync(path.join(dir, "data"), { recursive: true });
    const data = path.join(dir, "data", "visits.csv");
    c.write(data);
    const ws = writeWorkspace(dir, {
      analysts: ["ada"],
      datasets: {
        visits: {
          description: "bad data case",
          source: "data/visits.csv",
          unit: { column: "pid", maxRows: 4, maxGroups: 2 },
          accounting: { mode: "pure", cap: { epsilon: "1" } },
          analysts: ["ada"],
          columns: REL_COLUMNS,
        },
      },
    });
    const listen = `ipc://${path.join(dir, "c.sock")}`;
    let proc: CuratorProcess | null = null;
    let refusal: CuratorStartError | null = null;
    try {
      proc = await CuratorProcess.start({ policyFile: ws.policyFile, listen });
      started.push(proc);
    } catch (e: unknown) {
      if (!(e instanceof CuratorStartError)) throw e;
      refusal = e;
    }
    if (!c.expect.loads) {
      expect(refusal, "the curator should refuse this file").not.toBeNull();
      expect(refusal!.kind).toBe("policy");
      expect(refusal!.reason).toContain("datasets.visits");
      expect(c.expect.mentions.some((m) => refusal!.reason.includes(m)), refusal!.reason).toBe(true);
      expect(refusal!.reason + refusal!.stderr).not.toContain(MARKER);
      return;
    }
    expect(refusal, refusal?.message).toBeNull();
    // The steward's load line counts the rows left out, by reason naming the column only.
    const line = /dataset visits: loaded (\d+) rows, left out (\d+)/.exec(proc!.stderr);
    expect(line, proc!.stderr).not.toBeNull();
    expect(Number(line![2])).toBeGreaterThanOrEqual(c.expect.leftOut);
    expect(proc!.stderr).not.toContain(MARKER);
    // And it serves: a good query gets an answer.
    const client = await CuratorClient.connect({ address: listen, analyst: "ada", token: ws.tokens.ada });
    try {
      const r = await client.ask({ v: 1, dataset: "visits", measure: { kind: "count" }, privacy: { epsilon: "0.5" } });
      expect(r.replay).toBe(false);
      expect(JSON.stringify(r)).not.toContain(MARKER);
    } finally {
      await client.close();
    }
  });
});
