/**
 * The class audit over a generated class: 34 notebooks signed in the test with one curator key
 * (honest, re-run with superseded spend, over the roster cap, edited, copied from a classmate, run
 * as another student, named after nobody) and a roster with one student who handed in nothing.
 * The expected table is written out row by row and checked in text and CSV, through the CLI.
 */
import { mkdirSync, mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { auditClass, loadHandIn } from "../../cli/audit/class-audit.js";
import { findHandIns, studentOf } from "../../cli/audit/hand-ins.js";
import type { Notebook } from "../../cli/audit/notebook.js";
import { parseRoster } from "../../cli/audit/roster.js";
import { type CuratorKey, generateCuratorKey, loadCuratorKey } from "../../runtime/curator/keys.js";
import { isHushError } from "../../runtime/errors.js";
import { runCli } from "./corpus.js";
import { notebookOf } from "./laid-out.js";
import { assembleNotebook, rowsOf, signedChain } from "./signed-notebook.js";
import { editShownValue } from "./tamper.js";

/** One expected row: student, spend, cap, releases, superseded, verdict, findings (as the text table prints them). */
type Row = [string, string, string, string, string, string, string];

describe("class audit: many notebooks, a roster, one table", () => {
  let dir: string;
  let key: CuratorKey;
  let keyFile: string;
  const expected: Row[] = [];
  const rosterLines = ["student,analyst,dataset,cap"];
  const count = (v: number) => rowsOf("count", null, [[String(v), String(v - 30), String(v + 30)]]);
  const chainOf = (analyst: string, costs: string[], cap = "1") =>
    signedChain(key, { analyst, dataset: "visits-course", cap }, costs.map((cost, i) => ({ cost, rows: count(2000 + i * 7) })));
  const save = (name: string, nb: Notebook): void => {
    const file = join(dir, "hand-ins", name);
    mkdirSync(join(file, ".."), { recursive: true });
    writeFileSync(file, JSON.stringify(nb));
  };

  beforeAll(() => {
    dir = mkdtempSync(join(tmpdir(), "hush-class-"));
    generateCuratorKey(join(dir, "curator.key"));
    key = loadCuratorKey(join(dir, "curator.key"));
    keyFile = `${join(dir, "curator.key")}.pub`;
    const honest: Record<string, Notebook> = {};
    // 20 honest students: three releases each, totals 0.35; the roster caps them at 1.
    for (let i = 1; i <= 20; i++) {
      const s = `s${String(i).padStart(2, "0")}`;
      rosterLines.push(`${s},an-${s},visits-course,1`);
      honest[s] = assembleNotebook(chainOf(`an-${s}`, ["0.1", "0.2", "0.05"]));
      // Named three ways the roster matches: STUDENT.ipynb, STUDENT/…, STUDENT_….ipynb.
      save(i % 3 === 0 ? `${s}/assignment.ipynb` : i % 3 === 1 ? `${s}.ipynb` : `${s}_assignment3.ipynb`, honest[s]);
      if (i !== 1 && i !== 2) expected.push([s, "ε 0.35", "ε 1", "3", "0", "PASS", "0"]);
    }
    // s01 and s02 are the authors of copied receipts: a note each (not a finding), still PASS.
    expected.push(["s01", "ε 0.35", "ε 1", "3", "0", "PASS", "0"], ["s02", "ε 0.35", "ε 1", "3", "0", "PASS", "0"]);
    // 4 re-run notebooks: Q2 changed and run again (seq 2 superseded, seq 4 new), Q1 and Q3 replayed.
    for (let i = 1; i <= 4; i++) {
      const s = `rerun${i}`;
      rosterLines.push(`${s},an-${s},visits-course,1`);
      const [a, , c, d] = chainOf(`an-${s}`, ["0.1", "0.25", "0.05", "1/3"]);
      save(`${s}.ipynb`, notebookOf([{ r: a, replay: true, n: 5 }, { r: d, n: 6 }, { r: c, replay: true, n: 7 }]));
      expected.push([s, "ε 11/15", "ε 1", "3", "1 (ε 0.25)", "PASS", "0"]);
    }
    // 3 over the roster cap (0.3) with a steward's cap of 1: total 0.35, one finding.
    for (let i = 1; i <= 3; i++) {
      const s = `over${i}`;
      rosterLines.push(`${s},an-${s},visits-course,0.3`);
      save(`${s}.ipynb`, assembleNotebook(chainOf(`an-${s}`, ["0.1", "0.2", "0.05"])));
      expected.push([s, "ε 0.35", "ε 0.3", "3", "0", "FAIL", "1"]);
    }
    // 1 over the cap through superseded spend: shown 0.2 + 0.1, not shown 0.3; roster cap 0.5.
    rosterLines.push("overrun,an-overrun,visits-course,0.5");
    {
      const [a, , c] = chainOf("an-overrun", ["0.2", "0.3", "0.1"]);
      save("overrun.ipynb", notebookOf([{ r: a, n: 1 }, { r: c, n: 2 }]));
      expected.push(["overrun", "ε 0.6", "ε 0.5", "2", "1 (ε 0.3)", "FAIL", "1"]);
    }
    // 3 edited: a shown figure changed, the receipt left alone.
    for (let i = 1; i <= 3; i++) {
      const s = `edit${i}`;
      rosterLines.push(`${s},an-${s},visits-course,1`);
      save(`${s}.ipynb`, editShownValue(assembleNotebook(chainOf(`an-${s}`, ["0.1", "0.2", "0.05"])), 2));
      expected.push([s, "ε 0.35", "ε 1", "3", "0", "FAIL", "1"]);
    }
    // A whole notebook copied from s01: runs as s01's analyst (owner) and holds s01's 3 receipts (copied).
    rosterLines.push("copy1,an-copy1,visits-course,1");
    save("copy1.ipynb", honest.s01);
    expected.push(["copy1", "ε 0.35", "ε 1", "3", "0", "FAIL", "4"]);
    // One receipt of s02 pasted into an own notebook: another analyst's receipt (mixed) and a copy.
    rosterLines.push("copy2,an-copy2,visits-course,1");
    {
      const own = chainOf("an-copy2", ["0.1", "0.2"]);
      const theirs = chainOf("an-s02", ["0.1", "0.2", "0.05"]);
      const nb = notebookOf([{ r: own[0], n: 1 }, { r: own[1], n: 2 }, { r: theirs[2], n: 3 }]);
      save("copy2.ipynb", nb);
      expected.push(["copy2", "ε 0.3", "ε 1", "2", "0", "FAIL", "2"]);
    }
    // Run as another student: an analyst not on the roster (a friend's account), no copied receipt.
    rosterLines.push("wrong1,an-wrong1,visits-course,1", "wrong2,an-wrong2,visits-course,1");
    save("wrong1.ipynb", assembleNotebook(chainOf("an-friend", ["0.1", "0.2", "0.05"])));
    save("wrong2.ipynb", assembleNotebook(chainOf("an-wrong2", ["0.1", "0.2", "0.05"]).map((r) => ({ ...r }))));
    expected.push(["wrong1", "ε 0.35", "ε 1", "3", "0", "FAIL", "1"]);
    // wrong2 is honest but on the wrong dataset for the roster: the roster says visits-zcdp.
    rosterLines[rosterLines.length - 1] = "wrong2,an-wrong2,visits-zcdp,1";
    expected.push(["wrong2", "ε 0.35", "ε 1", "3", "0", "FAIL", "1"]);
    // A notebook named after nobody on the roster.
    save("untitled.ipynb", assembleNotebook(chainOf("an-stranger", ["0.1", "0.2", "0.05"])));
    expected.push(["untitled", "ε 0.35", "ε 1", "3", "0", "FAIL", "1"]); // no roster cap: the signed one
    // A student on the roster who handed in nothing.
    rosterLines.push("absent,an-absent,visits-course,1");
    expected.push(["absent", "-", "ε 1", "-", "-", "MISSING", "1"]);
    writeFileSync(join(dir, "roster.csv"), `${rosterLines.join("\n")}\n`);
  });
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  /** The rows of the text table, in the CLI's order, split on its column gaps. */
  const tableRows = (stdout: string): Row[] => {
    const lines = stdout.split("\n");
    const end = lines.indexOf("", 2);
    return lines.slice(2, end).map((l) => l.split(/ {2,}/) as Row);
  };
  const sorted = (rows: Row[]): Row[] => [...rows].sort((a, b) => a[0].localeCompare(b[0]));

  it("prints the expected table for 36 notebooks and a roster (exit 1), and the same in CSV", () => {
    const hand = findHandIns([join(dir, "hand-ins")]);
    expect(hand.length).toBe(36);
    const cli = runCli(["audit", join(dir, "hand-ins"), "--key", keyFile, "--roster", join(dir, "roster.csv")]);
    expect(cli.stderr).toBe("");
    expect(cli.code).toBe(1);
    expect(cli.stdout.split("\n")[0].split(/ {2,}/)).toEqual(["student", "spend", "cap", "releases", "superseded", "verdict", "findings"]);
    expect(sorted(tableRows(cli.stdout))).toEqual(sorted(expected));
    expect(cli.stdout).toMatch(/^class verdict: FAIL \(24 pass, 12 fail, 1 missing, 0 unreadable\)$/m);
    // Each failure says what it is, and the copy is pinned on the copier, not on its author.
    expect(cli.stdout).toMatch(/- \[copied\] cell \d+: receipt seq 1 belongs to analyst "an-s01", the roster's s01; the same signed receipt is in the notebook of s01/);
    expect(cli.stdout).toMatch(/- note \[copied\] cell \d+: this student's own receipt seq 1 \(analyst "an-s01"\) also appears in the notebook of copy1/);
    expect(cli.stdout).toMatch(/- \[owner\] the receipts are for analyst "an-friend", not "an-wrong1" as expected/);
    expect(cli.stdout).toMatch(/- \[cap\] the notebook spends epsilon 0\.6, over the review cap 0\.5/);
    expect(cli.stdout).toMatch(/- \[roster\] no notebook found for roster student "absent"/);

    const csv = runCli(["audit", join(dir, "hand-ins"), "--key", keyFile, "--roster", join(dir, "roster.csv"), "--csv"]);
    expect(csv.code).toBe(1);
    const [head, ...rows] = csv.stdout.trimEnd().split("\r\n").map((l) => l.split(","));
    expect(head).toEqual([
      "student", "notebook", "analyst", "unit", "spend", "spend_epsilon", "cap", "cap_unit", "releases", "superseded_releases", "superseded_spend", "verdict", "findings", "notes",
    ]);
    const col = (name: string) => head.indexOf(name);
    // The CSV holds the same table, amounts bare (units in their own columns).
    const asTable = rows.map((r): Row => [
      r[col("student")],
      r[col("spend")] === "" ? "-" : `ε ${r[col("spend")]}`,
      r[col("cap")] === "" ? "-" : `ε ${r[col("cap")]}`,
      r[col("releases")] === "" ? "-" : r[col("releases")],
      r[col("superseded_releases")] === "" ? "-" : r[col("superseded_releases")] === "0" ? "0" : `${r[col("superseded_releases")]} (ε ${r[col("superseded_spend")]})`,
      r[col("verdict")],
      r[col("findings")],
    ]);
    expect(sorted(asTable)).toEqual(sorted(expected));
    expect(rows.find((r) => r[0] === "s01")![col("notes")]).toBe("3");
  });

  it("keeps a student's file name from running as a spreadsheet formula in the CSV", () => {
    const sub = join(dir, "formula");
    mkdirSync(sub, { recursive: true });
    const nb = assembleNotebook(chainOf("an-formula", ["0.1", "0.2"]));
    for (const name of ["=HYPERLINK(1)", "-2+3", "@SUM(1)", "+1", "a,b\"c"]) writeFileSync(join(sub, `${name}.ipynb`), JSON.stringify(nb));
    const csv = runCli(["audit", sub, "--key", keyFile, "--csv"]);
    const students = csv.stdout.trimEnd().split("\r\n").slice(1).map((l) => l.split(",")[0]);
    expect(students).toEqual(["'+1", "'-2+3", "'=HYPERLINK(1)", "'@SUM(1)", '"a']);
    expect(csv.stdout).toContain('"a,b""c"');
  });

  it("passes the honest students alone (exit 0), and --strict fails the re-runs for their superseded spend", () => {
    const honest = [1, 4, 5, 7].map((i) => join(dir, "hand-ins", i % 3 === 1 ? `s0${i}.ipynb` : `s0${i}_assignment3.ipynb`));
    const ok = runCli(["audit", ...honest, join(dir, "hand-ins", "rerun1.ipynb"), "--key", keyFile]);
    expect(ok.code).toBe(0);
    expect(ok.stdout).toMatch(/^class verdict: PASS \(5 pass, 0 fail/m);
    const strict = runCli(["audit", ...honest, join(dir, "hand-ins", "rerun1.ipynb"), "--key", keyFile, "--strict", "--json"]);
    expect(strict.code).toBe(1);
    const json = JSON.parse(strict.stdout) as { students: { student: string; verdict: string; findings: { kind: string }[] }[] };
    expect(json.students.find((s) => s.student === "rerun1")).toMatchObject({ verdict: "FAIL", findings: [{ kind: "superseded" }] });
    expect(json.students.filter((s) => s.verdict === "PASS").length).toBe(4);
  });

  it("exits 2 when a notebook cannot be read, still printing the table", () => {
    const bad = join(dir, "broken.ipynb");
    writeFileSync(bad, "{ not json");
    const cli = runCli(["audit", join(dir, "hand-ins", "s01.ipynb"), bad, "--key", keyFile]);
    expect(cli.code).toBe(2);
    expect(cli.stdout).toMatch(/^broken\s+-\s+-\s+-\s+-\s+UNREADABLE/m);
    expect(cli.stdout).toMatch(/\[unreadable\] notebook .*broken\.ipynb is not valid JSON/);
    const missing = runCli(["audit", join(dir, "nope"), join(dir, "hand-ins"), "--key", keyFile]);
    expect(missing.code).toBe(2);
    expect(missing.stderr).toMatch(/nope cannot be read \(ENOENT\)/);
  });

  it("refuses an odd roster with the line and the reason", () => {
    const cases: [string, RegExp][] = [
      ["student,analyst,dataset,cap\nkit,\"kit\",v,1\n", /line 2: quotes are not supported/],
      ["student,analyst,cap\n", /line 1: has 3 fields/],
      ["name,analyst,dataset,cap\n", /line 1: the first line must be the header/],
      ["student,analyst,dataset,cap\nkit,kit,v,1\nkit,ash,v,1\n", /line 3: student "kit" is listed twice/],
      ["student,analyst,dataset,cap\nkit,kit,v,1\nash,kit,v,1\n", /line 3: analyst "kit" is listed twice/],
      ["student,analyst,dataset,cap\nkit,kit,v,-1\n", /line 2: cap must be positive/],
      ["student,analyst,dataset,cap\nkit,kit,v,lots\n", /line 2: cap "lots" is not an exact number/],
      ["student,analyst,dataset,cap\nk\u202eit,kit,v,1\n", /line 2: holds a control or invisible character/],
      ["student,analyst,dataset,cap\n,kit,v,1\n", /line 2: student and analyst are required/],
      ["", /is empty/],
    ];
    for (const [text, why] of cases) {
      let err: unknown;
      try {
        parseRoster(text, "r.csv");
      } catch (e: unknown) {
        err = e;
      }
      expect(isHushError(err) && err.kind === "bad-input", text).toBe(true);
      expect((err as Error).message, text).toMatch(why);
    }
    const ok = parseRoster("\uFEFFStudent, Analyst ,dataset,cap\r\nkit,an-kit,,\r\n\r\nash,an-ash,visits,1/2\r\n", "r.csv");
    expect(ok.map((e) => [e.student, e.analyst, e.dataset, e.cap?.toString() ?? null])).toEqual([["kit", "an-kit", null, null], ["ash", "an-ash", "visits", "1/2"]]);
    writeFileSync(join(dir, "bad-roster.csv"), "student,analyst\n");
    const cli = runCli(["audit", join(dir, "hand-ins"), "--key", keyFile, "--roster", join(dir, "bad-roster.csv")]);
    expect(cli.code).toBe(2);
    expect(cli.stderr).toMatch(/roster .*bad-roster\.csv line 1: has 2 fields/);
  });

  it("matches notebooks to students by file, folder or prefix, the longest name first", () => {
    const roster = parseRoster("student,analyst,dataset,cap\nann,a1,,\nann-marie,a2,,\nbo,a3,,\n", "r.csv");
    const who = (f: string) => studentOf(f, roster)?.student ?? null;
    expect(who("/x/ann.ipynb")).toBe("ann");
    expect(who("/x/ann-marie_hw3.ipynb")).toBe("ann-marie");
    expect(who("/x/ann_hw3.ipynb")).toBe("ann");
    expect(who("/x/bo/final.ipynb")).toBe("bo");
    expect(who("/x/bob.ipynb")).toBe(null);
  });

  it("flags the same receipt in two notebooks as copied on both sides without a roster", () => {
    const files = [join(dir, "hand-ins", "s01.ipynb"), join(dir, "hand-ins", "copy1.ipynb")];
    const a = auditClass(files.map((file) => ({ file, label: file, ...loadHandIn({ file, label: file }) })), null, key.publicKey);
    expect(a.exitCode).toBe(1);
    for (const row of a.rows) {
      expect(row.findings.map((f) => f.kind)).toEqual(["copied", "copied", "copied"]);
      expect(row.findings[0].message).toMatch(/two hand-ins hold one signed release, so one holds a copy of the other unless both are the same student's/);
    }
  });
});
