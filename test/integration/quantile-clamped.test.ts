/**
 * Quantile value intervals (docs/methods.md §20) and clamped shares (§21) through a real curator
 * process, a real client and the kernel's own display code: refusals spend nothing, honest
 * releases carry their intervals in low/high, and a notebook made of the kernel's bundles of those
 * releases passes `hush audit` (cli/audit reads the figures from the outputs).
 */
import { rmSync } from "node:fs";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { Answer } from "../../runtime/api/answer.js";
import { CuratorClient } from "../../runtime/client/client.js";
import { Rational } from "../../runtime/core/index.js";
import { answerBundle } from "../../kernel/display/bundle.js";
import { auditNotebook } from "../../cli/audit/checks.js";
import type { NbCell, Notebook } from "../../cli/audit/notebook.js";
import { cellSourceDigest } from "../../runtime/protocol/cell-source.js";
import type { QueryPlan, Release } from "../../runtime/protocol/messages.js";
import { loadPublicKey, verifyReceipt } from "../../runtime/protocol/receipts.js";
import { type CuratorChild, type Workspace, listenArgs, makeWorkspace, requireBuild, startCuratorChild } from "./helpers.js";

let ws: Workspace;
let cur: CuratorChild;
let ada: CuratorClient;

beforeAll(async () => {
  requireBuild();
  ws = makeWorkspace("qc", "1");
  cur = await startCuratorChild(listenArgs(ws, "ipc"));
  ada = await CuratorClient.connect({ address: cur.ready.address, analyst: "ada", token: ws.tokens.ada, timeoutMs: 30_000 });
});
afterAll(async () => {
  await ada?.close();
  await cur?.stop();
  if (ws) rmSync(ws.dir, { recursive: true, force: true });
});

const plan = (measure: QueryPlan["measure"], privacy: QueryPlan["privacy"] = { epsilon: "0.2" }): QueryPlan => ({ v: 1, dataset: "clinic", measure, privacy });

describe("quantile intervals and clamped shares through the curator", () => {
  it("refusals spend nothing", async () => {
    const before = await ada.spend("clinic");
    const refused: [QueryPlan, string][] = [
      [plan({ kind: "clamped", columns: ["district"] }), "bad-input"],
      [plan({ kind: "clamped", columns: ["height"] }), "bad-input"],
      [plan({ kind: "clamped", columns: ["age", "age"] }), "bad-input"],
      [plan({ kind: "clamped", columns: [] }), "bad-input"],
      [plan({ kind: "clamped", columns: ["age"] }, { within: 3 } as QueryPlan["privacy"]), "bad-input"],
      [plan({ kind: "clamped", columns: ["age"] }, { epsilon: "5" }), "over-cap"],
      [plan({ kind: "quantile", column: "age", p: [0.5] }, { epsilon: "5" }), "over-cap"],
      [plan({ kind: "describe", clamped: true }, { epsilon: "5" }), "over-cap"],
    ];
    for (const [p, kind] of refused) {
      const e = await ada.ask(p).then(
        () => null,
        (x: unknown) => x as { kind?: string; message: string },
      );
      expect(e, JSON.stringify(p.measure)).not.toBeNull();
      expect(e!.kind, e!.message).toBe(kind);
    }
    expect(await ada.spend("clinic")).toEqual(before);
    expect(before.releases).toBe(0);
  });

  it("honest releases carry their intervals, spend what they say, and pass the audit as the kernel shows them", async () => {
    const key = loadPublicKey(cur.ready.publicKey);
    const asks: [string, QueryPlan][] = [
      ["await clinic.median('age', { epsilon: 0.2 })", plan({ kind: "quantile", column: "age", p: [0.5] })],
      ["await clinic.quantiles('wait_minutes', [0.1, 0.9], { epsilon: 0.2 })", plan({ kind: "quantile", column: "wait_minutes", p: [0.1, 0.9] })],
      ["await clinic.clampedShares(['age', 'wait_minutes'], { epsilon: 0.2 })", plan({ kind: "clamped", columns: ["age", "wait_minutes"] })],
      ["await clinic.describe({ epsilon: 0.3, clampedShares: true })", plan({ kind: "describe", clamped: true }, { epsilon: "0.3" })],
    ];
    const cells: NbCell[] = [];
    let spent = Rational.ZERO;
    for (const [i, [source, p]] of asks.entries()) {
      const r: Release = await ada.ask(p, cellSourceDigest(source));
      expect(verifyReceipt(r.receipt, key)).toEqual({ ok: true });
      spent = spent.add(Rational.parse(r.cost));
      expect(Rational.parse(r.cost).eq(Rational.parse("epsilon" in p.privacy ? p.privacy.epsilon : "0"))).toBe(true);
      for (const row of r.rows) {
        expect(row.low, `${row.stat} ${row.column}`).not.toBeNull();
        expect(Rational.parse(row.low!).le(Rational.parse(row.high!))).toBe(true);
      }
      if (p.measure.kind === "quantile") {
        expect(r.intervalMethod).toMatch(/dyadic tree/);
        expect(r.notes.join(" ")).toMatch(/Budget split: the exponential mechanism gets 1\/10 epsilon/);
      }
      if (p.measure.kind === "clamped") expect(r.notes.join(" ")).toMatch(/Clamped shares cost ε 1\/5 of your cap/);
      const bundle = await answerBundle(new Answer(r, r.spend.spentEpsilon ?? "0"));
      cells.push({ cell_type: "code", source, execution_count: i + 1, outputs: [{ output_type: "display_data", ...bundle } as NonNullable<NbCell["outputs"]>[number]], metadata: {} });
    }
    expect(Rational.parse((await ada.spend("clinic")).spentEpsilon!).eq(spent)).toBe(true);
    const nb: Notebook = { nbformat: 4, nbformat_minor: 5, metadata: { kernelspec: { name: "hush", display_name: "TypeScript (hush)", language: "typescript" } }, cells };
    const report = auditNotebook(nb, key);
    expect(report.findings.filter((f) => f.kind !== "spend-order"), JSON.stringify(report.findings)).toEqual([]);
    expect(report.releases).toBe(4);
    expect(report.ok).toBe(true);
    // The audit reads figures: a quantile shown with a figure no receipt signed is caught.
    const forged = structuredClone(nb);
    const out = forged.cells[0].outputs![0] as { data: Record<string, unknown> };
    const text = String(out.data["text/plain"]);
    const shown = /\[(-?[\d.]+), (-?[\d.]+)\]/.exec(text);
    expect(shown, text).not.toBeNull();
    const forgedText = text.replace(shown![0], `[${shown![1]}, ${Number(shown![2]) + 1}]`);
    out.data["text/plain"] = forgedText;
    out.data["text/html"] = String(out.data["text/html"]).replace(shown![0], `[${shown![1]}, ${Number(shown![2]) + 1}]`);
    expect(auditNotebook(forged, key).ok).toBe(false);
  });
});
