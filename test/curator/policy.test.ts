import { describe, expect, it } from "vitest";
import { join } from "node:path";
import { PolicyError } from "../../runtime/errors.js";
import { Rational, rhoFromEpsilonDelta } from "../../runtime/core/index.js";
import { loadPolicy, parsePolicy } from "../../runtime/curator/policy.js";
import { hashToken, parseTokenHash, verifyToken } from "../../runtime/curator/tokens.js";
import { symlinkSync } from "node:fs";
import { dirname } from "node:path";
import { ADA_HASH, FIXTURES, FIXTURE_POLICY, policyWith, tempPolicy } from "../fixtures/curator-helpers.js";

const GOOD_DATASET = `    source: data.csv
    accounting: { mode: pure, cap: { epsilon: "1" } }
    analysts: [ada]
    columns:
      age: { type: integer, range: [0, 100] }
`;

describe("tokens", () => {
  it("hashes with a random salt and verifies only the right token", async () => {
    const a = hashToken("secret-1");
    const b = hashToken("secret-1");
    expect(a).not.toBe(b); // random salt
    expect(a).toMatch(/^scrypt\$16384\$8\$1\$[A-Za-z0-9+/=]+\$[A-Za-z0-9+/=]+$/);
    expect(await verifyToken(a, "secret-1")).toBe(true);
    expect(await verifyToken(a, "secret-2")).toBe(false);
    expect(await verifyToken(ADA_HASH, "ada-token")).toBe(true);
  });

  it("returns false (never throws) on malformed hashes", async () => {
    for (const bad of ["", "scrypt", "bcrypt$1$2$3$4$5", "scrypt$1000$8$1$AAAA$BBBB", "scrypt$16384$8$1$!!$??", "scrypt$16384$8$1$$", `${ADA_HASH}$x`]) {
      expect(await verifyToken(bad, "ada-token")).toBe(false);
      expect(parseTokenHash(bad)).toBeNull();
    }
  });
});

describe("loadPolicy on the fixture", () => {
  it("reads datasets, units, columns and caps, resolving paths against the policy's directory", () => {
    const p = loadPolicy(FIXTURE_POLICY);
    expect(p.keyPath).toBe(join(FIXTURES, "keys/curator.key"));
    expect(p.ledgerPath).toBe(join(FIXTURES, "state/ledger.sqlite"));
    expect([...p.analysts.keys()]).toEqual(["ada", "ben"]);
    const v = p.datasets.get("visits")!;
    expect(v.source).toBe(join(FIXTURES, "visits.csv"));
    expect(v.format).toBe("csv");
    expect(v.unit).toEqual({ column: "patient_id", maxRows: 4, maxGroups: 2 });
    expect(v.accounting.mode).toBe("pure");
    expect(v.accounting.capEpsilon.toString()).toBe("10");
    expect(v.columns.map((c) => `${c.name}:${c.type}`)).toEqual([
      "age:integer",
      "wait_minutes:number",
      "district:category",
      "visit_date:date",
      "insured:boolean",
    ]);
    const wait = v.columns[1];
    if (wait.type !== "number") throw new Error("expected a number column");
    expect(wait.grid.lowerUnits).toBe(0n);
    expect(wait.grid.upperUnits).toBe(480n);
    const rows = p.datasets.get("rows")!;
    expect(rows.unit).toEqual({ column: null, maxRows: 1, maxGroups: 1 });
    if (rows.accounting.mode !== "zcdp") throw new Error("expected zcdp");
    // The rho cap is the CKS conversion of (5, 1e-6) done by the core (docs/methods.md §2).
    expect(rows.accounting.capRho.eq(rhoFromEpsilonDelta(Rational.parse("5"), Rational.parse("1e-6")))).toBe(true);
    expect(rows.analysts).toEqual(["ada", "ben"]);
  });

  it("names the file when it cannot be read", () => {
    expect(() => loadPolicy("/nonexistent/hush/policy.yaml")).toThrow(/policy \/nonexistent\/hush\/policy.yaml: cannot be read/);
  });
});

