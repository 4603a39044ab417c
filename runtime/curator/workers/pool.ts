/**
 * A small fixed pool of worker threads for the CPU part of releases (workers/worker.ts). Jobs wait
 * in two queues and go to the first idle worker: a release's before a preview's (a preview's
 * expected ratio error is advice, free; a release holds its analyst's budget lock and its time
 * limit runs while it waits, so a class previewing at once must not make asks run out of time).
 * Each job names its owner (the analyst), and no owner runs on more than `share` workers at once
 * (all but one, with two or more): one analyst's jobs, on several datasets or asks and previews
 * together, cannot hold every worker while others wait; a job past its owner's share waits and
 * the next eligible job, of another owner, takes the worker. With one worker there is no share.
 * Every job has a deadline: if it is still queued or
 * running then, it is refused with a TimeLimitError and a running worker is terminated (the only
 * way to stop synchronous JavaScript) and replaced, so a runaway draw never holds a thread.
 *
 * The pool never touches the ledger: a refused job means the release is dropped before any debit.
 */
import { Worker } from "node:worker_threads";
import { availableParallelism } from "node:os";
import { BadInputError, HushError, TimeLimitError, UnreachableError } from "../../errors.js";
import type { RatioError, ReleaseRow } from "../../protocol/messages.js";
import type { Cpu } from "../aggregates/common.js";
import type { FinisherName } from "../aggregates/finishers.js";
import type { RatioJob } from "../aggregates/ratio-preview.js";
import type { JobMessage, ResultMessage } from "./worker.js";
import { fromWire, toWire } from "./wire.js";

/**
 * The compiled entry. Under vitest this module runs from its .ts source, which a worker thread
 * cannot load, so the built copy in dist/ is used (tests that reach the pool build first).
 */
function entry(): URL {
  const here = new URL(import.meta.url);
  return here.pathname.endsWith(".ts") ? new URL("../../../dist/runtime/curator/workers/worker.js", here) : new URL("./worker.js", here);
}

interface Job {
  msg: JobMessage;
  owner: string;
  resolve(rows: unknown): void;
  reject(e: unknown): void;
  timer: NodeJS.Timeout;
  slot: Slot | null;
}

interface Slot {
  worker: Worker;
  job: Job | null;
}

export function timeLimitText(limitMs: number): string {
  return `this release took longer than the curator's limit of ${limitMs / 1000} s; nothing was spent`;
}

export class WorkerPool {
  private readonly slots: Slot[] = [];
  /** Release jobs, first come first served. */
  private readonly queue: Job[] = [];
  /** Preview jobs ("ratio"), taken only when no release job waits. */
  private readonly later: Job[] = [];
  private nextId = 1;
  private closed = false;
  /** Jobs running per owner (owners with none are absent). */
  private readonly running = new Map<string, number>();

  /** `size` workers (default: the machine's parallelism, at most 4), started now. */
  constructor(size = Math.min(4, Math.max(1, availableParallelism()))) {
    for (let i = 0; i < size; i++) this.slots.push(this.spawn());
  }

  private spawn(): Slot {
    const slot: Slot = { worker: new Worker(entry()), job: null };
    slot.worker.unref(); // an idle pool never keeps the process alive
    slot.worker.on("message", (m: ResultMessage) => this.done(slot, m));
    slot.worker.on("error", (e: unknown) => this.lost(slot, e));
    slot.worker.on("exit", (code: number) => this.lost(slot, new Error(`worker thread exited with code ${code}`)));
    return slot;
  }

  /** Most workers one owner's jobs may hold at once: all but one, or the one. */
  get share(): number {
    return Math.max(1, this.slots.length - 1);
  }

  /**
   * Runs one finisher on a worker for `owner` (the analyst; jobs of one owner share `share`
   * workers); refused with TimeLimitError at `deadlineAt` (performance.now() ms).
   */
  run(name: FinisherName, recipe: unknown, data: unknown, deadlineAt: number, limitMs: number, owner = ""): Promise<ReleaseRow[]> {
    return this.job(name, recipe, data, deadlineAt, limitMs, owner) as Promise<ReleaseRow[]>;
  }

  /** A preview's expected error of a ratio (ratio-preview.ts), on a worker, under the same kind of deadline. */
  async ratioError(job: RatioJob, deadlineAt: number, limitMs: number, owner = ""): Promise<RatioError> {
    return (await this.job("ratio", job, null, deadlineAt, limitMs, owner)) as unknown as RatioError;
  }

