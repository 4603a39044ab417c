/**
 * A notebook handed in can hold any text. The audit must finish on it in time that grows with its
 * size, not with its square: a teaching assistant audits a whole class at once, and one output
 * built to stall the audit would stall the class. Each case below held the audit for minutes to
 * hours before its fix (measured: 400,000 digits in a release's text/plain took 90 s, 2,000,000
 * did not finish in 300 s; a stream line of 1,000,000 "[" did not finish in 120 s). The bound
 * asserted is generous (the cases now take well under a second each on the 2-core test machine):
 * it catches a return of the quadratic scan, not a slow machine.
 */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { auditNotebook } from "../../cli/audit/checks.js";
import { blankWords } from "../../cli/audit/cover.js";
import { LONGEST_NUMBER_RUN, figuresIn } from "../../cli/audit/figure-text.js";
import type { Notebook } from "../../cli/audit/notebook.js";
import { generateCuratorKey, loadCuratorKey } from "../../runtime/curator/keys.js";
import { OUTPUT_METADATA_KEY } from "../../runtime/protocol/messages.js";
import { assembleNotebook, rowsOf, signedChain } from "./signed-notebook.js";

const BOUND_MS = 20_000;

let dir: string;
let nb: Notebook;
let pub: ReturnType<typeof loadCuratorKey>["publicKey"];

beforeAll(() => {
  dir = mkdtempSync(join(tmpdir(), "hush-audit-hostile-"));
  const keyFile = join(dir, "curator.key");
  generateCuratorKey(keyFile);
  const key = loadCuratorKey(keyFile);
  pub = key.publicKey;
  const receipts = signedChain(key, { analyst: "kit", dataset: "visits-course", cap: "1" }, [
    { cost: "0.05", rows: rowsOf("count", null, [["199871", "199811", "199931"]]) },
    { cost: "0.1", rows: rowsOf("count", null, [["31002", "30902", "31102"]]) },
  ]);
  nb = assembleNotebook(receipts);
});
afterAll(() => rmSync(dir, { recursive: true, force: true }));

/** The notebook with `text` as the first release's text/plain, or as a stream output of its own. */
function withText(text: string, where: "release" | "stream"): Notebook {
  const copy = structuredClone(nb);
  if (where === "release") {
    const out = copy.cells.flatMap((c) => c.outputs ?? []).find((o) => o.metadata?.[OUTPUT_METADATA_KEY] !== undefined);
    out!.data!["text/plain"] = text;
  } else {
    copy.cells.find((c) => c.cell_type === "code")!.outputs!.push({ output_type: "stream", name: "stdout", text });
  }
  return copy;
}

const CASES: [string, string][] = [
  ["2,000,000 digits", "1".repeat(2_000_000)],
  ["a million-character run of thousands groups", `1${",000".repeat(250_000)}`],
  ["a million zeros, then a figure", `${"0".repeat(1_000_000)} 1 ± 1`],
  ["a figure whose error bar is 1,000,000 digits", `5 ± ${"1".repeat(1_000_000)}`],
  ["a line of 1,000,000 '[' and a comma", `${"[".repeat(1_000_000)},`],
  ["'1 [' 400,000 times", "1 [".repeat(400_000)],
  ["'[,' 500,000 times", "[,".repeat(500_000)],
];

