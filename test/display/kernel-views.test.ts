/**
 * The compact views, refusals and errors as a notebook receives them: cells run through the real
 * kernel (kernel/client, the Jupyter protocol) against a real curator on the demo data, as
 * `hush run` runs them. Expected texts are written by hand. Needs the build (dist/).
 */
import { mkdtempSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { DEMO_ANALYSTS, ensureDemoData } from "../../notebooks/scenario/generate.js";
import { startEmbeddedCurator, type EmbeddedCurator } from "../../runtime/client/embedded.js";
import { loadPublicKey } from "../../runtime/protocol/receipts.js";
import { auditNotebook } from "../../cli/audit/checks.js";
import type { NbOutput, Notebook } from "../../cli/audit/notebook.js";
import { executeNotebook } from "../../cli/commands/run.js";

const CELLS = [
  'const visits = await hush.open("visits");',
  "await visits.count({ epsilon: 0.05 })",
  // Over the cap: 2.999 asked, 2.95 (59/20) left of 3.
  "// more than is left\nconst big = 2.999;\nawait visits.count({ epsilon: big })",
  "function share(n: number): number {\n  if (n > 1) throw new RangeError(`share above 1: ${n}`);\n  return n;\n}\n\nshare(2)",
  'const h = await visits.histogram("age", { bins: 10, epsilon: 0.1 });\nconsole.log(h);\nh',
];

const text = (o: NbOutput, mime: string): string => {
  const v = o.data?.[mime];
  return Array.isArray(v) ? v.join("") : String(v ?? "");
};

describe("views, refusals and errors through the kernel on a real curator", () => {
  let dir: string;
  let curator: EmbeddedCurator | undefined;
  let nb: Notebook;
  let keyFile: string;
  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "hush-views-"));
    const demo = await ensureDemoData({ dir: join(dir, "state") });
    keyFile = demo.publicKeyFile;
    curator = await startEmbeddedCurator({ policyFile: demo.policyFile, stateDir: dir });
    nb = {
      nbformat: 4,
      nbformat_minor: 5,
      metadata: {},
      cells: CELLS.map((source, i) => ({ cell_type: "code", id: `c${i}`, metadata: {}, source, outputs: [], execution_count: null })),
    } as Notebook;
    const run = await executeNotebook(nb, { keepGoing: true, env: { HUSH_CURATOR: curator.address, HUSH_ANALYST: "rowan", HUSH_TOKEN: DEMO_ANALYSTS.rowan.token } });
    expect(run.failed).toBe(2);
  }, 300_000);
  afterAll(async () => {
    await curator?.stop();
    rmSync(dir, { recursive: true, force: true });
  });

  it("a release: one compact view, then one privacy-loss line for the cell", () => {
    const outs = nb.cells[1].outputs!;
    expect(outs.map((o) => o.output_type)).toEqual(["execute_result", "display_data"]);
    expect(text(outs[0], "text/plain")).toMatch(
      /^count = \d{3},\d{2}0 ± 480 · cost ε=0\.05\n {2}at least 95% of such answers fall within ±480 of the true count \(privacy noise only\) · 1 note: \.notes$/,
    );
    const html = text(outs[0], "text/html");
    expect(html.match(/class="hush-release"/g)).toHaveLength(1);
    expect(html).toMatch(/<span class="hush-value">\d{3},\d{2}0<\/span> <span class="hush-errorbar">± 480<\/span>/);
    expect(text(outs[1], "text/plain")).toBe("privacy loss on visits (population clinic-patients): ε 0.05 of 3 used · this cell 0.05 · left 2.95 [+.......................]");
    expect(text(outs[1], "text/html").match(/class="hush-loss"/g)).toHaveLength(1);
  });

  it("over the cap: the refusal drawn with its cell and line, in decimals, with no stack frame", () => {
    const cell = nb.cells[2];
    const outs = cell.outputs!;
    expect(outs.map((o) => o.output_type)).toEqual(["display_data", "error"]);
    const n = cell.execution_count;
    expect(text(outs[0], "text/plain")).toBe(
      [
        `refused: over the cap (In [${n}], line 3)`,
        "  over the cap: this query costs ε 2.999, but rowan has ε 2.95 left of the cap 3 on population clinic-patients (dataset visits and every other dataset over the same people; spent 0.05); nothing was spent",
        "  ε 2.95 of 3 remains on visits (population clinic-patients) for rowan.",
      ].join("\n"),
    );
    expect(text(outs[0], "text/html")).toMatch(/^<div class="hush-refusal" /);
    const e = outs[1] as NbOutput & { traceback: string[]; ename: string };
    expect(e.ename).toBe("OverCapError");
    expect(e.traceback).toEqual([`OverCapError at In [${n}], line 3: refused, nothing was spent (shown above)`]);
    const all = JSON.stringify(outs);
    expect(all).not.toMatch(/\d\/\d|file:|node:|dist\/|tslab|evalmachine|hush-cell|\bat (async )?[\w.]+ \(/);
  });

  it("a runtime error: only the user's frames, named In [n] with the line and its code", () => {
    const cell = nb.cells[3];
    const n = cell.execution_count;
    const e = cell.outputs!.find((o) => o.output_type === "error") as NbOutput & { traceback: string[] };
    expect(e.traceback).toEqual([
      "RangeError: share above 1: 2",
      `    at share (In [${n}], line 2):  if (n > 1) throw new RangeError(\`share above 1: \${n}\`);`,
      `    at In [${n}], line 6:  share(2)`,
    ]);
  });

  it("console.log of a release prints a summary, and the chart and table keep their hooks", () => {
    const outs = nb.cells[4].outputs!;
    expect(outs.map((o) => o.output_type)).toEqual(["stream", "execute_result", "display_data"]);
    expect(text(outs[0], "text/plain") || String((outs[0] as { text?: string }).text)).toMatch(/^Answer <histogram of age \(10 bins\): 10 values \(95%\) · receipt #2 on visits>\n$/);
    const html = text(outs[1], "text/html");
    expect(html).toContain('<div class="hush-chart"');
    expect(html.match(/class="hush-value"/g)).toHaveLength(10);
    expect(html.match(/class="hush-errorbar"/g)).toHaveLength(10);
    expect(html).toContain('<details class="hush-notes"');
  });

  it("the executed notebook, refusal and error included, passes the audit", () => {
    const r = auditNotebook(nb, loadPublicKey(readFileSync(keyFile, "utf8")));
    expect(r.findings).toEqual([]);
    expect(r.ok).toBe(true);
    expect(r.receipts).toBe(2);
  });
});
