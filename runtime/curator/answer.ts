/**
 * Answering a query plan: validate it against the dataset's public schema, settle the noise and
 * the exact cost (prepare: reads no data), then run the SQL and add the noise (compute).
 *
 * The service (service.ts) calls prepare, checks the budget, calls compute, then debits and
 * replies. compute asks the data engine (engines/types.ts; it works on its own threads or server, so the message
 * loop is free meanwhile) and the CPU part (noise, intervals, the quantile draw) on the worker pool
 * (workers/), under the policy's time limit; the result carries its reply slot
 * (workers/pacing.ts, untilReply), which the service waits for after the debit and just before
 * the reply, so the time to answer does not follow the data. Nothing here refuses based
 * on data: every declared key is released, the number of released rows is fixed by the plan and
 * the policy, and a mean with a non-positive noisy count is released as unavailable rather than
 * refused.
 */
import { BadInputError, TimeLimitError, UnauthorizedError, UnknownDatasetError, UnreachableError } from "../errors.js";
import { Rational } from "../core/index.js";
import type { Bits } from "../core/index.js";
import { createHash } from "node:crypto";
import { canonicalJson } from "../protocol/canonical.js";
import type { ColumnInfo, DatasetInfo, GroupKey, MechanismRecord, Preview, QueryPlan, RatioError, ReleaseRow } from "../protocol/messages.js";
import { PLAN_LIMITS } from "../protocol/limits.js";
import { parsePlan } from "../protocol/schema.js";
import { countPiece, meanPiece, spreadPiece, sumPiece } from "./aggregates/additive.js";
import { Allocator } from "./aggregates/budget.js";
import type { Piece, Source } from "./aggregates/common.js";
import { clampedPiece } from "./aggregates/clamped.js";
import { describePiece } from "./aggregates/describe.js";
import { onThisThread } from "./aggregates/finishers.js";
import { quantilePiece } from "./aggregates/quantile.js";
import { correlationPiece, regressionPiece } from "./aggregates/regression.js";
import { type RatioJob, wholeRange } from "./aggregates/ratio-preview.js";
import { type DataEngine, type DatasetSchema, type SchemaColumn, schemaOf } from "./engines/types.js";
import type { DatasetPolicy, LoadedPolicy } from "./policy.js";
import { checkWhere, resolveColumn } from "./sql.js";
import { firstSlot, holdUntilSlot } from "./workers/pacing.js";
import { WorkerPool, timeLimitText } from "./workers/pool.js";

export interface PreparedAsk {
  dataset: string;
  /** digestOf(normalized plan) */
  digest: string;
  /** The plan with defaults filled in. */
  plan: QueryPlan;
  unit: "epsilon" | "rho";
  cost: Rational;
  notes: string[];
  /**
   * Reads the data and draws the noise. Without `bits`: on the worker pool with the CSPRNG, under
   * the time limit, with its reply slot to wait for (production). With `bits`: on this thread with those
   * bits, unpaced (tests that need reproducible noise).
   */
  compute(bits?: Bits): Promise<ComputedRelease>;
}

export interface ComputedRelease {
  groupColumns: string[];
  rows: ReleaseRow[];
  confidence: number;
  intervalMethod: string;
  mechanisms: MechanismRecord[];
  notes: string[];
  /**
   * Waits for the release's reply slot (workers/pacing.ts); resolves at once when unpaced. The
   * service calls it after the debit and the signing, just before the reply leaves, so the only
   * work after the slot is sending: nothing that varies with the answer runs past it.
   */
  untilReply(): Promise<void>;
}

export const DEFAULT_CONFIDENCE = 0.95;

/** untilReply of an unpaced release (one function, so two such releases compare equal). */
const noWait = async (): Promise<void> => undefined;

function shown(name: string): string {
  return JSON.stringify(name.length > 40 ? `${name.slice(0, 40)}...` : name);
}

/** Fills defaults so the same question always has the same digest. */
function normalize(plan: QueryPlan): QueryPlan {
  const pc = "within" in plan.privacy ? plan.privacy.confidence : undefined;
  if (pc !== undefined && plan.confidence !== undefined && pc !== plan.confidence) {
    throw new BadInputError("plan.privacy.confidence: differs from plan.confidence; give one confidence");
  }
  const confidence = plan.confidence ?? pc ?? DEFAULT_CONFIDENCE;
  // atMost bounds what the ask may spend; it is not part of the question (the digest, the release).
  const privacy = "within" in plan.privacy ? { within: plan.privacy.within, confidence } : plan.privacy;
  const out: QueryPlan = { v: plan.v, dataset: plan.dataset, measure: plan.measure, privacy, confidence };
  if (plan.where !== undefined) out.where = plan.where;
  if (plan.groupBy !== undefined) out.groupBy = plan.groupBy;
  return out;
}