// Each case: the dataset body (or a whole file), and the path inside the file the error must name.
const BAD: { name: string; text: string; path: string; what: RegExp }[] = [
  { name: "not YAML", text: "datasets: [: :", path: "", what: /not valid YAML/ },
  { name: "top level a list", text: "- a\n- b\n", path: "(top level)", what: /mapping/ },
  { name: "unknown top key", text: `${policyWith(GOOD_DATASET)}extra: 1\n`, path: "(top level)", what: /unknown key "extra"/ },
  {
    name: "analyst with a plain token",
    text: policyWith(GOOD_DATASET).replace(`"${ADA_HASH}"`, '"hunter2"'),
    path: "analysts.ada.token",
    what: /token hash/,
  },
  { name: "bad dataset name", text: policyWith(GOOD_DATASET).replace("  d:\n", "  9bad:\n"), path: "datasets.9bad", what: /dataset names/ },
  { name: "missing source", text: policyWith(GOOD_DATASET.replace("    source: data.csv\n", "")), path: "datasets.d.source", what: /./ },
  { name: "unknown extension", text: policyWith(GOOD_DATASET.replace("data.csv", "data.xlsx")), path: "datasets.d.source", what: /\.csv or \.parquet/ },
  {
    name: "range reversed",
    text: policyWith(GOOD_DATASET.replace("range: [0, 100]", "range: [100, 0]")),
    path: "datasets.d.columns.age.range",
    what: /lower bound must be below/,
  },
  {
    name: "range not numbers",
    text: policyWith(GOOD_DATASET.replace("range: [0, 100]", 'range: ["zero", 100]')),
    path: "datasets.d.columns.age.range[0]",
    what: /exact number/,
  },
  {
    name: "range of one element",
    text: policyWith(GOOD_DATASET.replace("range: [0, 100]", "range: [0]")),
    path: "datasets.d.columns.age.range",
    what: /./,
  },
  {
    name: "number without step",
    text: policyWith(GOOD_DATASET.replace("type: integer", "type: number")),
    path: "datasets.d.columns.age.step",
    what: /needs a step/,
  },
  {
    name: "integer with fractional step",
    text: policyWith(GOOD_DATASET.replace("range: [0, 100]", 'range: [0, 100], step: "0.5"')),
    path: "datasets.d.columns.age.step",
    what: /whole-number step/,
  },
  {
    name: "negative step",
    text: policyWith(GOOD_DATASET.replace("type: integer, range: [0, 100]", 'type: number, range: [0, 100], step: "-1"')),
    path: "datasets.d.columns.age.step",
    what: /positive/,
  },
  {
    name: "bounds off the grid",
    text: policyWith(GOOD_DATASET.replace("type: integer, range: [0, 100]", 'type: number, range: [0.25, 100], step: "0.5"')),
    path: "datasets.d.columns.age.range",
    what: /multiples of the step/,
  },
  {
    name: "grid too fine",
    text: policyWith(GOOD_DATASET.replace("type: integer, range: [0, 100]", 'type: number, range: [0, 1000000000], step: "0.001"')),
    path: "datasets.d.columns.age.step",
    what: /coarser step/,
  },
  {
    name: "unknown column type",
    text: policyWith(GOOD_DATASET.replace("type: integer", "type: text")),
    path: "datasets.d.columns.age.type",
    what: /integer, number, category, date or boolean/,
  },
  {
    name: "unknown column key",
    text: policyWith(GOOD_DATASET.replace("range: [0, 100]", "range: [0, 100], secret: true")),
    path: "datasets.d.columns.age",
    what: /unknown key "secret"/,
  },
  {
    name: "category without values",
    text: policyWith(GOOD_DATASET.replace("type: integer, range: [0, 100]", "type: category, values: []")),
    path: "datasets.d.columns.age.values",
    what: /at least one value/,
  },
  {
    name: "category value twice",
    text: policyWith(GOOD_DATASET.replace("type: integer, range: [0, 100]", "type: category, values: [a, b, a]")),
    path: "datasets.d.columns.age.values",
    what: /twice/,
  },
  {
    name: "date not a date",
    text: policyWith(GOOD_DATASET.replace("type: integer, range: [0, 100]", 'type: date, range: ["2025-02-30", "2025-12-31"]')),
    path: "datasets.d.columns.age.range[0]",
    what: /calendar date/,
  },
  {
    name: "date range reversed",
    text: policyWith(GOOD_DATASET.replace("type: integer, range: [0, 100]", 'type: date, range: ["2025-12-31", "2025-01-01"]')),
    path: "datasets.d.columns.age.range",
    what: /not be after/,
  },
  {
    name: "reserved column name",
    text: policyWith(GOOD_DATASET.replace("      age:", "      __u:")),
    path: "datasets.d.columns.__u",
    what: /not starting with __/,
  },
  {
    name: "no columns",
    text: policyWith(GOOD_DATASET.replace("      age: { type: integer, range: [0, 100] }\n", "      {}\n").replace("columns:\n      {}", "columns: {}")),
    path: "datasets.d.columns",
    what: /at least one column/,
  },
  {
    name: "unit column also public",
    text: policyWith(`${GOOD_DATASET}    unit: { column: age, maxRows: 2 }\n`),
    path: "datasets.d.unit.column",
    what: /must not also be a public column/,
  },
  {
    name: "unit column without maxRows",
    text: policyWith(`${GOOD_DATASET}    unit: { column: pid }\n`),
    path: "datasets.d.unit.maxRows",
    what: /required/,
  },
  {
    name: "no unit column but maxRows 3",
    text: policyWith(`${GOOD_DATASET}    unit: { maxRows: 3 }\n`),
    path: "datasets.d.unit",
    what: /each row is its own unit/,
  },
  {
    name: "maxGroups above maxRows",
    text: policyWith(`${GOOD_DATASET}    unit: { column: pid, maxRows: 2, maxGroups: 3 }\n`),
    path: "datasets.d.unit.maxGroups",
    what: /must not exceed maxRows/,
  },
  {
    name: "maxRows zero",
    text: policyWith(`${GOOD_DATASET}    unit: { column: pid, maxRows: 0 }\n`),
    path: "datasets.d.unit.maxRows",
    what: /./,
  },
  {
    name: "cap zero",
    text: policyWith(GOOD_DATASET.replace('epsilon: "1"', 'epsilon: "0"')),
    path: "datasets.d.accounting.cap.epsilon",
    what: /positive/,
  },
  {
    name: "cap not a number",
    text: policyWith(GOOD_DATASET.replace('epsilon: "1"', 'epsilon: "lots"')),
    path: "datasets.d.accounting.cap.epsilon",
    what: /exact number/,
  },
  {
    name: "unknown accounting mode",
    text: policyWith(GOOD_DATASET.replace("mode: pure", "mode: approx")),
    path: "datasets.d.accounting.mode",
    what: /pure|zcdp/,
  },
  {
    name: "zcdp without delta",
    text: policyWith(GOOD_DATASET.replace("mode: pure", "mode: zcdp")),
    path: "datasets.d.accounting.cap.delta",
    what: /./,
  },
  {
    name: "zcdp delta of 1",
    text: policyWith(GOOD_DATASET.replace('mode: pure, cap: { epsilon: "1" }', 'mode: zcdp, cap: { epsilon: "1", delta: "1" }')),
    path: "datasets.d.accounting.cap.delta",
    what: /strictly between 0 and 1/,
  },
  {
    name: "dataset analyst not declared",
    text: policyWith(GOOD_DATASET.replace("analysts: [ada]", "analysts: [ada, eve]")),
    path: "datasets.d.analysts[1]",
    what: /not listed under analysts/,
  },
  {
    name: "two columns reading one source column",
    text: policyWith(`${GOOD_DATASET}      age2: { type: integer, range: [0, 10], from: age }\n`),
    path: "datasets.d.columns.age2.from",
    what: /same source column/,
  },
];

