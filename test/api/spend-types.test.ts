/**
 * "Types that catch mistakes" (issue 11): a privacy parameter that is not number-shaped is a type
 * error in the cell, while exact decimal and fraction strings stay allowed. Checked with the
 * TypeScript compiler itself, on both the cells' declaration (what the kernel's language service
 * sees) and the runtime API's own types (runtime/api/privacy.ts, from which the declaration is to be
 * generated), so the two cannot disagree. The runtime check behind the types is tested too: a
 * string that passes the type (`"1e999"`, `"0"`) is still refused when the cell runs.
 */
import ts from "typescript";
import { join, resolve } from "node:path";
import { describe, expect, test } from "vitest";
import { hushDeclarations } from "../../runtime/api/declarations.js";
import { exactPositive, privacyAsk } from "../../runtime/api/privacy.js";

const ROOT = resolve(import.meta.dirname, "../..");

/** Type errors of a cell against the declaration given to the kernel's language service. */
function cellErrors(cell: string): string[] {
  const files: Record<string, string> = { "/hush.d.ts": hushDeclarations(), "/cell.ts": `${cell}\nexport {};\n` };
  const options: ts.CompilerOptions = { strict: true, target: ts.ScriptTarget.ES2022, module: ts.ModuleKind.ES2022, lib: ["lib.es2022.d.ts"], types: [], noEmit: true };
  const host = ts.createCompilerHost(options);
  const read = host.getSourceFile.bind(host);
  host.getSourceFile = (name, lang) => (name in files ? ts.createSourceFile(name, files[name], lang) : read(name, lang));
  host.fileExists = (name) => name in files || ts.sys.fileExists(name);
  host.readFile = (name) => files[name] ?? ts.sys.readFile(name);
  return ts.getPreEmitDiagnostics(ts.createProgram(Object.keys(files), options, host)).map((d) => ts.flattenDiagnosticMessageText(d.messageText, "\n"));
}

/** Type errors of code that imports the runtime API's own types. */
function runtimeErrors(code: string): string[] {
  const file = join(ROOT, "test", "api", "__spend-types-probe.ts");
  const text = `import type { SpendOptions } from "../../runtime/api/privacy.js";\nimport type { HistogramOptions as H } from "../../runtime/api/aggregates.js";\n${code}\nexport {};\n`;
  const options: ts.CompilerOptions = { strict: true, target: ts.ScriptTarget.ES2022, module: ts.ModuleKind.NodeNext, moduleResolution: ts.ModuleResolutionKind.NodeNext, types: ["node"], noEmit: true, skipLibCheck: true };
  const host = ts.createCompilerHost(options);
  const read = host.getSourceFile.bind(host);
  host.getSourceFile = (name, lang) => (name === file ? ts.createSourceFile(name, text, lang) : read(name, lang));
  host.fileExists = (name) => name === file || ts.sys.fileExists(name);
  host.readFile = (name) => (name === file ? text : ts.sys.readFile(name));
  return ts
    .getPreEmitDiagnostics(ts.createProgram([file], options, host))
    .filter((d) => d.file?.fileName === file)
    .map((d) => ts.flattenDiagnosticMessageText(d.messageText, "\n"));
}

const GOOD = [
  `{ epsilon: 0.1 }`,
  `{ epsilon: "0.1" }`,
  `{ epsilon: "1e-3" }`,
  `{ epsilon: "1/3" }`,
  `{ rho: "0.005", confidence: 0.9 }`,
  `{ within: 25, atMost: 0.5 }`,
  `{ within: 25, atMost: "1/2", confidence: 0.99 }`,
  `{ within: 25 }`,
];
const BAD = [
  [`{ epsilon: "lots" }`, /"lots"/],
  [`{ epsilon: "0.1 please" }`, /0\.1 please/],
  [`{ rho: "a/b" }`, /a\/b/],
  [`{ within: 25, atMost: "plenty" }`, /plenty/],
  [`{ within: "25" }`, /string/],
  [`{ epsilon: true }`, /true/],
] as const;

describe("privacy parameters are typed", () => {
  test.each(GOOD)("the cell declaration accepts %s", (opts) => {
    expect(cellErrors(`const v = await hush.open("visits"); await v.count(${opts});`)).toEqual([]);
  });
  test.each(BAD)("the cell declaration refuses %s", (opts, msg) => {
    const errs = cellErrors(`const v = await hush.open("visits"); await v.count(${opts});`);
    expect(errs.length).toBeGreaterThan(0);
    expect(errs.join("\n")).toMatch(msg);
  });
  test("the runtime API's types accept every one of those", () => {
    expect(runtimeErrors(GOOD.map((opts, i) => `const s${i}: SpendOptions = ${opts}; const h${i}: H = { bins: 3, ...${opts} }; void [s${i}, h${i}];`).join("\n"))).toEqual([]);
  });
  test.each(BAD)("the runtime API's types refuse %s", (opts, msg) => {
    const errs = runtimeErrors(`const s: SpendOptions = ${opts}; void s;`);
    expect(errs.length).toBeGreaterThan(0);
    expect(errs.join("\n")).toMatch(msg);
  });
});

describe("the runtime check behind the types", () => {
  test("number-shaped strings the type lets through are still checked when the cell runs", () => {
    // `${number}` admits these; the exact check does not.
    expect(() => exactPositive("0", "epsilon")).toThrow(/greater than 0/);
    expect(() => exactPositive("-1", "epsilon")).toThrow(/positive decimal/);
    expect(() => exactPositive("Infinity", "epsilon")).toThrow(/positive decimal/);
    expect(() => exactPositive("0x10", "epsilon")).toThrow(/positive decimal/);
    expect(() => exactPositive("1/0", "epsilon")).toThrow(/zero denominator/);
    expect(exactPositive("1e-3", "epsilon")).toBe("1e-3");
    expect(exactPositive(0.1, "epsilon")).toBe("0.1");
  });
  test("atMost travels as an exact string, only with within", () => {
    expect(privacyAsk({ within: 25, atMost: 0.5 }, "count").privacy).toEqual({ within: 25, confidence: 0.95, atMost: "0.5" });
    expect(privacyAsk({ within: 25 }, "count").privacy).toEqual({ within: 25, confidence: 0.95 });
    expect(() => privacyAsk({ epsilon: 0.1, atMost: 0.5 }, "count")).toThrow(/atMost bounds an accuracy-first ask/);
    expect(() => privacyAsk({ within: 25, atMost: "lots" }, "count")).toThrow(/atMost must be a positive decimal/);
    expect(() => privacyAsk({ within: 25, atMost: -1 }, "count")).toThrow(/greater than 0/);
    expect(() => privacyAsk({ within: 25, atMost: Number.NaN }, "count")).toThrow(/NaN/);
  });
});
