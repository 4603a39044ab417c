/**
 * The curator's request handling, independent of the transport: frame → validated request →
 * authenticated analyst → answer. The server (server.ts) only moves frames; request-frame.ts reads
 * and writes them, spend-summary.ts words the spend and the over-cap refusal, keyed-lock.ts
 * serialises work per account.
 *
 * Order for a release (so the cap always holds and a refused query spends nothing):
 * auth → prepare (validation and cost, no data) → replay lookup → under the (analyst, population)
 * lock: cap check → compute (noise) → ledger commit (its own cap check in one transaction) → reply.
 * Spend is per (analyst, population): every dataset over the same people draws on one cap.
 */
import { existsSync } from "node:fs";
import { type Bits, type PartRecord, Rational, pureEpsilonOfParts } from "../core/index.js";
import { BusyError, HushError, OverCapError, UnknownDatasetError, isHushError } from "../errors.js";
import {
  PROTOCOL_VERSION,
  type ColumnInfo,
  type DatasetInfo,
  type LedgerEntry,
  type Preview,
  type QueryPlan,
  type Release,
  type Request,
  type Response,
  type ResponseBody,
  type SpendSummary,
} from "../protocol/messages.js";
import { generateCuratorKey, loadCuratorKey, type CuratorKey } from "./keys.js";
import { Ledger, type LedgerRow } from "./ledger.js";
import { loadPolicy, type DatasetPolicy, type LoadedPolicy } from "./policy.js";
import { accuracyFirstRefusal, exactDecimal } from "./aggregates/budget.js";
import type { ComputedRelease } from "./answer.js";
import { KeyedLock, Turns } from "./keyed-lock.js";
import { LEDGER_PAGE } from "../protocol/limits.js";
import { copyMechanisms, receiptResult, signReasked, signReceipt } from "./receipts.js";
import { encodeResponse, readRequestFrame } from "./request-frame.js";
import { SignIn } from "./sign-in.js";
import { capOf, overCapError, spendSummary } from "./spend-summary.js";

/** What the service needs from the answering side (answer.ts's Answerer; tests may pass a small fake). */
export interface PreparedRelease {
  dataset: string;
  digest: string;
  plan: unknown;
  unit: "epsilon" | "rho";
  cost: Rational;
  notes: string[];
  /** Without bits: the production path (worker pool, CSPRNG, time limit, reply pacing; answer.ts). */
  compute(bits?: Bits): Promise<ComputedRelease>;
}

export interface AnswerSource {
  datasetColumns(dataset: string): ColumnInfo[];
  prepare(analyst: string, plan: unknown): PreparedRelease | Promise<PreparedRelease>;
  preview(
    analyst: string,
    plan: unknown,
    assumeCount?: number,
  ):
    | { prepared: PreparedRelease; halfWidths: Preview["halfWidths"]; notes: string[]; ratioErrors?: Preview["ratioErrors"] }
    | Promise<{ prepared: PreparedRelease; halfWidths: Preview["halfWidths"]; notes: string[]; ratioErrors?: Preview["ratioErrors"] }>;
}

export interface ServiceParts {
  policy: LoadedPolicy;
  answerer: AnswerSource;
  ledger: Ledger;
  key: CuratorKey;
  /** Closed with the service (the data engine). */
  engine?: { close(): Promise<void> | void };
}

const INTERNAL = "internal error in the curator; the details are in the curator's log";

/**
 * Previews an analyst may have in progress or waiting for the curator's thread at once (service.ts
 * `previewTurns`); past that they are refused as busy, before any work. Previews are free, so this
 * bound and the turns are all that limits them.
 */
export const MAX_QUEUED_PREVIEWS = 32;
/**
 * The same for asks waiting to be planned (`askTurns`): larger, since a notebook may send many
 * asks at once (they spend, so the cap limits them too), and still a bound on what one analyst
 * can hold in the curator's memory.
 */
export const MAX_QUEUED_ASKS = 256;

/** Receipts read per turn of the event loop while an account's pure-epsilon tally catches up (catchUpTally). */
export const TALLY_CHUNK = 2000;

