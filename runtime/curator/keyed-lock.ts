/**
 * Runs tasks one at a time per key; tasks on different keys run concurrently. The curator keys it by
 * spend account, so the cap check, the noise and the debit of one account never interleave.
 */
export class KeyedLock {
  private readonly tails = new Map<string, Promise<unknown>>();

  async run<T>(key: string, task: () => Promise<T>): Promise<T> {
    const before = this.tails.get(key) ?? Promise.resolve();
    const mine = before.then(task, task);
    const tail = mine.catch(() => undefined);
    this.tails.set(key, tail);
    try {
      return await mine;
    } finally {
      // The last task on a key removes it, so the map holds only keys with work queued.
      if (this.tails.get(key) === tail) this.tails.delete(key);
    }
  }
}

/**
 * Turns per key for work that runs on the curator's own thread (a preview's or an ask's planning):
 * one task at a time per key, at most `maxQueued` running or waiting per key (past that `refuse()`
 * is thrown at once, before any work), and every task starts on a fresh turn of the event loop
 * (setImmediate). A key that always has work queued therefore takes at most one task's worth of
 * the thread between two reads of the socket: other analysts' requests are read and answered in
 * between, instead of waiting behind a whole backlog.
 */
export class Turns {
  private readonly lock = new KeyedLock();
  private readonly queued = new Map<string, number>();

  constructor(
    private readonly maxQueued: number,
    private readonly refuse: () => Error,
  ) {}

  async run<T>(key: string, task: () => Promise<T> | T): Promise<T> {
    const n = this.queued.get(key) ?? 0;
    if (n >= this.maxQueued) throw this.refuse();
    this.queued.set(key, n + 1);
    try {
      return await this.lock.run(key, async () => {
        await new Promise<void>((resolve) => setImmediate(resolve));
        return task();
      });
    } finally {
      const left = (this.queued.get(key) ?? 1) - 1;
      if (left === 0) this.queued.delete(key);
      else this.queued.set(key, left);
    }
  }

  /** Tasks running or waiting for `key` (for tests). */
  size(key: string): number {
    return this.queued.get(key) ?? 0;
  }
}