function numericColumn(t: DatasetSchema, name: string, path: string, what: string): SchemaColumn {
  const col = resolveColumn(t, name, path);
  if (col.policy.type !== "integer" && col.policy.type !== "number") {
    throw new BadInputError(`${path}: ${what} needs a numeric column; ${shown(name)} is ${col.policy.type}`);
  }
  return col;
}

function keyedColumn(t: DatasetSchema, name: string, path: string): void {
  const col = resolveColumn(t, name, path);
  if (col.policy.type !== "category" && col.policy.type !== "boolean") {
    throw new BadInputError(`${path}: crosstab needs category or boolean columns; ${shown(name)} is ${col.policy.type}`);
  }
}

/** Declared values of a key from the policy alone (no label is built); 1 for a key that compileGroup will refuse. */
function keySize(t: DatasetSchema, key: GroupKey): number {
  const c = t.columns.get(key.column)?.policy;
  if (c === undefined) return 1;
  if (c.type === "category") return c.values.length;
  if (c.type === "boolean") return 2;
  if ((c.type === "integer" || c.type === "number") && "bins" in key) return key.bins;
  return 1;
}

/**
 * Refuses a plan that declares more cells than PLAN_LIMITS.maxCells, from the key sizes alone and
 * before any label, cell array or SQL exists: every declared cell is released, so the product of
 * the key sizes is the work, the memory and the size of the reply.
 */
function checkCells(plan: QueryPlan, t: DatasetSchema): void {
  const m = plan.measure;
  let cells: number;
  let path: string;
  if (m.kind === "histogram") {
    cells = m.bins;
    path = "plan.measure.bins";
  } else if (m.kind === "crosstab") {
    cells = keySize(t, { column: m.rows }) * keySize(t, { column: m.cols });
    path = "plan.measure";
  } else if (m.kind === "describe") {
    // the row count, then per numeric column mean, std and median, per keyed column its values
    cells = 1;
    for (const c of t.columns.values()) {
      const p = c.policy;
      if (p.type === "integer" || p.type === "number") cells += 3 + (m.clamped ? 5 : 0); // + clamped shares (§21)
      else if (p.type === "category" || p.type === "boolean") cells += keySize(t, { column: p.name });
    }
    path = "plan.measure";
  } else if (m.kind === "clamped") {
    cells = 5 * m.columns.length;
    path = "plan.measure.columns";
  } else {
    cells = (plan.groupBy ?? []).reduce((n, k) => n * keySize(t, k), 1);
    path = "plan.groupBy";
  }
  if (cells > PLAN_LIMITS.maxCells) {
    throw new BadInputError(`${path}: declares ${cells} cells (the product of the key sizes), above the curator's limit of ${PLAN_LIMITS.maxCells} (maxCells)`);
  }
}

const ACCURACY_FIRST = new Set(["count", "sum", "histogram", "crosstab"]);
const GROUPABLE = new Set(["count", "sum", "mean", "variance", "std"]);

/** Plans kept by Answerer's memo. */
const MEMO_SIZE = 256;

/** What a plan settles to before any data is read (memoised per canonical plan). */
interface Settled {
  plan: QueryPlan;
  d: DatasetPolicy;
  digest: string;
  unit: "epsilon" | "rho";
  piece: Piece;
  groupColumns: string[];
  notes: string[];
}

export class Answerer {
  private readonly memo = new Map<string, Settled>();
  private readonly schemas = new Map<string, DatasetSchema>();
  private readonly engine: DataEngine;
  private readonly policy: LoadedPolicy;
  /** Started on the first release; closed with close(). */
  private pool: WorkerPool | null = null;
  private closed = false;

  constructor(engine: DataEngine, policy: LoadedPolicy) {
    this.engine = engine;
    this.policy = policy;
  }

  /** Starts the worker pool now (the curator does, so its first release does not wait for threads to load). */
  startWorkers(): WorkerPool {
    this.pool ??= new WorkerPool();
    return this.pool;
  }

  /** Stops the worker pool: releases still computing are refused (and so never debited). */
  async close(): Promise<void> {
    this.closed = true;
    await this.pool?.close();
  }