export class CuratorService {
  private readonly lock = new KeyedLock();
  /**
   * The curator's own thread, shared out per analyst: a preview, and an ask's planning, run one at
   * a time per analyst, each on a fresh turn of the event loop (keyed-lock.ts Turns), so an
   * analyst who floods with previews (free: they read no data) or asks delays the others' requests
   * by at most one planning step, and holds a bounded number of requests.
   */
  private readonly previewTurns = new Turns(
    MAX_QUEUED_PREVIEWS,
    () => new BusyError(`you have ${MAX_QUEUED_PREVIEWS} previews waiting already; wait for their answers and preview again`),
  );
  private readonly askTurns = new Turns(MAX_QUEUED_ASKS, () => new BusyError(`you have ${MAX_QUEUED_ASKS} asks waiting already; wait for their answers and ask again`));
  private readonly inFlight = new Set<Promise<unknown>>();
  /** Per zCDP account: the plain-composition epsilon of its releases up to `seq`, null once one was not pure. */
  private readonly pureTally = new Map<string, { seq: number; pure: Rational | null }>();
  /** Per zCDP account: the catch-up of its tally in progress (catchUpTally). */
  private readonly tallying = new Map<string, Promise<void>>();
  private closing = false;

  readonly policy: LoadedPolicy;
  readonly key: CuratorKey;
  private readonly answerer: AnswerSource;
  private readonly ledger: Ledger;
  private readonly engine: { close(): Promise<void> | void } | undefined;
  private readonly signIn: SignIn;

  /** Assembles a service from its parts; `open` is the normal way in. */
  constructor(parts: ServiceParts) {
    this.policy = parts.policy;
    this.key = parts.key;
    this.answerer = parts.answerer;
    this.ledger = parts.ledger;
    this.engine = parts.engine;
    this.signIn = new SignIn({ analysts: parts.policy.analysts });
  }

  static async open(policyFile: string): Promise<CuratorService> {
    const policy = await loadPolicy(policyFile);
    if (!existsSync(policy.keyPath)) {
      // First start of a fresh deployment: make the signing key the policy names.
      const { publicKeyB64 } = generateCuratorKey(policy.keyPath);
      process.stderr.write(`hush curator: created signing key ${policy.keyPath} (public key ${publicKeyB64})\n`);
    }
    const key = loadCuratorKey(policy.keyPath);
    const ledger = Ledger.open(policy.ledgerPath);
    try {
      // Loaded here rather than at the top so the request path can be exercised without DuckDB.
      const { openEngines } = await import("./engines/open.js");
      const { Answerer } = await import("./answer.js");
      const engine = await openEngines(policy);
      const answerer = new Answerer(engine, policy);
      answerer.startWorkers();
      // Closing stops the worker pool first, so no release is left computing against a closed engine.
      const parts = { close: async () => (await answerer.close(), await engine.close()) };
      return new CuratorService({ policy, answerer, ledger, key, engine: parts });
    } catch (e: unknown) {
      ledger.close();
      throw e;
    }
  }

  get publicKeyB64(): string {
    return this.key.publicKeyB64;
  }

  /**
   * Waits for requests in progress (at most `graceMs`), then closes the data engine (stopping the
   * worker pool: releases still computing are refused, never debited) and the ledger. A debit is
   * one synchronous SQLite transaction, so the ledger closes between transactions, never inside one.
   */
  async close(graceMs = Infinity): Promise<void> {
    this.closing = true;
    const until = performance.now() + graceMs;
    while (this.inFlight.size > 0 && performance.now() < until) {
      let timer: NodeJS.Timeout | undefined;
      const left = until - performance.now();
      const waited = Number.isFinite(left) ? new Promise<void>((r) => (timer = setTimeout(r, left))) : new Promise<void>(() => {});
      await Promise.race([Promise.allSettled([...this.inFlight]), waited]);
      clearTimeout(timer);
    }
    try {
      await this.engine?.close();
    } finally {
      this.ledger.close();
    }
  }

  /**
   * One raw request frame in, one encoded response out. Never throws. `peer` names the connection
   * it came on (the ROUTER routing id), for the sign-in's per-connection limit.
   */
  async handleFrame(frame: Buffer, peer: string): Promise<Buffer> {
    const work = this.answerFrame(frame, peer);
    this.inFlight.add(work);
    try {
      return encodeResponse(await work);
    } finally {
      this.inFlight.delete(work);
    }
  }

  private async answerFrame(frame: Buffer, peer: string): Promise<Response> {
    const read = readRequestFrame(frame);
    try {
      const req = read.request();
      if (this.closing) throw new HushError("unreachable", "the curator is shutting down");
      return { v: PROTOCOL_VERSION, id: read.id, ok: true, body: await this.handle(req, peer) };
    } catch (e: unknown) {
      return { v: PROTOCOL_VERSION, id: read.id, ok: false, error: this.describeError(e) };
    }
  }

