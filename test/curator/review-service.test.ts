/**
 * Review checks of the service with the real engine and answerer (in process): the amount charged
 * equals the sum of the costs of the mechanisms actually run (sequential composition, docs/methods.md
 * §1), the ledger total grows by exactly that, a replay charges nothing, and a preview reports the
 * confidence its half-widths were computed at.
 */
import { rmSync } from "node:fs";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { Rational } from "../../runtime/core/index.js";
import { CuratorService } from "../../runtime/curator/service.js";
import type { Preview, QueryPlan, Release, Response } from "../../runtime/protocol/messages.js";
import { makeWorkspace, type Workspace } from "../integration/helpers.js";

let ws: Workspace;
let service: CuratorService;
let n = 0;

beforeAll(async () => {
  ws = makeWorkspace("review", "1000");
  service = await CuratorService.open(ws.policyFile);
});
afterAll(async () => {
  await service.close();
  rmSync(ws.dir, { recursive: true, force: true });
});

async function call(body: unknown): Promise<Response> {
  const frame = Buffer.from(JSON.stringify({ v: 1, id: `r${++n}`, analyst: "ada", token: ws.tokens.ada, body }));
  return JSON.parse((await service.handleFrame(frame, "test")).toString("utf8")) as Response;
}

async function ask(plan: QueryPlan): Promise<Release> {
  const r = await call({ op: "ask", plan });
  if (!r.ok) throw new Error(`${r.error.kind}: ${r.error.message}`);
  return (r.body as { op: "ask"; release: Release }).release;
}

async function preview(plan: QueryPlan): Promise<Preview> {
  const r = await call({ op: "preview", plan });
  if (!r.ok) throw new Error(`${r.error.kind}: ${r.error.message}`);
  return (r.body as { op: "preview"; preview: Preview }).preview;
}

const sum = (xs: string[]) => xs.reduce((a, x) => a.add(Rational.parse(x)), Rational.ZERO);

const P = (dataset: string, measure: QueryPlan["measure"], privacy: QueryPlan["privacy"], extra: Partial<QueryPlan> = {}): QueryPlan => ({
  v: 1,
  dataset,
  measure,
  privacy,
  ...extra,
});

const PLANS: { name: string; p: QueryPlan }[] = [
  { name: "pure count by district", p: P("clinic", { kind: "count" }, { epsilon: "0.3" }, { groupBy: [{ column: "district" }] }) },
  { name: "pure mean", p: P("clinic", { kind: "mean", column: "age" }, { epsilon: "0.7" }) },
  { name: "pure std by insured", p: P("clinic", { kind: "std", column: "wait_minutes" }, { epsilon: "1/3" }, { groupBy: [{ column: "insured" }] }) },
  { name: "pure quantiles", p: P("clinic", { kind: "quantile", column: "age", p: [0.25, 0.5, 0.75] }, { epsilon: "0.9" }) },
  { name: "pure describe", p: P("clinic", { kind: "describe" }, { epsilon: "2" }) },
  { name: "pure accuracy-first histogram", p: P("clinic", { kind: "histogram", column: "age", bins: 5 }, { within: 40, atMost: "1000" }) },
  { name: "zCDP rho variance", p: P("clinic_z", { kind: "variance", column: "age" }, { rho: "0.005" }) },
  { name: "zCDP epsilon mean", p: P("clinic_z", { kind: "mean", column: "age" }, { epsilon: "0.1" }) },
  { name: "zCDP rho describe", p: P("clinic_z", { kind: "describe" }, { rho: "0.005" }) },
];

describe("review: the charge is the sum of the mechanisms run", () => {
  it.each(PLANS)("$name", async ({ p }) => {
    const unit = p.dataset === "clinic" ? "epsilon" : "rho";
    const spendOf = async () => {
      const r = await call({ op: "spend", dataset: p.dataset });
      if (!r.ok) throw new Error(r.error.message);
      const s = (r.body as { op: "spend"; spend: { spentEpsilon: string; spentRho?: string } }).spend;
      return Rational.parse(unit === "epsilon" ? s.spentEpsilon : s.spentRho!);
    };
    const before = await spendOf();
    const pre = await preview(p);
    const r = await ask(p);
    expect(r.replay).toBe(false);
    expect(r.cost).toBe(pre.cost);
    expect(sum(r.mechanisms.map((m) => m.cost)).eq(Rational.parse(r.cost))).toBe(true);
    expect(sum(r.receipt.mechanisms.map((m) => m.cost)).eq(Rational.parse(r.receipt.cost))).toBe(true);
    const after = await spendOf();
    expect(after.sub(before).eq(Rational.parse(r.cost))).toBe(true);
    // Additive-only plans with an epsilon or rho ask on a dataset of the same unit spend exactly the ask.
    const ask1 = "epsilon" in p.privacy ? p.privacy.epsilon : "rho" in p.privacy ? p.privacy.rho : null;
    const additive = !["quantile", "describe"].includes(p.measure.kind);
    if (ask1 !== null && additive && (("epsilon" in p.privacy) === (unit === "epsilon"))) {
      expect(Rational.parse(r.cost).eq(Rational.parse(ask1))).toBe(true);
    }
    if (ask1 !== null && !additive) expect(Rational.parse(r.cost).le(Rational.parse(ask1))).toBe(true);
    // A replay charges nothing and returns the same rows.
    const again = await ask(p);
    expect(again.replay).toBe(true);
    expect(again.cost).toBe("0");
    expect(again.rows).toEqual(r.rows);
    expect((await spendOf()).eq(after)).toBe(true);
  });
});

describe("review: preview reports the confidence of its half-widths", () => {
  it("an accuracy-first ask with its own confidence (no top-level confidence) previews at that confidence", async () => {
    const p = P("clinic", { kind: "count" }, { within: 20, confidence: 0.9, atMost: "1000" });
    const pre = await preview(p);
    const r = await ask(p);
    expect(r.confidence).toBe(0.9);
    expect(pre.confidence).toBe(r.confidence);
  });
});
