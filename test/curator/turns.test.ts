/**
 * Turns (runtime/curator/keyed-lock.ts): the curator's thread shared out per analyst. One task at a
 * time per key, a bound on what one key may hold, and a fresh event-loop turn before each task, so
 * work already queued for one key cannot keep a request that arrives meanwhile from being read.
 */
import { describe, expect, it } from "vitest";
import { BusyError } from "../../runtime/errors.js";
import { Turns } from "../../runtime/curator/keyed-lock.js";

const busy = () => new BusyError("busy");

/** A promise with its resolver outside. */
function gate(): { wait: Promise<void>; open(): void } {
  let open = () => undefined as void;
  const wait = new Promise<void>((r) => (open = r));
  return { wait, open };
}

describe("Turns", () => {
  it("runs one task at a time per key, in arrival order", async () => {
    const turns = new Turns(8, busy);
    const log: string[] = [];
    const g = gate();
    const a = turns.run("ada", async () => {
      log.push("a start");
      await g.wait;
      log.push("a end");
      return 1;
    });
    const b = turns.run("ada", () => {
      log.push("b");
      return 2;
    });
    await new Promise((r) => setTimeout(r, 20));
    expect(log).toEqual(["a start"]);
    expect(turns.size("ada")).toBe(2);
    g.open();
    expect(await a).toBe(1);
    expect(await b).toBe(2);
    expect(log).toEqual(["a start", "a end", "b"]);
    expect(turns.size("ada")).toBe(0);
  });

  it("lets other keys run while one key waits", async () => {
    const turns = new Turns(8, busy);
    const g = gate();
    const slow = turns.run("ada", () => g.wait);
    expect(await turns.run("ben", () => "ben ran")).toBe("ben ran");
    g.open();
    await slow;
  });

  it("refuses past the bound at once, without running the task, and takes work again once drained", async () => {
    const turns = new Turns(3, busy);
    const g = gate();
    let ran = 0;
    const held = [0, 1, 2].map(() =>
      turns.run("ada", async () => {
        ran++;
        await g.wait;
      }),
    );
    let extraRan = false;
    await expect(turns.run("ada", () => (extraRan = true))).rejects.toBeInstanceOf(BusyError);
    expect(extraRan).toBe(false);
    // Another key is not affected by ada's queue.
    expect(await turns.run("ben", () => "ok")).toBe("ok");
    g.open();
    await Promise.all(held);
    expect(ran).toBe(3);
    expect(await turns.run("ada", () => "again")).toBe("again");
  });

  it("a failing task frees its place and does not stop the next", async () => {
    const turns = new Turns(2, busy);
    const first = turns.run("ada", () => {
      throw new Error("planning failed");
    });
    const second = turns.run("ada", () => "next");
    await expect(first).rejects.toThrow("planning failed");
    expect(await second).toBe("next");
    expect(turns.size("ada")).toBe(0);
  });

  it("starts every task on a fresh turn of the event loop: a callback queued meanwhile runs first", async () => {
    const turns = new Turns(8, busy);
    const order: string[] = [];
    // Synchronous tasks, queued back to back: without the fresh turn they would all run in one
    // stretch of microtasks, before the event loop could read anything else.
    const tasks = [0, 1, 2].map((i) => turns.run("ada", () => order.push(`task ${i}`)));
    setImmediate(() => order.push("other request"));
    await Promise.all(tasks);
    expect(order.indexOf("other request")).toBeLessThan(order.indexOf("task 1"));
    expect(order[0]).toBe("other request");
  });
});