  private describeError(e: unknown): Extract<Response, { ok: false }>["error"] {
    if (isHushError(e) && e.kind !== "internal") {
      const spend = e instanceof OverCapError ? e.spend : undefined;
      return spend === undefined ? { kind: e.kind, message: e.message } : { kind: e.kind, message: e.message, spend };
    }
    // Unexpected failures may carry data (a database message quoting a value): log, never send.
    process.stderr.write(`hush curator: internal error: ${e instanceof Error ? (e.stack ?? e.message) : String(e)}\n`);
    return { kind: "internal", message: INTERNAL };
  }

  /** Handles a validated request (authentication included). */
  async handle(req: Request, peer: string): Promise<ResponseBody> {
    await this.signIn.check(req.analyst, req.token, peer);
    const analyst = req.analyst;
    const body = req.body;
    switch (body.op) {
      case "catalogue":
        return {
          op: "catalogue",
          datasets: this.visibleDatasets(analyst).map((d) => ({ name: d.name, description: d.description })),
          publicKey: this.key.publicKeyB64,
        };
      case "open":
        await this.catchUpTally(analyst, this.dataset(analyst, body.dataset));
        return { op: "open", info: this.open(analyst, body.dataset) };
      case "spend": {
        const d = this.dataset(analyst, body.dataset);
        await this.catchUpTally(analyst, d);
        return { op: "spend", spend: this.spendNow(analyst, d) };
      }
      case "ledger":
        return { op: "ledger", ...this.entries(analyst, body.dataset, body.before) };
      case "accounts": {
        // From the policy and the ledger only: what a restarted kernel shows before opening anything.
        const datasets = this.visibleDatasets(analyst);
        for (const d of datasets) await this.catchUpTally(analyst, d);
        return { op: "accounts", accounts: datasets.map((d) => this.spendNow(analyst, d)) };
      }
      case "preview":
        return { op: "preview", preview: await this.previewTurns.run(analyst, () => this.preview(analyst, body.plan, body.assumeCount)) };
      case "ask":
        return { op: "ask", release: await this.ask(analyst, body.plan, body.cell) };
    }
  }

  private visibleDatasets(analyst: string): DatasetPolicy[] {
    return [...this.policy.datasets.values()].filter((d) => d.analysts.includes(analyst));
  }

  /** A dataset the analyst may use; others (absent or not granted) look the same: unknown. */
  private dataset(analyst: string, name: string): DatasetPolicy {
    const d = this.policy.datasets.get(name);
    if (d === undefined || !d.analysts.includes(analyst)) {
      const names = this.visibleDatasets(analyst).map((x) => x.name);
      throw new UnknownDatasetError(
        `unknown dataset ${JSON.stringify(name)}; available to ${analyst}: ${names.length > 0 ? names.join(", ") : "none"}`,
      );
    }
    return d;
  }

  private spendNow(analyst: string, d: DatasetPolicy): SpendSummary {
    const { spent, releases } = this.ledger.spent(analyst, d.population);
    return spendSummary(analyst, d, spent, releases, this.pureUpTo(analyst, d, releases));
  }

  /** The tally with the release at `seq` (being written, so not yet readable from the ledger) added. */
  private pureAfter(analyst: string, d: DatasetPolicy, seq: number, parts: readonly PartRecord[]): Rational | null {
    const before = this.pureUpTo(analyst, d, seq - 1);
    const e = pureEpsilonOfParts(parts);
    return before === null || e === null ? null : before.add(e);
  }

  /**
   * Brings a zCDP account's pure-epsilon tally (pureUpTo) up to the ledger's latest release,
   * TALLY_CHUNK receipts per turn of the event loop. The first tally after a restart reads the
   * account's whole history (about 10 microseconds a receipt: an account of 10^6 releases held
   * the loop for about 10 s in one piece); in chunks, other analysts' requests are answered in
   * between. Every request that states a spend awaits this first, so pureUpTo itself only reads
   * the few releases debited since (one caller at a time per account: the others await its run).
   */
  private async catchUpTally(analyst: string, d: DatasetPolicy): Promise<void> {
    if (d.accounting.mode !== "zcdp") return;
    const key = `${analyst}\u0000${d.population}`;
    const running = this.tallying.get(key);
    if (running !== undefined) return running;
    const work = (async () => {
      for (;;) {
        const t = this.pureTally.get(key);
        const latest = this.ledger.spent(analyst, d.population).releases;
        // Done when the tally is past a release that was not pure (it stays null) or is up to date.
        if (t?.pure === null || (t?.seq ?? 0) >= latest) return;
        const from = t?.seq ?? 0;
        this.pureUpTo(analyst, d, Math.min(latest, from + TALLY_CHUNK));
        await new Promise<void>((resolve) => setImmediate(resolve));
      }
    })();
    this.tallying.set(key, work);
    try {
      await work;
    } finally {
      this.tallying.delete(key);
    }
  }

