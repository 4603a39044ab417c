/**
 * Views of privacy spend: the session's budget report (per dataset: this kernel's spend, the
 * analyst's total against the cap, the queries of this session) and the analyst's ledger as the
 * curator keeps it (every receipt, across sessions).
 */
import type { LedgerEntry, SpendSummary } from "../protocol/messages.js";
import type { QueryRecord } from "./session-spend.js";
import { INSPECT, aligned, planText, plural, q, spendText, unitSymbol } from "./text.js";

/** Spend on one dataset. */
export interface DatasetBudget {
  readonly dataset: string;
  /** The analyst's spend as the curator reports it (all sessions, against the cap). */
  readonly spend: SpendSummary;
  /** This kernel session's part, exact, in the dataset's accounting unit. */
  readonly sessionSpent: string;
  /** This session's queries on the dataset, oldest first. */
  readonly queries: readonly QueryRecord[];
}

/** The privacy budget: for each dataset, what this session spent and what remains under the cap. */
export class BudgetReport {
  readonly analyst: string;
  readonly datasets: readonly DatasetBudget[];
  /**
   * True for the overview a session shows before it opens a dataset: every dataset the analyst may
   * use, with the spend the curator's ledger holds (earlier sessions included), none of it this session's.
   */
  readonly overview: boolean;

  constructor(analyst: string, datasets: DatasetBudget[], overview = false) {
    this.analyst = analyst;
    this.overview = overview;
    this.datasets = Object.freeze(datasets.map((d) => Object.freeze({ ...d, queries: Object.freeze([...d.queries]) })));
    Object.freeze(this);
  }

  /** The budget of one dataset, if it is in the report. */
  of(dataset: string): DatasetBudget | undefined {
    return this.datasets.find((d) => d.dataset === dataset);
  }

  /** console.log(budget): the same text as the kernel shows. */
  [INSPECT](): string {
    return this.toString();
  }

  toString(): string {
    if (this.datasets.length === 0) {
      return this.overview ? `privacy budget of ${this.analyst}: no dataset is granted to you` : `privacy budget of ${this.analyst}: no dataset opened yet (hush.open(name))`;
    }
    if (this.overview) return overviewText(this.analyst, this.datasets);
    const out = [`privacy budget of ${this.analyst}`];
    for (const d of this.datasets) {
      out.push(`${d.dataset}: ${spendText(d.spend)} · this session ${q(d.sessionSpent)}`);
      out.push(
        ...aligned(
          d.queries.map((r) => [`#${r.seq} ${r.what}`, r.replay ? "replayed, no new cost" : `${unitSymbol(r.unit)} ${q(r.cost)}`]),
          "  ",
        ),
      );
    }
    return out.join("\n");
  }
}

/**
 * The overview before any dataset is opened: one line per population (its datasets share one cap),
 * with the spend from the curator's ledger.
 */
function overviewText(analyst: string, datasets: readonly DatasetBudget[]): string {
  const byPopulation = new Map<string, DatasetBudget[]>();
  for (const d of datasets) byPopulation.set(d.spend.population, [...(byPopulation.get(d.spend.population) ?? []), d]);
  const rows: [string, string][] = [...byPopulation].map(([population, ds]) => [
    `${ds.map((d) => d.dataset).join(", ")}${ds.length > 1 || ds[0].dataset !== population ? ` (population ${population})` : ""}`,
    spendText(ds[0].spend),
  ]);
  return [
    `privacy budget of ${analyst}: your spend so far, from the curator's ledger (no dataset opened in this session)`,
    ...aligned(rows, "  "),
    "Datasets over the same people share one cap. Open one with hush.open(name).",
  ].join("\n");
}

/** A page of the analyst's ledger as the curator records it (this and earlier sessions; the latest 1,000 releases of each population, or those before a given release). */
export class LedgerView {
  readonly entries: readonly LedgerEntry[];
  /** Earlier releases the curator left out of this page (it sends the latest 1,000 per population). */
  readonly earlier: number;
  readonly #dataset: string | undefined;

  constructor(entries: LedgerEntry[], earlier = 0, dataset?: string) {
    this.entries = Object.freeze(entries.map((e) => Object.freeze(structuredClone(e))));
    this.earlier = earlier;
    this.#dataset = dataset;
    Object.freeze(this);
  }

  [INSPECT](): string {
    return this.toString();
  }

  toString(): string {
    if (this.entries.length === 0) return "ledger: no releases yet";
    const lines = this.entries.map((e): [string, string] => [
      `${e.dataset} #${e.seq} ${planText(e.plan)}`,
      `${unitSymbol(e.receipt.unit)} ${q(e.cost)} → total ${q(e.total)} / ${q(e.receipt.cap)} · ${e.issuedAt}`,
    ]);
    const out = [`ledger: ${plural(this.entries.length, "release")}`, ...aligned(lines, "  ")];
    const more = this.earlierNote();
    if (more !== null) out.push(`  ${more}`);
    return out.join("\n");
  }

  /** What this page leaves out, and how to page back; null when nothing was left out. */
  earlierNote(): string | null {
    if (this.earlier === 0) return null;
    const n = this.earlier;
    const shown = `… and ${n.toLocaleString("en-US")} earlier release${n === 1 ? "" : "s"} not shown (the curator sends the latest 1,000 of each population)`;
    const populations = new Set(this.entries.map((e) => e.population));
    const datasets = [...new Set(this.entries.map((e) => e.dataset))];
    if (populations.size !== 1) return `${shown}; name a dataset to page back through it: hush.ledger("${datasets[0] ?? "name"}", { before: n })`;
    const first = Math.min(...this.entries.map((e) => e.seq));
    const name = this.#dataset ?? (datasets.length === 1 ? datasets[0] : undefined);
    return `${shown}: hush.ledger(${name === undefined ? "undefined" : JSON.stringify(name)}, { before: ${first} })`;
  }
}
