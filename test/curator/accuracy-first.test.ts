/**
 * Safe accuracy first (issue 11): `count({ within: 25 })` must not spend silently. An accuracy-first
 * ask is answered only under a bound on what it may spend — its own `atMost`, or the dataset's
 * policy default `accuracyFirst.atMost` — and is otherwise refused with its price; a refusal spends
 * nothing and, since the price follows from the plan and the policy alone, its text is the same
 * whatever the data. Runs the real service (engine, answerer, ledger) in process.
 *
 * The price is checked against the published tail of the discrete Laplace law (Inusah & Kozubowski
 * 2006; the form used by Canonne, Kamath & Steinke 2020): for noise with P(x) ∝ exp(-|x|/t),
 * P(|X| > h) = 2 exp(-(h+1)/t) / (1 + exp(-1/t)), with t = Δ/ε. At the stated price that tail at the
 * released half-width is at most 1 - confidence (binary64 here: a check, not the privacy path).
 */
import { copyFileSync, mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { Rational } from "../../runtime/core/index.js";
import { loadPolicy } from "../../runtime/curator/policy.js";
import { CuratorService } from "../../runtime/curator/service.js";
import type { LedgerEntry, Preview, QueryPlan, Release, Response, SpendSummary } from "../../runtime/protocol/messages.js";
import { priceUp } from "../../runtime/curator/aggregates/budget.js";
import { ADA_HASH, FIXTURES } from "../fixtures/curator-helpers.js";

/** The price as the refusal words it: the exact cost when it is a short decimal, else rounded up to 6 digits. */
function shown(cost: string): string {
  const p = priceUp(Rational.parse(cost));
  expect(Rational.parse(p).ge(Rational.parse(cost))).toBe(true);
  expect(Rational.parse(p).sub(Rational.parse(cost)).le(Rational.parse(cost).mul(Rational.of(1n, 100000n)))).toBe(true);
  return p;
}

const COLUMNS = `    columns:
      age:          { type: integer, range: [0, 100], step: "1" }
      wait_minutes: { type: number, range: [0, 240], step: "0.5" }
      district:     { type: category, values: [Northgate, Riverside, Old Town] }
      visit_date:   { type: date, range: ["2025-01-01", "2025-12-31"] }
      insured:      { type: boolean }
`;

function policyText(extra: { bounded?: string; cap?: string } = {}): string {
  return `analysts:
  ada: { token: "${ADA_HASH}" }
datasets:
  open:
    source: a.csv
    unit: { column: patient_id, maxRows: 4 }
    accounting: { mode: pure, cap: { epsilon: "${extra.cap ?? "3"}" } }
    analysts: [ada]
${COLUMNS}  bounded:
    source: b.csv
    unit: { column: patient_id, maxRows: 4 }
    accounting: { mode: pure, cap: { epsilon: "3" } }
    accuracyFirst: { atMost: "${extra.bounded ?? "0.5"}" }
    analysts: [ada]
${COLUMNS}  zrows:
    source: c.csv
    accounting: { mode: zcdp, cap: { epsilon: "2", delta: "1e-6" } }
    analysts: [ada]
${COLUMNS}`;
}

/** A workspace with the fixture rows as a.csv, b.csv and c.csv (or a one-row file as a.csv). */
function workspace(opts: { tiny?: boolean; policy?: string } = {}): string {
  const dir = mkdtempSync(join(tmpdir(), "hush-af-"));
  if (opts.tiny) writeFileSync(join(dir, "a.csv"), "patient_id,age,wait_minutes,district,visit_date,insured\nq1,50,10,Northgate,2025-03-01,false\n");
  else copyFileSync(join(FIXTURES, "visits.csv"), join(dir, "a.csv"));
  copyFileSync(join(FIXTURES, "visits.csv"), join(dir, "b.csv"));
  copyFileSync(join(FIXTURES, "visits.csv"), join(dir, "c.csv"));
  writeFileSync(join(dir, "policy.yaml"), opts.policy ?? policyText());
  return dir;
}

class Speaker {
  n = 0;
  constructor(readonly service: CuratorService) {}
  async call(body: unknown): Promise<Response> {
    const frame = Buffer.from(JSON.stringify({ v: 1, id: `r${++this.n}`, analyst: "ada", token: "ada-token", body }));
    return JSON.parse((await this.service.handleFrame(frame, "test")).toString("utf8")) as Response;
  }
  async ok<T>(body: unknown): Promise<T> {
    const r = await this.call(body);
    if (!r.ok) throw new Error(`${r.error.kind}: ${r.error.message}`);
    return r.body as T;
  }
  async refusal(plan: QueryPlan): Promise<{ kind: string; message: string }> {
    const r = await this.call({ op: "ask", plan });
    expect(r.ok, "refused").toBe(false);
    return (r as Extract<Response, { ok: false }>).error;
  }
  ask = async (plan: QueryPlan) => (await this.ok<{ release: Release }>({ op: "ask", plan })).release;
  preview = async (plan: QueryPlan) => (await this.ok<{ preview: Preview }>({ op: "preview", plan })).preview;
  spend = async (dataset: string) => (await this.ok<{ spend: SpendSummary }>({ op: "spend", dataset })).spend;
  ledger = async () => (await this.ok<{ entries: LedgerEntry[] }>({ op: "ledger" })).entries;
}

const count = (dataset: string, privacy: QueryPlan["privacy"], extra: Partial<QueryPlan> = {}): QueryPlan => ({ v: 1, dataset, measure: { kind: "count" }, privacy, ...extra });

const dirs: string[] = [];
const services: CuratorService[] = [];
async function start(opts: { tiny?: boolean; policy?: string } = {}): Promise<Speaker> {
  const dir = workspace(opts);
  dirs.push(dir);
  const s = await CuratorService.open(join(dir, "policy.yaml"));
  services.push(s);
  return new Speaker(s);
}

let ada: Speaker;
beforeAll(async () => {
  ada = await start();
});
afterAll(async () => {
  for (const s of services) await s.close();
  for (const d of dirs) rmSync(d, { recursive: true, force: true });
});

describe("an accuracy-first ask states its price and spends only under a bound", () => {
  it("without a bound it is refused with the price, and nothing is spent", async () => {
    const plan = count("open", { within: 5 });
    const price = (await ada.preview(plan)).cost;
    const before = await ada.spend("open");
    const e = await ada.refusal(plan);
    expect(e.kind).toBe("bad-input");
    expect(e.message).toContain(`costs ε ${shown(price)}`);
    expect(e.message).toContain(`{ within: 5, atMost: ${shown(price)} }`);
    expect(e.message).toMatch(/nothing was spent/);
    expect(e.message).not.toMatch(/\d+\/\d+/); // decimals, not fractions
    expect(await ada.spend("open")).toEqual(before);
    expect(await ada.ledger()).toEqual([]);
  });

  it("a bound below the price is refused the same way; at the price it is answered and charged exactly that", async () => {
    const plan = count("open", { within: 5, confidence: 0.9 });
    const pre = await ada.preview(plan);
    const low = Rational.parse(pre.cost).mul(Rational.of(99n, 100n)).toDecimal(12);
    const e = await ada.refusal({ ...plan, privacy: { within: 5, confidence: 0.9, atMost: low } });
    expect(e.message).toContain(`costs ε ${shown(pre.cost)}, more than its bound atMost ε ${low.replace(/\.?0+$/, "")}`);
    expect((await ada.spend("open")).releases).toBe(0);

    // The price as the refusal states it is enough.
    const r = await ada.ask({ ...plan, privacy: { within: 5, confidence: 0.9, atMost: shown(pre.cost) } });
    expect(r.cost).toBe(pre.cost);
    expect(r.digest).toBe(pre.digest); // atMost is not part of the question
    expect(r.plan.privacy).toEqual({ within: 5, confidence: 0.9 });
    expect(r.receipt.seq).toBe(1);

    // The discrete Laplace tail at the released half-width, at the price paid (see the header).
    const m = r.mechanisms[0];
    expect(m.family).toBe("discrete-laplace");
    const t = Rational.parse(m.scale).toNumber();
    const eps = Rational.parse(r.cost).toNumber();
    expect(t).toBeCloseTo(Number(m.sensitivity) / eps, 9);
    const row = r.rows[0];
    const h = Number(row.high) - Number(row.value);
    expect(h).toBeLessThanOrEqual(5);
    const tail = (2 * Math.exp(-(h + 1) / t)) / (1 + Math.exp(-1 / t));
    expect(tail).toBeLessThanOrEqual(0.1 + 1e-12);

    // Asked again with any bound (even one below the price): the stored release, free.
    const again = await ada.ask({ ...plan, privacy: { within: 5, confidence: 0.9, atMost: "0.000001" } });
    expect(again.replay).toBe(true);
    expect(again.cost).toBe("0");
    expect(again.receipt).toEqual(r.receipt);
  });

  it("the policy default bounds asks that name none; an ask's own atMost overrides it", async () => {
    const small = count("bounded", { within: 30 });
    const p1 = await ada.preview(small);
    expect(Rational.parse(p1.cost).le(Rational.parse("0.5"))).toBe(true);
    expect((await ada.ask(small)).cost).toBe(p1.cost);

    // A half-width whose price lies between the default (0.5) and what is left (about 2.6).
    let tight: QueryPlan | null = null;
    let p2: Preview | null = null;
    for (const within of [2, 3, 4, 6, 8, 12, 16]) {
      const plan = count("bounded", { within }, { groupBy: [{ column: "district" }] });
      const p = await ada.preview(plan);
      if (Rational.parse(p.cost).gt(Rational.parse("0.5")) && Rational.parse(p.cost).lt(Rational.parse("2.5"))) {
        [tight, p2] = [plan, p];
        break;
      }
    }
    expect(tight, "a half-width priced between 0.5 and 2.5").not.toBeNull();
    const e = await ada.refusal(tight!);
    expect(e.message).toContain(`more than its bound atMost ε 0.5 (the dataset's policy default)`);
    expect((await ada.spend("bounded")).releases).toBe(1);
    const within = (tight!.privacy as { within: number }).within;
    expect((await ada.ask({ ...tight!, privacy: { within, atMost: "2.5" } })).cost).toBe(p2!.cost);
  });

  it("on a zCDP dataset the bound and the price are in rho", async () => {
    const plan: QueryPlan = { v: 1, dataset: "zrows", measure: { kind: "sum", column: "age" }, privacy: { within: 2000 } };
    const pre = await ada.preview(plan);
    expect(pre.unit).toBe("rho");
    const e = await ada.refusal(plan);
    expect(e.message).toContain(`costs ρ ${shown(pre.cost)}`);
    expect(e.message).toMatch(/in ρ, this dataset's accounting unit/);
    const r = await ada.ask({ ...plan, privacy: { within: 2000, atMost: shown(pre.cost) } });
    expect(r.receipt.unit).toBe("rho");
    expect(r.cost).toBe(pre.cost);
  });

  it("the refusal says nothing about the data: the same words on a one-row file", async () => {
    const [tiny, full] = [await start({ tiny: true }), await start()];
    for (const plan of [count("open", { within: 7 }), count("open", { within: 2 }, { groupBy: [{ column: "district" }] })]) {
      expect((await tiny.refusal(plan)).message).toBe((await full.refusal(plan)).message);
    }
  });

  it("malformed bounds are refused before any work", async () => {
    for (const atMost of ["0", "-1", "lots", "1e999999", "1/0", ""]) {
      const e = await ada.refusal(count("open", { within: 5, atMost }));
      expect(e.kind, atMost).toMatch(/bad-input|protocol/);
    }
    const e = await ada.refusal({ ...count("open", { epsilon: "0.1" }), privacy: { epsilon: "0.1", atMost: "1" } as unknown as QueryPlan["privacy"] });
    expect(e.kind).toMatch(/bad-input|protocol/);
  });
});

describe("the policy's accuracyFirst.atMost", () => {
  it("must be positive and at most the cap, in the dataset's unit", () => {
    const dir = workspace();
    dirs.push(dir);
    const load = (text: string) => {
      writeFileSync(join(dir, "policy.yaml"), text);
      return () => loadPolicy(join(dir, "policy.yaml"));
    };
    expect(load(policyText({ bounded: "4" }))).toThrow(/datasets\.bounded\.accuracyFirst\.atMost.*must not exceed the cap/);
    expect(load(policyText({ bounded: "0" }))).toThrow(/datasets\.bounded\.accuracyFirst\.atMost.*positive/);
    expect(load(policyText({ bounded: "lots" }))).toThrow(/datasets\.bounded\.accuracyFirst\.atMost/);
    expect(load(policyText({ bounded: "3" }))().datasets.get("bounded")?.accuracyFirst?.atMost.eq(Rational.of(3n))).toBe(true);
  });
});

describe("the price against the methods document's check value", () => {
  it("C24.1: a count of rows at epsilon per row, within 10 at 95%, costs C11.2 (0.284348512423) rounded up to 6 digits", async () => {
    const rows = await start({
      policy: `analysts:
  ada: { token: "${ADA_HASH}" }
datasets:
  open:
    source: a.csv
    accounting: { mode: pure, cap: { epsilon: "3" } }
    analysts: [ada]
${COLUMNS}`,
    });
    const e = await rows.refusal(count("open", { within: 10 }));
    expect(e.message).toContain("costs ε 0.284349;");
  });
});