  /**
   * Sum of the pure epsilons of an account's releases 1..seq, or null when one of them was not
   * pure (docs/methods.md §22); zCDP accounts only. Kept per account and extended from the
   * ledger's receipts past the last seq seen, so each receipt is read once per process (a second
   * curator process on the same ledger is read through, as its seqs appear).
   */
  private pureUpTo(analyst: string, d: DatasetPolicy, seq: number): Rational | null {
    if (d.accounting.mode !== "zcdp") return null;
    const key = `${analyst}\u0000${d.population}`;
    let t = this.pureTally.get(key) ?? { seq: 0, pure: Rational.ZERO };
    if (t.seq > seq) t = { seq: 0, pure: Rational.ZERO };
    if (t.seq < seq && t.pure !== null) {
      let pure: Rational | null = t.pure;
      for (const mechanisms of this.ledger.mechanismsBetween(analyst, d.population, t.seq, seq)) {
        const e = pureEpsilonOfParts(mechanisms);
        pure = e === null ? null : pure.add(e);
        if (pure === null) break;
      }
      t = { seq, pure };
    } else if (t.pure === null) t = { seq: Math.max(t.seq, seq), pure: null };
    this.pureTally.set(key, t);
    return t.pure;
  }

  private open(analyst: string, name: string): DatasetInfo {
    const d = this.dataset(analyst, name);
    return {
      name: d.name,
      description: d.description,
      columns: this.answerer.datasetColumns(d.name),
      unit: { column: d.unit.column ?? null, maxRows: d.unit.maxRows, maxGroups: d.unit.maxGroups },
      spend: this.spendNow(analyst, d),
    };
  }

  /** A page of the analyst's ledger (LEDGER_PAGE per population; Ledger.page). */
  private entries(analyst: string, dataset?: string, before?: number): { entries: LedgerEntry[]; earlier?: number } {
    if (dataset !== undefined) this.dataset(analyst, dataset);
    const { rows, earlier } = this.ledger.page(analyst, dataset, before ?? Number.MAX_SAFE_INTEGER, LEDGER_PAGE);
    const entries = rows.map((r) => ({
      seq: r.seq,
      dataset: r.dataset,
      population: r.population,
      digest: r.digest,
      plan: r.plan,
      cost: r.cost,
      total: r.total,
      issuedAt: r.issuedAt,
      receipt: r.receipt,
    }));
    return earlier > 0 ? { entries, earlier } : { entries };
  }

  private async preview(analyst: string, plan: QueryPlan, assumeCount?: number): Promise<Preview> {
    const d = this.dataset(analyst, plan.dataset);
    const { prepared, halfWidths, notes, ratioErrors } = await this.answerer.preview(analyst, plan, assumeCount);
    await this.catchUpTally(analyst, d);
    const { spent, releases } = this.ledger.spent(analyst, d.population);
    const replay = this.ledger.find(analyst, d.population, prepared.digest) !== null;
    return {
      dataset: d.name,
      digest: prepared.digest,
      cost: prepared.cost.toString(),
      unit: prepared.unit,
      halfWidths,
      // The prepared plan is normalized: its confidence is the one the half-widths were computed
      // at, also when it was given only inside an accuracy-first ask.
      confidence: (prepared.plan as QueryPlan).confidence ?? plan.confidence ?? 0.95,
      affordable: replay || spent.add(prepared.cost).le(capOf(d)),
      replay,
      spend: spendSummary(analyst, d, spent, releases, this.pureUpTo(analyst, d, releases)),
      notes,
      ...(ratioErrors !== undefined ? { ratioErrors } : {}),
    };
  }

  /** A stored release again, free. Asked from other code than its receipt names, it carries the
   * curator's signed statement that this code asked again (protocol/reasked.ts). */
  private replayed(analyst: string, d: DatasetPolicy, row: LedgerRow, cell: string | undefined): Release {
    const { reasked: _stored, ...release } = row.release;
    const other = cell !== undefined && cell !== release.receipt.cell;
    const reasked = other ? { reasked: signReasked(release.receipt, cell, this.key) } : {};
    return { ...release, cost: "0", replay: true, spend: this.spendNow(analyst, d), ...reasked };
  }

