/**
 * The kernel's parsing helpers for Jupyter habits, without a kernel: string arguments for name
 * completion, the quick completion path over live values (which must never run cell code), the
 * call finder behind signature help, and the interrupt points added to cell loops (which must not
 * change what a loop computes).
 */
import { runInNewContext } from "node:vm";
import { describe, expect, it } from "vitest";
import { filterNames, lookupPath, MAX_MATCHES, memberNames, quickComplete, stringArgumentAt } from "../../kernel/completion-quick.js";
import { calleePosition } from "../../kernel/inspection-calls.js";
import { INTERRUPT_POINT, withInterruptPoints } from "../../kernel/interrupt-points.js";

describe("stringArgumentAt", () => {
  it("finds the receiver, method and typed prefix of a string argument", () => {
    expect(stringArgumentAt('visits.mean("ag', 15)).toEqual({ receiver: ["visits"], method: "mean", prefix: "ag", start: 13 });
    expect(stringArgumentAt("hush.open('", 11)).toMatchObject({ receiver: ["hush"], method: "open", prefix: "" });
    expect(stringArgumentAt('a.b.groupBy(["x", "d', 20)).toMatchObject({ receiver: ["a", "b"], method: "groupBy", prefix: "d" });
    // Closed string, cursor in the middle.
    expect(stringArgumentAt('t.sum("wait", { epsilon: 1 })', 9)).toMatchObject({ method: "sum", prefix: "wa" });
  });

  it("is null outside strings, on calls without a named receiver, and after a closed string", () => {
    expect(stringArgumentAt("visits.mean(", 12)).toBeNull();
    expect(stringArgumentAt('f("a', 4)).toBeNull();
    expect(stringArgumentAt('(await x()).mean("a', 19)).toBeNull();
    expect(stringArgumentAt('t.mean("a")', 11)).toBeNull();
    expect(stringArgumentAt('const s = "a', 12)).toBeNull();
    expect(stringArgumentAt("", 0)).toBeNull();
    expect(stringArgumentAt('t.mean("a', 99)).toBeNull();
  });
});

describe("the quick path", () => {
  it("lists members of live values and never runs a getter or a proxy trap", () => {
    let ran = 0;
    const obj = Object.create(
      { inherited() {} },
      { plain: { value: 1, enumerable: true }, lazy: { get: () => ((ran += 1), { deep: 1 }), enumerable: true } },
    ) as object;
    const trap = new Proxy({ a: 1 }, { getOwnPropertyDescriptor: () => ((ran += 1), undefined), ownKeys: () => ((ran += 1), []) });
    const scope = { obj, trap };
    expect(quickComplete("obj.", 4, [scope])?.matches).toEqual(["inherited", "lazy", "plain"]);
    expect(quickComplete("obj.lazy.", 9, [scope])).toBeNull(); // would need the getter
    expect(quickComplete("trap.", 5, [scope])?.matches).toEqual([]);
    expect(lookupPath([scope], ["trap", "a"])).toBeUndefined();
    expect(ran).toBe(0);
  });

  it("completes bare names from scopes, keywords and words of the cell itself", () => {
    const r = quickComplete("const completionTarget = 1; completionTa", 40, [{}]);
    expect(r).toEqual({ matches: ["completionTarget"], cursor_start: 28, cursor_end: 40 });
    expect(quickComplete("whi", 3, [{}])?.matches).toContain("while");
    expect(quickComplete("Math.fl", 7, [globalThis])?.matches).toEqual(["floor"]);
  });

  it("stays out of places it cannot judge", () => {
    expect(quickComplete("x[0].", 5, [{ x: [1] }])).toBeNull();
    expect(quickComplete('"abc".', 6, [{}])).toBeNull();
    expect(quickComplete("1.", 2, [{}])).toBeNull();
    expect(quickComplete("", 0, [{}])).toBeNull();
  });

  it("bounds the answer on huge objects", () => {
    const big: Record<string, number> = {};
    for (let i = 0; i < 20_000; i++) big[`k${i}`] = i;
    expect(memberNames(big).length).toBe(5000);
    expect(filterNames(Object.keys(big), "k").length).toBe(MAX_MATCHES);
  });

  it("orders exact-case matches first", () => {
    expect(filterNames(["Age", "age", "agent", "x"], "ag")).toEqual(["age", "agent", "Age"]);
  });
});

describe("calleePosition (signature help)", () => {
  const at = (src: string, pos = src.length) => {
    const p = calleePosition(src, pos);
    return p === null ? null : src.slice(p).match(/^[\w$]+/)?.[0];
  };
  it("names the innermost call whose parentheses hold the cursor", () => {
    expect(at("Math.max(")).toBe("max");
    expect(at("Math.max(1, ")).toBe("max");
    expect(at("f(g(1), ")).toBe("f");
    expect(at("f(g(")).toBe("g");
    expect(at("new Map(")).toBe("Map");
    expect(at('visits.mean("ag')).toBe("mean");
    expect(at("f(1)\n", 3)).toBe("f");
  });
  it("is null outside calls and on a name inside the parentheses", () => {
    expect(at("Math.max")).toBeNull();
    expect(at("f(1)")).toBeNull();
    expect(at("f(abc")).toBeNull();
    expect(at("")).toBeNull();
    expect(calleePosition("f(", 99)).toBeNull();
  });
});

describe("withInterruptPoints", () => {
  const sandbox = (flag: { on: boolean }) => ({
    [INTERRUPT_POINT]: () => {
      if (flag.on) throw new Error("interrupted");
    },
  });
  const run = (js: string, flag = { on: false }) => runInNewContext(withInterruptPoints(js), sandbox(flag)) as unknown;

  it("puts a point in front of every loop body, keeping line numbers", () => {
    const js = "let s = 0;\nfor (let i = 0; i < 3; i++) s += i;\nwhile (s < 10) { s++; }\ndo s--; while (s > 5);\nfor (const k in {a: 1}) s++;\nfor (const v of [1]) s++;";
    const out = withInterruptPoints(js);
    expect(out.split(`${INTERRUPT_POINT}(0);`).length - 1).toBe(5);
    expect(withInterruptPoints("while (a) b();", 7)).toBe(`while (a) {${INTERRUPT_POINT}(7);b();}`);
    expect(out.split("\n").length).toBe(js.split("\n").length);
    expect(withInterruptPoints("const a = 1;")).toBe("const a = 1;");
  });

  it("does not change what loops compute (labels, continue, nesting, single statements)", () => {
    const js = `
      let out = [];
      outer: for (let i = 0; i < 4; i++) for (let j = 0; j < 4; j++) { if (j === 2) continue outer; if (i === 3) break outer; out.push(i * 10 + j); }
      let n = 0; while (n < 5) n++;
      let m = 10; do m -= 3; while (m > 0);
      if (true) for (const c of "ab") out.push(c);
      out.push(n, m);
      out.join(",")`;
    expect(run(js)).toBe(runInNewContext(js));
  });

  it("stops a loop once the flag is raised, even past a try inside the loop", () => {
    const flag = { on: true };
    expect(() => run("for (;;) { try { for (;;) {} } catch { } }", flag)).toThrow("interrupted");
    expect(() => run("let i = 0; while (true) i++;", flag)).toThrow("interrupted");
  });
});