  private job(name: JobMessage["name"], recipe: unknown, data: unknown, deadlineAt: number, limitMs: number, owner: string): Promise<unknown> {
    if (this.closed) return Promise.reject(new UnreachableError("the curator is shutting down; nothing was spent"));
    return new Promise<unknown>((resolve, reject) => {
      const msg: JobMessage = { id: this.nextId++, name, recipe: toWire(recipe), data: toWire(data) };
      const job: Job = { msg, owner, resolve, reject, slot: null, timer: setTimeout(() => this.expire(job, limitMs), Math.max(0, deadlineAt - performance.now())) };
      (name === "ratio" ? this.later : this.queue).push(job);
      this.dispatch();
    });
  }

  /** A Cpu whose finishers run on this pool under one deadline, for `owner`. */
  cpu(deadlineAt: number, limitMs: number, owner = ""): Cpu {
    return { finish: (name, recipe, data) => this.run(name, recipe, data, deadlineAt, limitMs, owner) };
  }

  /** Owners of the running jobs, one entry per busy worker (for tests). */
  busy(): string[] {
    return this.slots.flatMap((s) => (s.job === null ? [] : [s.job.owner]));
  }

  /** Takes the first job of `queue` whose owner is below its share, or null. */
  private eligible(queue: Job[]): Job | null {
    const share = this.share;
    const i = queue.findIndex((j) => (this.running.get(j.owner) ?? 0) < share);
    return i < 0 ? null : queue.splice(i, 1)[0];
  }

  private dispatch(): void {
    for (const slot of this.slots) {
      if (this.queue.length === 0 && this.later.length === 0) return;
      if (slot.job !== null) continue;
      const job = this.eligible(this.queue) ?? this.eligible(this.later);
      if (job === null) return; // every waiting job's owner holds its share; a finishing job dispatches again
      job.slot = slot;
      slot.job = job;
      this.running.set(job.owner, (this.running.get(job.owner) ?? 0) + 1);
      slot.worker.ref(); // a running job keeps the process alive until it settles
      slot.worker.postMessage(job.msg);
    }
  }

  private finish(slot: Slot): Job | null {
    const job = slot.job;
    slot.job = null;
    slot.worker.unref();
    if (job !== null) {
      clearTimeout(job.timer);
      const left = (this.running.get(job.owner) ?? 1) - 1;
      if (left === 0) this.running.delete(job.owner);
      else this.running.set(job.owner, left);
    }
    return job;
  }

  private done(slot: Slot, m: ResultMessage): void {
    const job = this.finish(slot);
    if (job === null) return;
    if (job.msg.id !== m.id) job.reject(new Error(`internal: worker answered job ${m.id} while running job ${job.msg.id}`));
    else if (m.ok) job.resolve(fromWire(m.rows));
    else if (m.kind === "bad-input") job.reject(new BadInputError(m.message));
    else if (m.kind !== null) job.reject(new HushError("internal", m.message));
    else job.reject(new Error(`worker: ${m.message}`));
    this.dispatch();
  }

  /** The worker died (error or exit we did not ask for): fail its job, put a fresh worker in its place. */
  private lost(slot: Slot, e: unknown): void {
    const i = this.slots.indexOf(slot);
    if (i < 0) return; // already replaced (terminated by expire or close)
    const job = this.finish(slot);
    this.slots.splice(i, 1);
    if (!this.closed) this.slots.push(this.spawn());
    job?.reject(e);
    this.dispatch();
  }

  private expire(job: Job, limitMs: number): void {
    const slot = job.slot;
    if (slot === null) {
      for (const queue of [this.queue, this.later]) {
        const q = queue.indexOf(job);
        if (q >= 0) queue.splice(q, 1);
      }
    } else {
      this.finish(slot);
      this.slots.splice(this.slots.indexOf(slot), 1);
      void slot.worker.terminate();
      if (!this.closed) this.slots.push(this.spawn());
    }
    job.reject(new TimeLimitError(timeLimitText(limitMs)));
    this.dispatch();
  }

  /** Terminates every worker; queued and running jobs are refused (nothing of theirs is debited). */
  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    const gone = new UnreachableError("the curator is shutting down; nothing was spent");
    for (const job of [...this.queue.splice(0), ...this.later.splice(0)]) {
      clearTimeout(job.timer);
      job.reject(gone);
    }
    const slots = this.slots.splice(0);
    for (const s of slots) this.finish(s)?.reject(gone);
    await Promise.all(slots.map((s) => s.worker.terminate()));
  }
}