describe("the audit on hostile text", () => {
  for (const [name, text] of CASES) {
    for (const where of ["release", "stream"] as const) {
      it(`finishes on ${name} in a ${where === "release" ? "release's text/plain" : "stream output"}`, () => {
        const t0 = performance.now();
        const report = auditNotebook(withText(text, where), pub);
        expect(performance.now() - t0).toBeLessThan(BOUND_MS);
        // A release that no longer shows its signed figure is a finding, whatever the rest.
        if (where === "release") expect(report.findings.some((f) => f.kind === "shown-value")).toBe(true);
      });
    }
  }

  it("reads a long run of digits beside an error bar as a figure that runs into its neighbours", () => {
    const run = "7".repeat(LONGEST_NUMBER_RUN + 5);
    for (const text of [`${run} ± 5`, `5 ± ${run}`, `5 [${run}, 9]`, `x 12 ± 1 and ${run} [1, 2]`]) {
      const found = figuresIn(text);
      expect(found.some((f) => !f.alone), text.slice(0, 30)).toBe(true);
      // Left to right, as before.
      expect(found.map((f) => f.index)).toEqual([...found.map((f) => f.index)].sort((a, b) => a - b));
    }
    // Shorter runs are read exactly as before: a kernel number, alone; and digits in front of it join it.
    expect(figuresIn("12,345 ± 1")).toEqual([{ text: "12,345 ± 1", index: 0, alone: true }]);
    expect(figuresIn("1234,567 ± 1")).toEqual([{ text: "234,567 ± 1", index: 1, alone: false }]);
    // A run of digits with no error bar beside it is no figure at all.
    expect(figuresIn(`${run} and 4 ± 1`)).toEqual([{ text: "4 ± 1", index: run.length + 5, alone: true }]);
    // A stream output with such a long figure is reported as one no receipt signed.
    const report = auditNotebook(withText(`${run} ± 5`, "stream"), pub);
    expect(report.findings.some((f) => f.kind === "no-receipt" && f.message.includes("777777777777…777777777777"))).toBe(true);
  });

  it("takes a 10,000-cell release's keys out of a padded view in one pass", () => {
    // Before: one scan of the text per key, 30 s for this release with 100,000 characters of
    // padding and 100 s with 1,000,000; the kernel allows 10,000 declared cells in one release.
    const key = loadCuratorKey(join(dir, "curator.key"));
    const n = 10_000;
    const values: [string, string, string][] = Array.from({ length: n }, (_, i) => [String(100 + i), String(90 + i), String(110 + i)]);
    const keys = Array.from({ length: n }, (_, i) => [`key-number-${i}`]);
    const receipts = signedChain(key, { analyst: "kit", dataset: "visits-course", cap: "1" }, [
      { cost: "0.05", rows: rowsOf("count", null, values, keys) },
      { cost: "0.05", rows: rowsOf("count", null, [["5", "4", "6"]]) },
    ]);
    const big = assembleNotebook(receipts);
    const out = big.cells.flatMap((c) => c.outputs ?? []).find((o) => o.metadata?.[OUTPUT_METADATA_KEY] !== undefined)!;
    out.data!["text/plain"] = `${String(out.data!["text/plain"])}\n${"x".repeat(1_000_000)}`;
    const t0 = performance.now();
    const report = auditNotebook(big, key.publicKey);
    expect(performance.now() - t0).toBeLessThan(BOUND_MS);
    // Read in full: the padding changes no figure, so the notebook passes.
    expect(report.findings).toEqual([]);
  });
});

describe("blankWords", () => {
  /** Every character inside some occurrence of some word, found the slow way. */
  function naive(text: string, words: string[]): string {
    const covered = new Array<boolean>(text.length).fill(false);
    for (const w of words) {
      if (w === "") continue;
      for (let at = text.indexOf(w); at >= 0; at = text.indexOf(w, at + 1)) for (let j = at; j < at + w.length; j++) covered[j] = true;
    }
    return [...text].map((c, j) => (covered[j] ? " " : c)).join("");
  }

  it("blanks exactly the characters inside the words' occurrences, overlapping ones included (against a brute-force scan)", () => {
    let seed = 12345;
    const rand = (k: number) => {
      seed = (seed * 1103515245 + 12345) % 2 ** 31;
      return seed % k;
    };
    const alphabet = "ab-1 ";
    const word = (len: number) => Array.from({ length: len }, () => alphabet[rand(alphabet.length)]).join("");
    for (let trial = 0; trial < 500; trial++) {
      const text = word(rand(60));
      const words = Array.from({ length: rand(6) }, () => word(1 + rand(5)));
      expect(blankWords(text, words), JSON.stringify({ text, words })).toBe(naive(text, words));
    }
    expect(blankWords("Zone\u20133 = 5 ± 1", ["Zone\u20133"])).toBe("       = 5 ± 1");
    expect(blankWords("abc", [])).toBe("abc");
    expect(blankWords("", ["a"])).toBe("");
  });
});
