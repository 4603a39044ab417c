/**
 * Top-level await in cells, in-process through the execution hook (no sockets, no curator).
 * Regression: tslab 1.0.22 ran cells whose only awaits TypeScript had re-parsed (`await (x)`,
 * `for await`) in a plain function, where they failed with "SyntaxError: missing ) after argument
 * list". Expected values follow the ECMAScript semantics of `await` and `for await` (ECMA-262,
 * AwaitExpression and ForIn/OfStatement), which are plain arithmetic here.
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { createExecution, type Execution, type RunOutcome } from "../../kernel/execution.js";
import { hasTopLevelAwait } from "../../kernel/top-level-await.js";

describe("hasTopLevelAwait", () => {
  it("finds awaits the parser would otherwise read as a call of `await`", () => {
    expect(hasTopLevelAwait("exports.x = await (await p).q() + 1;")).toBe(true);
    expect(hasTopLevelAwait("const x = await (p);")).toBe(true);
    expect(hasTopLevelAwait("for await (const v of xs) s += v;")).toBe(true);
    expect(hasTopLevelAwait("exports.t = `a${await (p)}b`;")).toBe(true);
    expect(hasTopLevelAwait("if (c) { y = Math.max(await a, await b); }")).toBe(true);
  });

  it("ignores awaits inside functions and classes, and code without the keyword", () => {
    expect(hasTopLevelAwait("const f = async () => await (p);")).toBe(false);
    expect(hasTopLevelAwait("async function g() { for await (const v of xs) {} }")).toBe(false);
    expect(hasTopLevelAwait("class C { async m() { return await (p); } }")).toBe(false);
    expect(hasTopLevelAwait("const awaitable = 1; // await later")).toBe(false);
  });
});

describe("cells with top-level await", () => {
  let ex: Execution;
  beforeAll(() => {
    // A stand-in for the bench's `await (await hush.open("bench")).count(...)`: two async steps.
    const store = {
      open: async (name: string) => ({ count: async (opts: { epsilon: string }) => `${name}:${opts.epsilon}:41` }),
    };
    ex = createExecution({
      rootDir: process.cwd(),
      globals: { store },
      declarations: "declare const store: { open(name: string): Promise<{ count(o: { epsilon: string }): Promise<string> }> };",
    });
  });
  afterAll(() => ex?.close());

  const value = (r: RunOutcome): unknown => {
    if (r.status !== "ok") throw new Error(`${r.ename}: ${r.evalue}`);
    return r.value;
  };

  it("awaits a method of an awaited value as the cell's value", async () => {
    expect(value(await ex.run("await (await Promise.resolve({ f: async () => 41 })).f() + 1"))).toBe(42);
    expect(value(await ex.run('await (await store.open("bench")).count({ epsilon: "0.1" })'))).toBe("bench:0.1:41");
  });

  it("keeps a const bound to a nested await for later cells", async () => {
    expect((await ex.run("const tlaP = Promise.resolve({ q: async () => 3 }); const tlaX = await (await tlaP).q()")).status).toBe("ok");
    expect(value(await ex.run("tlaX * 2"))).toBe(6);
    // The language service typed it as number, so completion offers number methods.
    expect((await ex.complete("tlaX.toFi", 9)).matches).toContain("toFixed");
  });

  it("runs for await, awaits in template literals and in call arguments", async () => {
    expect(value(await ex.run("let tlaSum = 0; for await (const v of [Promise.resolve(1), 2]) tlaSum += v; tlaSum"))).toBe(3);
    expect(value(await ex.run("`a${await (Promise.resolve(2))}b`"))).toBe("a2b");
    expect(value(await ex.run("Math.max(await (Promise.resolve(4)), await Promise.resolve(5))"))).toBe(5);
    expect(value(await ex.run("await (1)"))).toBe(1);
  });

  it("still reports a rejected await as the cell's error", async () => {
    const r = await ex.run('await (Promise.reject(new RangeError("no such dataset")))');
    expect(r).toMatchObject({ status: "error", ename: "RangeError", evalue: "no such dataset" });
  });
});
