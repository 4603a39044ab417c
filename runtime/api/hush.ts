/**
 * The `hush` object that cells see. It opens sealed datasets and reports the privacy budget; it
 * never holds or returns data rows. Everything goes through the curator connection.
 */
import { BadInputError } from "../errors.js";
import { BudgetReport, type DatasetBudget, LedgerView } from "./budget.js";
import { INSPECT } from "./text.js";
import type { ApiContext } from "./context.js";
import { withBudgetNote } from "./context.js";
import { type Column, col } from "./expr.js";
import { SealedTable } from "./table.js";

/** What `hush` shows when displayed on its own. */
export const HUSH_HELP = [
  "hush — sealed datasets, differentially private aggregates with error bars, a privacy-loss cap",
  '  const visits = await hush.open("visits")          sealed handle: public schema and your spend',
  '  await visits.count({ epsilon: 0.1 })              a noisy count with its error bar',
  '  await visits.where(hush.col("age").ge(65)).by("district").mean("wait_minutes", { epsilon: 0.2 })',
  '  await visits.histogram("age", { bins: 10, epsilon: 0.2 })',
  '  await visits.regress("wait_minutes", ["age", "district"], { epsilon: 0.3 })   linear regression; correlate(["age", "cost"], ...)',
  '  await visits.preview.mean("wait_minutes", { epsilon: 0.1, assumeCount: 5000 })   cost and expected error, nothing spent',
  "  await hush.budget()    your spend and what remains under the cap (before hush.open: every dataset you may use)",
  "  await hush.ledger()    your releases as recorded (the latest 1,000 per population), with signed receipts",
  "  await hush.datasets()  the datasets you may open",
  "Spend with { epsilon }, { rho } or { within, atMost } (accuracy first, never more than atMost); confidence defaults to 0.95.",
].join("\n");

/** The cell API: open sealed datasets, read your privacy budget and ledger. */
export class Hush {
  readonly #ctx: ApiContext;

  constructor(ctx: ApiContext) {
    this.#ctx = ctx;
    Object.freeze(this);
  }

  /** Opens a dataset as a sealed handle (public schema and your spend; aggregates only). */
  async open(name: string): Promise<SealedTable> {
    if (typeof name !== "string" || name.trim() === "") throw new BadInputError('hush.open(name): name a dataset, e.g. hush.open("visits")');
    const port = await this.#ctx.port();
    try {
      const info = await port.open(name);
      this.#ctx.spend.noteSpend(info.spend);
      this.#ctx.spend.noteOpened(info.name);
      return new SealedTable(this.#ctx, info);
    } catch (e: unknown) {
      throw withBudgetNote(e, this.#ctx, name);
    }
  }

  /** The datasets you may open, with their descriptions. */
  async datasets(): Promise<{ name: string; description: string }[]> {
    const port = await this.#ctx.port();
    return (await port.catalogue()).datasets;
  }

  /**
   * Your privacy budget: for each dataset opened in this session (or the one named), this session's
   * spend and queries, and your total against the cap (which persists across sessions). Before any
   * dataset is opened (a fresh or restarted kernel), every dataset you may use, with your spend on
   * it from the curator's ledger: no dataset is opened and no data is read for it.
   */
  async budget(dataset?: string): Promise<BudgetReport> {
    const port = await this.#ctx.port();
    const analyst = await this.#ctx.analyst();
    if (dataset === undefined && this.#ctx.spend.datasets().length === 0) {
      const accounts = port.accounts !== undefined ? await port.accounts() : await Promise.all((await port.catalogue()).datasets.map((d) => port.spend(d.name)));
      for (const s of accounts) this.#ctx.spend.noteSpend(s);
      return new BudgetReport(
        analyst,
        accounts.map((s) => ({ dataset: s.dataset, spend: s, sessionSpent: "0", queries: [] })),
        true,
      );
    }
    const names = dataset !== undefined ? [dataset] : this.#ctx.spend.datasets();
    const out: DatasetBudget[] = [];
    for (const name of names) {
      const spend = await port.spend(name);
      this.#ctx.spend.noteSpend(spend);
      out.push({ dataset: name, spend, sessionSpent: this.#ctx.spend.sessionSpent(name), queries: this.#ctx.spend.queries(name) });
    }
    return new BudgetReport(analyst, out);
  }

  /**
   * Your ledger as the curator records it: your releases on every dataset (or the one named), with
   * receipts; the latest 1,000 of each population, or those before release `before`.
   */
  async ledger(dataset?: string, options: { before?: number } = {}): Promise<LedgerView> {
    const port = await this.#ctx.port();
    const before = options.before;
    if (before !== undefined && !(Number.isSafeInteger(before) && before >= 1)) throw new BadInputError("ledger: before must be a release number (a whole number from 1)");
    if (port.ledgerPage === undefined) return new LedgerView(await port.ledger(dataset));
    const page = await port.ledgerPage(dataset, before);
    return new LedgerView(page.entries, page.earlier, dataset);
  }

  /** Starts a filter on a public column: `hush.col("age").ge(65)`. */
  col(name: string): Column {
    return col(name);
  }

  toString(): string {
    return HUSH_HELP;
  }

  /** console.log(hush): the help text, not the internal fields. */
  [INSPECT](): string {
    return HUSH_HELP;
  }
}