  /**
   * One release's data and noise on the pool, under the time limit, with its reply slot (measured
   * from the start of this work) for the caller to wait for.
   * The limit covers the engine's work too: a statement is not stopped from here, so a late one is
   * left to finish in the engine and its result dropped; a late CPU part is stopped with its worker.
   */
  private async onPool(piece: Piece, analyst: string): Promise<{ rows: ReleaseRow[]; untilReply: () => Promise<void> }> {
    const { timeLimitMs, paceMs } = this.policy.answering;
    const started = performance.now();
    if (this.closed) throw new UnreachableError("the curator is shutting down; nothing was spent");
    const pool = this.startWorkers();
    let timer: NodeJS.Timeout | undefined;
    const limit = new Promise<never>((_, reject) => {
      timer = setTimeout(() => reject(new TimeLimitError(timeLimitText(timeLimitMs))), timeLimitMs);
    });
    const work = piece.run(this.engine, pool.cpu(started + timeLimitMs, timeLimitMs, analyst));
    // If the limit wins the race, the work's own later failure (its pool job refused at the same
    // deadline, or a dropped query) has nobody left to tell: the refusal was already sent.
    work.catch(() => undefined);
    try {
      const rows = await Promise.race([work, limit]);
      return { rows, untilReply: () => holdUntilSlot(started, firstSlot(paceMs, piece.steps, piece.size), timeLimitMs) };
    } finally {
      clearTimeout(timer);
    }
  }

  /**
   * A preview's expected error of a ratio, on the worker pool under the answering time limit: its
   * exact interval searches can take a few hundred milliseconds, which the curator's loop must not.
   */
  private async ratioOnPool(job: RatioJob, analyst: string): Promise<RatioError> {
    if (this.closed) throw new UnreachableError("the curator is shutting down");
    const { timeLimitMs } = this.policy.answering;
    return this.startWorkers().ratioError(job, performance.now() + timeLimitMs, timeLimitMs, analyst);
  }

  private dataset(name: string): DatasetPolicy {
    const d = this.policy.datasets.get(name);
    if (d === undefined || !this.engine.hasDataset(name)) throw new UnknownDatasetError(`no dataset named ${shown(name)}`);
    return d;
  }

  /** The public schema of an open dataset (built once per dataset). */
  private schema(d: DatasetPolicy): DatasetSchema {
    let s = this.schemas.get(d.name);
    if (s === undefined) {
      s = schemaOf(d);
      this.schemas.set(d.name, s);
    }
    return s;
  }

  /** Public schema of a dataset, in declaration order; the unit column is not part of it. */
  datasetColumns(dataset: string): ColumnInfo[] {
    return this.dataset(dataset).columns.map((c): ColumnInfo => {
      switch (c.type) {
        case "integer":
        case "number":
          return { name: c.name, type: c.type, lower: c.lower, upper: c.upper, step: c.step };
        case "category":
          return { name: c.name, type: "category", values: c.values.slice() };
        case "date":
          return { name: c.name, type: "date", lower: c.lower, upper: c.upper };
        case "boolean":
          return { name: c.name, type: "boolean" };
      }
    });
  }

  describeUnit(dataset: string): DatasetInfo["unit"] {
    const u = this.dataset(dataset).unit;
    return { column: u.column, maxRows: u.maxRows, maxGroups: u.maxGroups };
  }

  /**
   * The data-free result of a normalized plan, memoised by its canonical JSON (a bounded LRU):
   * a repeated plan (a replay, a preview followed by its ask) skips planning in exact rationals,
   * the sha256 digest and the notes. The entry depends only on the plan and the policy, both
   * immutable here; authorization is checked on every call, outside the memo.
   */
  private settle(plan: QueryPlan): Settled {
    const canon = canonicalJson(plan);
    const hit = this.memo.get(canon);
    if (hit !== undefined) {
      this.memo.delete(canon); // re-inserted: Map order is least recently used first
      this.memo.set(canon, hit);
      return hit;
    }
    const d = this.dataset(plan.dataset);
    const t = this.schema(d);
    const src: Source = { t, where: plan.where };
    checkWhere(plan.where, t); // validates every literal against the schema
    const alloc = new Allocator(d, plan.privacy, plan.confidence ?? DEFAULT_CONFIDENCE);
    const { piece, groupColumns, columnsUsed } = this.build(plan, src, alloc);
    const notes = this.commonNotes(d, t, plan, columnsUsed, alloc, piece);
    // Same bytes as digestOf(plan): sha256 hex of the canonical JSON, computed once here.
    const digest = createHash("sha256").update(canon).digest("hex");
    const entry: Settled = { plan, d, digest, unit: alloc.unit, piece, groupColumns, notes };
    if (this.memo.size >= MEMO_SIZE) this.memo.delete(this.memo.keys().next().value!);
    this.memo.set(canon, entry);
    return entry;
  }