describe("policy errors name the file, the path inside it and the problem", () => {
  it.each(BAD)("$name", ({ text, path, what }) => {
    let err: unknown;
    try {
      parsePolicy(text, "/srv/hush/policy.yaml");
    } catch (e) {
      err = e;
    }
    expect(err).toBeInstanceOf(PolicyError);
    const msg = (err as Error).message;
    expect(msg).toContain("/srv/hush/policy.yaml");
    if (path !== "") expect(msg).toContain(`: ${path}`);
    expect(msg).toMatch(what);
  });

  it("accepts the good dataset and fills defaults", () => {
    const p = parsePolicy(policyWith(GOOD_DATASET), "/srv/hush/policy.yaml");
    const d = p.datasets.get("d")!;
    expect(d.source).toBe("/srv/hush/data.csv");
    expect(d.unit).toEqual({ column: null, maxRows: 1, maxGroups: 1 });
    const age = d.columns[0];
    expect(age.type === "integer" && age.step).toBe("1");
    expect(p.keyPath).toBe("/srv/hush/keys/curator.key");
  });

  it("defaults maxGroups to maxRows when a unit column is given", () => {
    const p = parsePolicy(policyWith(`${GOOD_DATASET}    unit: { column: pid, maxRows: 3 }\n`), "/srv/hush/policy.yaml");
    expect(p.datasets.get("d")!.unit).toEqual({ column: "pid", maxRows: 3, maxGroups: 3 });
  });
});