  /** `cell`: the asking cell's source digest, signed into a new receipt. A replay returns the stored
   * receipt unchanged (the chain cannot be rewritten), so it names the code of the first ask; from
   * other code, the replay adds a signed statement that this code asked again. */
  private async ask(analyst: string, plan: QueryPlan, cell: string | undefined): Promise<Release> {
    const d = this.dataset(analyst, plan.dataset);
    const prepared = await this.askTurns.run(analyst, () => this.answerer.prepare(analyst, plan));
    await this.catchUpTally(analyst, d);
    const earlier = this.ledger.find(analyst, d.population, prepared.digest);
    if (earlier !== null) return this.replayed(analyst, d, earlier, cell);
    const cap = capOf(d);
    // Accuracy first spends only under a bound the analyst (or the policy) set; refused with the price otherwise.
    const unbounded = accuracyFirstRefusal(d, plan.privacy, (prepared.plan as QueryPlan).confidence ?? 0.95, prepared.cost, cap.sub(this.ledger.spent(analyst, d.population).spent));
    if (unbounded !== null) throw unbounded;
    // One lock per account: asks on two datasets of one population queue behind each other.
    return this.lock.run(`${analyst}\u0000${d.population}`, async () => {
      // While this request waited, another one may have released the same plan or spent budget.
      const again = this.ledger.find(analyst, d.population, prepared.digest);
      if (again !== null) return this.replayed(analyst, d, again, cell);
      const before = this.ledger.spent(analyst, d.population);
      if (before.spent.add(prepared.cost).gt(cap)) {
        throw overCapError(analyst, d, prepared.cost, before.spent, before.releases, this.pureUpTo(analyst, d, before.releases));
      }
      // The rule (DEVELOPERS.md, "Answering"): a release is never delivered without a debit, and
      // never debited without being delivered, now or on a replay. compute may be refused (time
      // limit, shutdown) or fail: then nothing was debited. Once it returns, the debit stores the
      // release and its receipt in one transaction before the reply; a reply lost after that is
      // delivered free when the same plan is asked again (the replay lookup above).
      const computed = await prepared.compute();
      const outcome = this.ledger.debit({
        analyst,
        population: d.population,
        dataset: d.name,
        digest: prepared.digest,
        plan: prepared.plan as QueryPlan,
        cost: prepared.cost,
        cap,
        build: (ctx) => {
          const receipt = signReceipt(
            {
              analyst,
              dataset: d.name,
              population: d.population,
              seq: ctx.seq,
              digest: prepared.digest,
              ...(cell !== undefined ? { cell } : {}),
              unit: prepared.unit,
              cost: prepared.cost.toString(),
              total: ctx.total.toString(),
              cap: cap.toString(),
              ...(d.accounting.mode === "zcdp" ? { delta: exactDecimal(d.accounting.delta) } : {}),
              result: receiptResult(computed.rows),
              mechanisms: copyMechanisms(computed.mechanisms),
              issuedAt: ctx.issuedAt,
              prev: ctx.prev,
            },
            this.key,
          );
          const release: Release = {
            dataset: d.name,
            digest: prepared.digest,
            plan: prepared.plan as QueryPlan,
            groupColumns: computed.groupColumns,
            rows: computed.rows,
            confidence: computed.confidence,
            intervalMethod: computed.intervalMethod,
            noiseOnly: true,
            mechanisms: computed.mechanisms,
            cost: prepared.cost.toString(),
            spend: spendSummary(analyst, d, ctx.total, ctx.seq, this.pureAfter(analyst, d, ctx.seq, computed.mechanisms)),
            replay: false,
            receipt,
            notes: [...new Set([...prepared.notes, ...computed.notes])],
          };
          return { release, receipt };
        },
      });
      // Debited, signed and stored: now wait for the reply slot, so only the send follows it.
      await computed.untilReply();
      switch (outcome.kind) {
        case "new":
          return outcome.row.release;
        case "replay":
          return this.replayed(analyst, d, outcome.row, cell);
        case "over-cap":
          // Another curator process on the same ledger spent in the meantime; the noisy answer is dropped unseen.
          throw overCapError(analyst, d, prepared.cost, outcome.spent, outcome.releases, this.pureUpTo(analyst, d, outcome.releases));
      }
    });
  }
}