  /** Validates the plan and settles noise and cost. Reads no data. */
  prepare(analyst: string, raw: unknown): PreparedAsk {
    const plan = normalize(parsePlan(raw));
    const d = this.dataset(plan.dataset);
    if (!d.analysts.includes(analyst)) throw new UnauthorizedError(`analyst ${shown(analyst)} may not query dataset ${d.name}`);
    const s = this.settle(plan);
    const engine = this.engine;
    const onPool = (p: Piece) => this.onPool(p, analyst);
    const { piece, groupColumns, notes } = s;
    const mechanisms = piece.mechanisms;
    const confidence = plan.confidence ?? DEFAULT_CONFIDENCE;
    return {
      dataset: s.d.name,
      digest: s.digest,
      plan,
      unit: s.unit,
      cost: piece.cost,
      notes: notes.slice(),
      async compute(bits?: Bits): Promise<ComputedRelease> {
        const { rows, untilReply } = bits === undefined ? await onPool(piece) : { rows: await piece.run(engine, onThisThread(bits)), untilReply: noWait };
        if (rows.length !== piece.size) throw new Error("internal: released row count differs from the declared size");
        return { groupColumns: groupColumns.slice(), rows, confidence, intervalMethod: piece.methods.join("; "), mechanisms: mechanisms.map((m) => ({ ...m })), notes: notes.slice(), untilReply };
      },
    };
  }

  /**
   * prepare plus the expected half-widths; reads no data and spends nothing. For a mean, variance
   * or std, also the expected error of the estimate itself for an assumed count of values per group
   * (`assumeCount`, else the policy's `sizeHint` for an ungrouped plan; ratio-preview.ts).
   */
  async preview(
    analyst: string,
    raw: unknown,
    assumeCount?: number,
  ): Promise<{ prepared: PreparedAsk; halfWidths: Preview["halfWidths"]; notes: string[]; ratioErrors?: RatioError[] }> {
    const prepared = this.prepare(analyst, raw);
    const { piece, d } = this.settle(prepared.plan);
    const extra = (piece.previewNotes ?? []).filter((n) => !prepared.notes.includes(n));
    const out = { prepared, halfWidths: piece.halfWidths.map((h) => ({ ...h })), notes: [...prepared.notes, ...extra] };
    const shape = piece.ratioShape;
    if (shape === undefined) return out;
    const grouped = (prepared.plan.groupBy ?? []).length > 0;
    const hint = !grouped && d.sizeHint !== undefined ? d.sizeHint : undefined;
    const count = assumeCount ?? hint;
    if (count === undefined) {
      out.notes.push(
        `For the expected error of the ${shape.stat} itself, preview again with an assumed count of values${grouped ? " per group" : ""}, e.g. { epsilon: ..., assumeCount: 1000 }: the figure needs a count, and the true one is private.`,
      );
      return out;
    }
    const ratio = await this.ratioOnPool({ shape, count, from: assumeCount !== undefined ? "analyst" : "policy" }, analyst);
    // The parts-only explanation (previewNotes) gives way to what the figure assumes.
    out.notes = [...prepared.notes];
    out.notes.push(
      `The ${shape.stat}'s expected error assumes ${count} values${grouped ? " per group" : ""} (${assumeCount !== undefined ? "your assumption" : "the steward's public size hint"}), not the data's count: it is the half-width the release would compute if its noisy parts matched that assumption (docs/methods.md §8). The release states its own.`,
    );
    if (Rational.parse(ratio.typical).ge(wholeRange(shape))) {
      out.notes.push(`With ${count} value${count === 1 ? "" : "s"} the ${shape.stat}'s interval would be the whole declared range: the noise outweighs that count. Assume more values (a coarser grouping) or spend more.`);
    }
    return { ...out, ratioErrors: [ratio] };
  }