describe("populations: datasets over the same people share one account per analyst", () => {
  const FILE = "/srv/hush/policy.yaml";
  /** A dataset body over `source`, granted to `analysts`, with `accounting` and an optional population. */
  const view = (o: { source?: string; accounting?: string; analysts?: string; population?: string }) =>
    `    source: ${o.source ?? "data.csv"}
    accounting: ${o.accounting ?? `{ mode: pure, cap: { epsilon: "1" } }`}
    analysts: ${o.analysts ?? "[ada]"}
${o.population === undefined ? "" : `    population: ${o.population}\n`}    columns:
      age: { type: integer, range: [0, 100] }
`;
  const two = (a: string, b: string) => `${policyWith(a, `  ben: { token: "${ADA_HASH}" }\n`)}  e:\n${b}`;
  const refusal = (text: string): string => {
    try {
      parsePolicy(text, FILE);
    } catch (e: unknown) {
      expect(e).toBeInstanceOf(PolicyError);
      return (e as PolicyError).message;
    }
    throw new Error("the policy loaded");
  };

  it("makes one population of two datasets over one file, named after the file", () => {
    const p = parsePolicy(two(view({}), view({})), FILE);
    expect(p.datasets.get("d")!.population).toBe("data.csv");
    expect(p.datasets.get("e")!.population).toBe("data.csv");
    expect([...p.populations]).toEqual([["data.csv", ["d", "e"]]]);
  });

  it("keeps different files apart, and takes an explicit name for a dataset and for the rest of its file", () => {
    const apart = parsePolicy(two(view({}), view({ source: "other.csv" })), FILE);
    expect([...apart.populations.keys()]).toEqual(["data.csv", "other.csv"]);
    const named = parsePolicy(two(view({ population: "clinic-patients" }), view({})), FILE);
    expect([...named.populations]).toEqual([["clinic-patients", ["d", "e"]]]);
    // Several files may be named into one population (an export of the same patients).
    const joined = parsePolicy(two(view({ population: "p" }), view({ source: "export.csv", population: "p" })), FILE);
    expect([...joined.populations]).toEqual([["p", ["d", "e"]]]);
  });

  it("refuses one analyst two differing accounts on one population, naming both datasets and the path", () => {
    const msg = refusal(two(view({}), view({ accounting: `{ mode: zcdp, cap: { epsilon: "1", delta: "1e-6" } }` })));
    expect(msg).toContain(`${FILE}: datasets.e.accounting: datasets d and e are one population ("data.csv", the same people) and ada is granted both`);
    expect(msg).toContain("d has pure, epsilon 1, e has zcdp, epsilon 1 at delta 0.000001");
    expect(refusal(two(view({}), view({ accounting: `{ mode: pure, cap: { epsilon: "2" } }` })))).toMatch(/datasets d and e are one population/);
    const delta = refusal(
      two(
        view({ accounting: `{ mode: zcdp, cap: { epsilon: "1", delta: "1e-6" } }` }),
        view({ accounting: `{ mode: zcdp, cap: { epsilon: "1", delta: "1e-7" } }` }),
      ),
    );
    expect(delta).toMatch(/datasets\.e\.accounting: .* at delta 0\.000001, e has .* at delta 0\.0000001/);
    // Two files named into one population are one account too: their accounting must agree.
    expect(refusal(two(view({ population: "p" }), view({ source: "x.csv", population: "p", accounting: `{ mode: pure, cap: { epsilon: "2" } }` })))).toMatch(/one population \("p"/);
  });

  it("finds the file behind a symlink: two paths to one file are one population", () => {
    const file = tempPolicy(two(view({}), view({ source: "link.csv", accounting: `{ mode: pure, cap: { epsilon: "2" } }` })), { "data.csv": "age\n1\n" });
    symlinkSync(join(dirname(file), "data.csv"), join(dirname(file), "link.csv"));
    expect(() => loadPolicy(file)).toThrow(/datasets d and e are one population \("data\.csv"/);
  });

  it("lets different analysts hold different caps on one population", () => {
    const p = parsePolicy(two(view({}), view({ analysts: "[ben]", accounting: `{ mode: pure, cap: { epsilon: "3" } }` })), FILE);
    expect([...p.populations]).toEqual([["data.csv", ["d", "e"]]]);
  });

  it("refuses names that would merge or split people silently", () => {
    expect(refusal(two(view({ population: "p" }), view({ population: "q" })))).toMatch(
      /datasets\.e\.population: is "q", but dataset d reads the same file \/srv\/hush\/data\.csv as population "p"; one file is one set of people/,
    );
    expect(refusal(two(view({}), view({ source: "sub/data.csv" })))).toMatch(/datasets\.e\.source: .*two files named data\.csv; give each dataset a population name/);
    expect(refusal(two(view({ population: "bad name" }), view({})))).toMatch(/datasets\.d\.population: population names use letters/);
  });
});
