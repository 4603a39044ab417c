/**
 * A stand-in curator for the cell-API tests: the same surface as CuratorClient (catalogue, open,
 * ask, preview, spend, ledger, close), exact pure-ε or ρ accounting with a cap, replays by plan
 * digest, and invented fixed results (no data, no noise). It records every plan it is sent, so a
 * test can assert that bad input never left the kernel.
 *
 * The numbers are invented for these tests only.
 */
import { OverCapError, UnknownDatasetError } from "../../runtime/errors.js";
import { Rational } from "../../runtime/core/index.js";
import { digestOf } from "../../runtime/protocol/canonical.js";
import type {
  ColumnInfo,
  DatasetInfo,
  GroupKey,
  LedgerEntry,
  Preview,
  QueryPlan,
  Release,
  ReleaseRow,
  SpendSummary,
} from "../../runtime/protocol/messages.js";
import type { CuratorPort } from "../../runtime/api/context.js";

export const DISTRICTS = ["Northgate", "Riverside", "Eastfield"];

export const COLUMNS: ColumnInfo[] = [
  { name: "age", type: "integer", lower: "0", upper: "100", step: "1" },
  { name: "wait_minutes", type: "number", lower: "0", upper: "240", step: "0.5" },
  { name: "district", type: "category", values: DISTRICTS },
  { name: "sex", type: "category", values: ["female", "male"] },
  { name: "visit_date", type: "date", lower: "2025-01-01", upper: "2025-12-31" },
  { name: "insured", type: "boolean" },
];

interface Account {
  mode: "pure" | "zcdp";
  cap: Rational;
  spent: Rational;
  releases: number;
}

function binLabels(c: ColumnInfo, bins: number): string[] {
  if (c.type !== "integer" && c.type !== "number") return [];
  const lo = Number(c.lower);
  const w = (Number(c.upper) - lo) / bins;
  return Array.from({ length: bins }, (_, i) => `[${lo + i * w}, ${lo + (i + 1) * w}${i === bins - 1 ? "]" : ")"}`);
}

function labels(k: GroupKey): string[] {
  const c = COLUMNS.find((x) => x.name === k.column)!;
  if ("bins" in k) return binLabels(c, k.bins);
  return c.type === "category" ? c.values : ["false", "true"];
}

function tuples(keys: GroupKey[]): string[][] {
  let out: string[][] = [[]];
  for (const k of keys) out = out.flatMap((p) => labels(k).map((v) => [...p, v]));
  return out;
}

export class FakeCurator implements CuratorPort {
  readonly asked: QueryPlan[] = [];
  readonly previewed: QueryPlan[] = [];
  readonly calls: string[] = [];
  closed = false;
  private readonly accountsByName = new Map<string, Account>([
    ["clinic", { mode: "pure", cap: Rational.parse("1"), spent: Rational.ZERO, releases: 0 }],
    ["clinic_z", { mode: "zcdp", cap: Rational.parse("1/20"), spent: Rational.ZERO, releases: 0 }],
  ]);
  private readonly released = new Map<string, Release>();
  private readonly ledgerEntries: LedgerEntry[] = [];

  constructor(readonly analyst = "ada") {}

  private account(name: string): Account {
    const a = this.accountsByName.get(name);
    if (!a) throw new UnknownDatasetError(`unknown dataset ${JSON.stringify(name)}`);
    return a;
  }

  spendOf(name: string): SpendSummary {
    const a = this.account(name);
    const rem = a.cap.sub(a.spent);
    if (a.mode === "pure") {
      // Each fake dataset is its own population, named after it.
      return { analyst: this.analyst, dataset: name, population: name, mode: "pure", spentEpsilon: a.spent.toString(), capEpsilon: a.cap.toString(), remainingEpsilon: rem.toString(), releases: a.releases };
    }
    return {
      analyst: this.analyst,
      dataset: name,
      population: name,
      mode: "zcdp",
      spentEpsilon: "0",
      capEpsilon: "1",
      remainingEpsilon: "1",
      spentRho: a.spent.toString(),
      capRho: a.cap.toString(),
      remainingRho: rem.toString(),
      delta: "1e-6",
      releases: a.releases,
    };
  }

  private costOf(plan: QueryPlan): Rational {
    const p = plan.privacy;
    if ("epsilon" in p) return Rational.parse(p.epsilon);
    if ("rho" in p) return Rational.parse(p.rho);
    return Rational.parse("1/10"); // accuracy first: a fixed invented price
  }

  private rowsOf(plan: QueryPlan): { groupColumns: string[]; rows: ReleaseRow[] } {
    const m = plan.measure;
    const row = (key: (string | null)[], stat: string, column: string | null, i: number): ReleaseRow => {
      const v = 100 + 10 * i;
      return { key, stat, column, value: String(v), low: String(v - 5), high: String(v + 5) };
    };
    switch (m.kind) {
      case "histogram": {
        const keys = [{ column: m.column, bins: m.bins }];
        return { groupColumns: [m.column], rows: tuples(keys).map((k, i) => row(k, "count", null, i)) };
      }
      case "crosstab": {
        const keys = [{ column: m.rows }, { column: m.cols }];
        return { groupColumns: [m.rows, m.cols], rows: tuples(keys).map((k, i) => row(k, "count", null, i)) };
      }
      case "quantile":
        return { groupColumns: [], rows: m.p.map((p) => ({ key: [], stat: p === 0.5 ? "p50" : `p${p * 100}`, column: m.column, value: "30.5", low: null, high: null })) };
      case "describe":
        return {
          groupColumns: ["value"],
          rows: [
            { key: [null], stat: "count", column: null, value: "1200", low: "1190", high: "1210" },
            { key: [null], stat: "mean", column: "age", value: "47.25", low: "46.5", high: "48.125" },
            { key: ["female"], stat: "count", column: "sex", value: "610", low: "600", high: "620" },
          ],
        };
      default: {
        const keys = plan.groupBy ?? [];
        const stat = m.kind;
        const column = "column" in m ? m.column : null;
        return { groupColumns: keys.map((k) => k.column), rows: tuples(keys).map((k, i) => row(k, stat, column, i)) };
      }
    }
  }

