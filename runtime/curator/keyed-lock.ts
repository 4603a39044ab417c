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
