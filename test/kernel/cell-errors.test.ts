/**
 * Mapping a line of the JavaScript tslab makes of a cell back to the cell's own line
 * (kernel/cell-errors.ts sourceLine), on tslab's real converter output. Each case marks one
 * source line with the name `mark`; the JavaScript line holding it must map back to that line.
 */
import { createRequire } from "node:module";
import { afterAll, describe, expect, it } from "vitest";
import { cellFrames, registerCell, sourceLine } from "../../kernel/cell-errors.js";

const require = createRequire(import.meta.url);
const { createConverter } = require("tslab/dist/converter") as typeof import("tslab/dist/converter.js");
const converter = createConverter({ isJS: false, isBrowser: false });
afterAll(() => converter.close());

const jsOf = (code: string): string => {
  const r = converter.convert("declare const visits: any;\n", code);
  if (r.diagnostics.length > 0 || r.output === undefined) throw new Error(`does not compile: ${r.diagnostics.map((d) => d.messageText).join("; ")}`);
  return r.output;
};

const CASES: [string, string][] = [
  ["blank lines dropped by the emitter", "const a = 1;\n\n\nconst mark = a + 1;"],
  ["types emit nothing", "interface P { x: number }\ntype Q = string;\nconst n: number = 1;\nconst mark: Q = 'x';"],
  ["a chain split over lines", 'await visits\n  .by("district")\n  .mean("x", { epsilon: mark() });\nfunction mark() { return 1; }'],
  ["a multi-line object", "const cfg = {\n  a: 1,\n  b: mark(),\n};\nfunction mark() { return 2; }"],
  ["a class method", "class A {\n  f() {\n    return mark();\n  }\n}\nfunction mark() { return 1; }"],
  ["an enum before the line", "enum Color { Red, Green }\nconst c = Color.Red;\nconst mark = c;"],
  ["an import before the line", 'import * as path from "path";\nconst p = path.join("a", "b");\nconst mark = p;'],
  ["the last expression", "const x = 2;\n\nx + mark()\nfunction mark() { return 1; }"],
];

describe("sourceLine: the cell's own line for a line of tslab's JavaScript", () => {
  for (const [name, code] of CASES) {
    it(name, () => {
      const js = jsOf(code);
      const want = code.split("\n").findIndex((l) => /\bmark\b/.test(l) && !l.startsWith("function mark")) + 1;
      // Not tslab's own export lines ("exports.mark = exports.a = void 0;", "exports.mark = mark;").
      const own = (l: string): boolean => !/^exports\.[\w$]+ = (exports\.[\w$]+ = )*(void 0|[\w$]+);$/.test(l.trim()) && !l.startsWith("function mark");
      const jsLine = js.split("\n").findIndex((l) => /\bmark\b/.test(l) && own(l)) + 1;
      expect(jsLine, js).toBeGreaterThan(0);
      expect(sourceLine(code, js, jsLine), js).toBe(want);
    });
  }

  it("leaves the line out when the statements do not line up, rather than guess", () => {
    const code = "namespace N {\n  export const a = 1;\n}\nconst mark = N.a;";
    const js = jsOf(code);
    const jsLine = js.split("\n").findIndex((l) => /^const mark/.test(l)) + 1;
    const line = sourceLine(code, js, jsLine);
    expect(line === null || line === 4).toBe(true);
  });

  it("a frame of a cell's file maps to In [n] and its line; other frames are dropped", () => {
    const code = "const a = 1;\n\nthrow new Error(String(a));";
    const name = registerCell(code, jsOf(code), 12);
    const stack = ["Error: 1", `    at ${name}:5:7`, "    at node:internal/process/task_queues:95:5", "    at file:///x/dist/runtime/api/table.js:10:3"].join("\n");
    expect(cellFrames(stack)).toEqual([{ fn: null, where: "In [12], line 3", text: "throw new Error(String(a));" }]);
  });
});
