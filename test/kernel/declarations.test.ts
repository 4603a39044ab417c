/**
 * The `hush` declarations the kernel injects are the compiler's own output, bundled: a fresh
 * declaration emit of runtime/api from the current sources (TypeScript's emitter, run here in
 * memory with the project's tsconfig), bundled by kernel/api-declarations.ts, must equal the text
 * the build generated and the kernel gives its language service. Editing runtime/api without
 * rebuilding, or hand-editing the generated file, fails this test.
 */
import { mkdirSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { dirname, join } from "node:path";
import { fileURLToPath } from "node:url";
import ts from "typescript";
import { beforeAll, describe, expect, it } from "vitest";
import { bundleDeclarations, ensureDeclarations, withoutInputsLine } from "../../kernel/api-declarations.js";
import { HushSession } from "../../kernel/hush-session.js";
import { hushDeclarations } from "../../runtime/api/declarations.js";

const ROOT = fileURLToPath(new URL("../../", import.meta.url));

/** tsc --declaration of runtime/api (and what it imports), in memory: path under dist/ → text. */
function emitDeclarations(): Map<string, string> {
  const cfg = ts.readConfigFile(join(ROOT, "tsconfig.json"), (p) => ts.sys.readFile(p));
  const parsed = ts.parseJsonConfigFileContent(cfg.config, ts.sys, ROOT);
  const options: ts.CompilerOptions = { ...parsed.options, declaration: true, emitDeclarationOnly: true, sourceMap: false, declarationMap: false };
  const program = ts.createProgram([join(ROOT, "runtime/api/index.ts"), join(ROOT, "runtime/api/hush.ts")], options);
  const out = new Map<string, string>();
  const outDir = options.outDir as string;
  const result = program.emit(undefined, (file, text) => {
    if (file.endsWith(".d.ts")) out.set(file.slice(outDir.length + 1).split("\\").join("/"), text);
  });
  expect(result.emitSkipped).toBe(false);
  return out;
}

let emitted: Map<string, string>;
beforeAll(() => {
  emitted = emitDeclarations();
  // What the kernel does before injecting: (re)generate from dist/ if missing or stale.
  ensureDeclarations();
}, 120_000);

describe("generated hush declarations", () => {
  it("equal a fresh bundle of the compiler's declaration output of runtime/api", () => {
    expect(emitted.has("runtime/api/hush.d.ts")).toBe(true);
    const fresh = bundleDeclarations(emitted);
    expect(withoutInputsLine(hushDeclarations())).toBe(fresh);
  });

  it("are what the kernel's cell API session gives the language service", () => {
    const session = HushSession.create({ display: () => {} }, { HUSH_DEMO_DIR: "/nonexistent-hush-demo" });
    expect(session.typeDeclarations()).toBe(hushDeclarations());
    expect(hushDeclarations()).toMatch(/^\/\/ inputs sha256 [0-9a-f]{64}\n/);
    void session.close();
  });

  it("are made again when the compiler output changed since (a build by tsc alone)", () => {
    const dist = mkdtempSync(join(tmpdir(), "hush-decl-"));
    try {
      const put = (files: Map<string, string>) => {
        for (const [p, text] of files) {
          mkdirSync(dirname(join(dist, p)), { recursive: true });
          writeFileSync(join(dist, p), text);
        }
      };
      put(emitted);
      const first = ensureDeclarations(dist);
      expect(withoutInputsLine(first)).toBe(bundleDeclarations(emitted));
      expect(ensureDeclarations(dist)).toBe(first); // unchanged output: the file is reused
      const changed = new Map([["runtime/api/hush.d.ts", addMember(emitted.get("runtime/api/hush.d.ts") as string, "    laterMember(): void;\n")]]);
      put(changed);
      const again = ensureDeclarations(dist);
      expect(again).toContain("laterMember(): void;");
      expect(readFileSync(join(dist, "runtime/api/hush-declarations.d.ts"), "utf8")).toBe(again);
    } finally {
      rmSync(dist, { recursive: true, force: true });
    }
  });

  it("follow the compiler output: a member added there appears in the bundle (the comparison can fail)", () => {
    const changed = new Map(emitted);
    const hush = changed.get("runtime/api/hush.d.ts") as string;
    changed.set("runtime/api/hush.d.ts", addMember(hush, "    /** Added. */\n    extraForTest(): number;\n"));
    const bundle = bundleDeclarations(changed);
    expect(bundle).toContain("extraForTest(): number;");
    expect(bundle).not.toBe(withoutInputsLine(hushDeclarations()));
  });

  it("declare one global and keep cells away from internals", () => {
    const text = hushDeclarations();
    expect(text).toMatch(/^declare namespace HushApi \{$/m);
    expect(text).toMatch(/^declare const hush: HushApi\.Hush;$/m);
    // No module syntax survives (the language service reads it as a global script).
    expect(text).not.toMatch(/^\s*(import|export)\s/m);
    expect(text).not.toMatch(/import\(/);
    // Constructors are private; the curator connection and accounting stay out of reach.
    expect(text).not.toMatch(/constructor\(\s*ctx/);
    for (const internal of ["ApiContext", "CuratorPort", "CuratorClient", "SessionSpend", "Connector"]) {
      expect(text, internal).not.toMatch(new RegExp(`\\b${internal}\\b`));
    }
  });

  it("stop the build on two reached declarations with the same name", () => {
    const files = new Map([
      ["runtime/api/hush.d.ts", 'import type { A } from "./a.js";\nimport type { B } from "./b.js";\nexport declare class Hush {\n    a(): A;\n    b(): B;\n}\n'],
      ["runtime/api/a.d.ts", 'import type { Shared } from "./s1.js";\nexport interface A { s: Shared }\n'],
      ["runtime/api/b.d.ts", 'import type { Shared } from "./s2.js";\nexport interface B { s: Shared }\n'],
      ["runtime/api/s1.d.ts", "export interface Shared { one: 1 }\n"],
      ["runtime/api/s2.d.ts", "export interface Shared { two: 2 }\n"],
    ]);
    expect(() => bundleDeclarations(files)).toThrow(/two declarations named Shared/);
  });

  it("rewrite aliased, namespace and import() references to the bundled names", () => {
    const files = new Map([
      [
        "runtime/api/hush.d.ts",
        'import type { Thing as Renamed } from "./t.js";\nimport * as ns from "./t.js";\nexport declare class Hush {\n    private constructor(x: Renamed);\n    a(): Renamed;\n    b(): ns.Other;\n    c(): import("./t.js").Third<string>;\n    private hidden(): ns.Secret;\n}\n',
      ],
      ["runtime/api/t.d.ts", "export interface Thing { t: 1 }\nexport interface Other { o: 2 }\nexport interface Third<T> { v: T }\nexport interface Secret { s: 3 }\n"],
    ]);
    const text = bundleDeclarations(files);
    expect(text).toContain("a(): Thing;");
    expect(text).toContain("b(): Other;");
    expect(text).toContain("c(): Third<string>;");
    expect(text).toContain("private constructor();");
    expect(text).not.toContain("hidden");
    expect(text).not.toContain("Secret");
    expect(text).not.toContain("Renamed");
  });
});

/** The class `Hush` of tsc's output with one member more (first in the class body). */
function addMember(dts: string, member: string): string {
  const head = "export declare class Hush {\n";
  if (!dts.includes(head)) throw new Error("tsc's output of runtime/api/hush.ts has no `export declare class Hush {` line");
  return dts.replace(head, head + member);
}