  private build(plan: QueryPlan, src: Source, alloc: Allocator): { piece: Piece; groupColumns: string[]; columnsUsed: string[] } {
    const m = plan.measure;
    const t = src.t;
    const keys: GroupKey[] = plan.groupBy ?? [];
    if (keys.length > 0 && !GROUPABLE.has(m.kind)) {
      throw new BadInputError(`plan.groupBy: ${m.kind} cannot be grouped (group count, sum, mean, variance or std)`);
    }
    if (alloc.accuracyFirst && !ACCURACY_FIRST.has(m.kind)) {
      throw new BadInputError(`plan.privacy.within: accuracy-first asks apply to count, sum, histogram and crosstab; ask for ${m.kind} with epsilon or rho`);
    }
    const seen = new Set<string>();
    keys.forEach((k, i) => {
      if (seen.has(k.column)) throw new BadInputError(`plan.groupBy[${i}]: groups by the same column twice`);
      seen.add(k.column);
    });
    const groupColumns = keys.map((k) => k.column);
    checkCells(plan, t);
    const one = Rational.ONE;
    switch (m.kind) {
      case "count":
        return { piece: countPiece(alloc, src, keys, one), groupColumns, columnsUsed: groupColumns };
      case "sum": {
        const col = numericColumn(t, m.column, "plan.measure.column", "sum");
        return { piece: sumPiece(alloc, src, keys, col, one), groupColumns, columnsUsed: [...groupColumns, m.column] };
      }
      case "mean": {
        const col = numericColumn(t, m.column, "plan.measure.column", "mean");
        return { piece: meanPiece(alloc, src, keys, col, one), groupColumns, columnsUsed: [...groupColumns, m.column] };
      }
      case "variance":
      case "std": {
        const col = numericColumn(t, m.column, "plan.measure.column", m.kind);
        return { piece: spreadPiece(alloc, src, keys, col, one, m.kind), groupColumns, columnsUsed: [...groupColumns, m.column] };
      }
      case "quantile": {
        const col = numericColumn(t, m.column, "plan.measure.column", "a quantile");
        if (new Set(m.p).size !== m.p.length) throw new BadInputError("plan.measure.p: lists the same probability twice");
        return { piece: quantilePiece(alloc, src, col, m.p, one), groupColumns: [], columnsUsed: [m.column] };
      }
      case "histogram": {
        numericColumn(t, m.column, "plan.measure.column", "a histogram");
        const piece = countPiece(alloc, src, [{ column: m.column, bins: m.bins }], one);
        return { piece, groupColumns: [m.column], columnsUsed: [m.column] };
      }
      case "crosstab": {
        keyedColumn(t, m.rows, "plan.measure.rows");
        keyedColumn(t, m.cols, "plan.measure.cols");
        if (m.rows === m.cols) throw new BadInputError("plan.measure.cols: must differ from rows");
        const piece = countPiece(alloc, src, [{ column: m.rows }, { column: m.cols }], one);
        return { piece, groupColumns: [m.rows, m.cols], columnsUsed: [m.rows, m.cols] };
      }
      case "describe":
        return { piece: describePiece(alloc, src, m.clamped === true), groupColumns: ["value"], columnsUsed: [...t.columns.keys()] };
      case "regression": {
        const piece = regressionPiece(alloc, src, m.response, m.predictors, m.reference ?? []);
        return { piece, groupColumns: ["term"], columnsUsed: [m.response, ...m.predictors] };
      }
      case "correlation":
        return { piece: correlationPiece(alloc, src, m.columns), groupColumns: ["column", "with"], columnsUsed: [...m.columns] };
      case "clamped": {
        // Clamped shares (aggregates/clamped.ts, docs/methods.md §21).
        if (new Set(m.columns).size !== m.columns.length) throw new BadInputError("plan.measure.columns: lists the same column twice");
        const cols = m.columns.map((c, i) => numericColumn(t, c, `plan.measure.columns[${i}]`, "clamped shares"));
        return { piece: clampedPiece(alloc, src, cols, one), groupColumns: [], columnsUsed: m.columns.slice() };
      }
    }
  }

  private commonNotes(d: DatasetPolicy, t: DatasetSchema, plan: QueryPlan, used: string[], alloc: Allocator, piece: Piece): string[] {
    const conf = plan.confidence ?? DEFAULT_CONFIDENCE;
    const notes = [
      `Error bars are noise-only at ${conf} confidence: they cover the privacy noise, not clamping, grid rounding, dropped rows or sampling error.`,
    ];
    if (t.hasUnit) {
      notes.push(
        `Privacy unit ${d.unit.column}: each unit contributes at most ${d.unit.maxRows} row${d.unit.maxRows === 1 ? "" : "s"} (chosen at random when it has more), so estimates are over kept rows.`,
      );
    } else {
      notes.push("Each row is its own privacy unit.");
    }
    for (const name of new Set(used)) {
      const c = t.columns.get(name)?.policy;
      if (c !== undefined && (c.type === "integer" || c.type === "number")) {
        notes.push(`Values of ${c.name} are clamped to [${c.lower}, ${c.upper}] and rounded to steps of ${c.step}.`);
      }
    }
    if (plan.where !== undefined) notes.push("Filters compare numeric values after clamping and rounding to the declared grid.");
    notes.push(...alloc.notes);
    for (const n of piece.notes) if (!notes.includes(n)) notes.push(n);
    return notes;
  }
}