  async catalogue(): Promise<{ datasets: { name: string; description: string }[]; publicKey: string }> {
    this.calls.push("catalogue");
    return { datasets: [...this.accountsByName.keys()].map((name) => ({ name, description: `invented ${name}` })), publicKey: "fake" };
  }

  async open(dataset: string): Promise<DatasetInfo> {
    this.calls.push("open");
    this.account(dataset);
    return {
      name: dataset,
      description: `Invented clinic visits (${dataset})`,
      columns: structuredClone(COLUMNS),
      unit: { column: "patient_id", maxRows: 4, maxGroups: 2 },
      spend: this.spendOf(dataset),
    };
  }

  async ask(plan: QueryPlan): Promise<Release> {
    this.calls.push("ask");
    this.asked.push(structuredClone(plan));
    const a = this.account(plan.dataset);
    const digest = digestOf(plan);
    const before = this.released.get(digest);
    if (before) return { ...structuredClone(before), replay: true, spend: this.spendOf(plan.dataset) };
    const cost = this.costOf(plan);
    if (a.spent.add(cost).gt(a.cap)) {
      throw new OverCapError(`this release would cost ${cost.toString()} and cross the cap of ${a.cap.toString()} on ${plan.dataset}`, {
        spend: this.spendOf(plan.dataset),
      });
    }
    a.spent = a.spent.add(cost);
    a.releases += 1;
    const { groupColumns, rows } = this.rowsOf(plan);
    const unit = a.mode === "pure" ? "epsilon" : "rho";
    const release: Release = {
      dataset: plan.dataset,
      digest,
      plan: structuredClone(plan),
      groupColumns,
      rows,
      confidence: plan.confidence ?? 0.95,
      intervalMethod: "invented interval (fake curator)",
      noiseOnly: true,
      mechanisms: [{ target: plan.measure.kind, family: "discrete-laplace", scale: "10", sensitivity: "1", step: "1", cost: cost.toString() }],
      cost: cost.toString(),
      spend: this.spendOf(plan.dataset),
      replay: false,
      receipt: {
        format: "hush-receipt/1",
        analyst: this.analyst,
        dataset: plan.dataset,
        population: plan.dataset,
        seq: a.releases,
        digest,
        unit,
        cost: cost.toString(),
        total: a.spent.toString(),
        cap: a.cap.toString(),
        result: rows.map((r) => [r.key, r.stat, r.column, r.value, r.low, r.high]),
        mechanisms: [],
        issuedAt: "2025-06-01T10:00:00.000Z",
        prev: "0".repeat(64),
        keyId: "0123456789abcdef",
        sig: "fake",
      },
      notes: ["Error bars are noise-only at 0.95 confidence.", "invented note"],
    };
    this.released.set(digest, release);
    this.ledgerEntries.push({ seq: a.releases, dataset: plan.dataset, population: plan.dataset, digest, plan: release.plan, cost: release.cost, total: a.spent.toString(), issuedAt: release.receipt.issuedAt, receipt: release.receipt });
    return structuredClone(release);
  }

  async preview(plan: QueryPlan): Promise<Preview> {
    this.calls.push("preview");
    this.previewed.push(structuredClone(plan));
    const a = this.account(plan.dataset);
    const cost = this.costOf(plan);
    return {
      dataset: plan.dataset,
      digest: digestOf(plan),
      cost: cost.toString(),
      unit: a.mode === "pure" ? "epsilon" : "rho",
      halfWidths: [{ stat: plan.measure.kind, column: "column" in plan.measure ? plan.measure.column : null, halfWidth: "2.5" }],
      confidence: plan.confidence ?? 0.95,
      affordable: a.spent.add(cost).le(a.cap),
      replay: this.released.has(digestOf(plan)),
      spend: this.spendOf(plan.dataset),
      notes: [],
    };
  }

  async spend(dataset: string): Promise<SpendSummary> {
    this.calls.push("spend");
    return this.spendOf(dataset);
  }

  async ledger(dataset?: string): Promise<LedgerEntry[]> {
    this.calls.push("ledger");
    return this.ledgerEntries.filter((e) => dataset === undefined || e.dataset === dataset);
  }

  async close(): Promise<void> {
    this.closed = true;
  }
}

/** A HushSession wired to a fresh FakeCurator through the remote configuration path. */
export async function fakeSession(): Promise<{
  session: import("../../kernel/hush-session.js").HushSession;
  hush: import("../../runtime/api/hush.js").Hush;
  fake: FakeCurator;
  shown: import("../../kernel/hush-session.js").MimeBundle[];
}> {
  const { HushSession } = await import("../../kernel/hush-session.js");
  const fake = new FakeCurator();
  const shown: import("../../kernel/hush-session.js").MimeBundle[] = [];
  const session = HushSession.create(
    { display: (b) => shown.push(b) },
    { HUSH_CURATOR: "ipc:///nowhere/fake.sock", HUSH_ANALYST: "ada", HUSH_TOKEN: "not-a-secret" },
    { connect: async () => fake },
  );
  return { session, hush: session.api, fake, shown };
}
