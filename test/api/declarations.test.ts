/**
 * The `hush` declaration for the kernel's language service: it type-checks, it accepts the usage
 * the help shows, it rejects misuse, and it declares every public member of the runtime classes
 * (so completion never misses a method the API has).
 */
import ts from "typescript";
import { describe, expect, test } from "vitest";
import { Aggregates } from "../../runtime/api/aggregates.js";
import { Answer } from "../../runtime/api/answer.js";
import { BudgetReport, LedgerView } from "../../runtime/api/budget.js";
import { ensureDeclarations } from "../../kernel/api-declarations.js";
import { Column, Filter } from "../../runtime/api/expr.js";
import { Hush } from "../../runtime/api/hush.js";
import { CostQuote } from "../../runtime/api/quote.js";
import { SealedTable } from "../../runtime/api/table.js";

/** The generated text the kernel injects (dist/, written by `npm run build`, made again if stale). */
const HUSH_DECLARATIONS = ensureDeclarations();

/** Type errors of a cell's code checked against the declaration (strict, ES2022, top-level await as in a module). */
function diagnostics(cell: string): string[] {
  const files: Record<string, string> = { "/hush.d.ts": HUSH_DECLARATIONS, "/cell.ts": `${cell}\nexport {};\n` };
  const options: ts.CompilerOptions = { strict: true, target: ts.ScriptTarget.ES2022, module: ts.ModuleKind.ES2022, lib: ["lib.es2022.d.ts"], types: [], noEmit: true };
  const host = ts.createCompilerHost(options);
  const read = host.getSourceFile.bind(host);
  host.getSourceFile = (name, lang) => (name in files ? ts.createSourceFile(name, files[name], lang) : read(name, lang));
  host.fileExists = (name) => name in files || ts.sys.fileExists(name);
  host.readFile = (name) => files[name] ?? ts.sys.readFile(name);
  const program = ts.createProgram(Object.keys(files), options, host);
  return ts.getPreEmitDiagnostics(program).map((d) => ts.flattenDiagnosticMessageText(d.messageText, "\n"));
}

describe("hush declarations", () => {
  test("the declaration itself type-checks", () => {
    expect(diagnostics("")).toEqual([]);
  });

  test("the documented usage type-checks", () => {
    const cell = `
      const visits = await hush.open("visits");
      const a = await visits.count({ epsilon: 0.1 });
      const m = await visits.where(hush.col("age").ge(65).and({ district: "Northgate" })).by("district").mean("wait_minutes", { epsilon: "0.2", confidence: 0.9 });
      const h = await visits.by("age", { bins: 10 }).count({ within: 20 });
      const hist = await visits.histogram("age", { bins: 10, rho: 0.01 });
      const q = await visits.preview.mean("wait_minutes", { epsilon: 0.1 });
      const x: number | null = a.value;
      const rows: number[] = m.rows.map((r) => r.value ?? 0);
      const ok: boolean = q.affordable && !hist.replay;
      const seq: number = a.receipt.seq;
      const b = await hush.budget();
      const spent: string | undefined = b.of("visits")?.sessionSpent;
      const l = await hush.ledger("visits");
      const n: number = l.entries.length;
      const t: HushApi.SealedTable = visits.where({ age: { between: [18, 64] }, insured: null });
      void [x, rows, ok, seq, spent, n, t, h];
    `;
    expect(diagnostics(cell)).toEqual([]);
  });

  test("misuse is caught by the checker", () => {
    expect(diagnostics(`const v = await hush.open("visits"); v.rows;`).join()).toMatch(/Property 'rows' does not exist/);
    expect(diagnostics(`const v = await hush.open("visits"); await v.count({ eps: 1 });`).length).toBeGreaterThan(0);
    expect(diagnostics(`const v = await hush.open("visits"); await v.histogram("age", { epsilon: 1 });`).join()).toMatch(/bins/);
  });

  /** The text of `interface Name ... { ... }` (or `class Name`) in the declaration. */
  function interfaceBody(name: string): string {
    const start = HUSH_DECLARATIONS.search(new RegExp(`(?:interface|class) ${name}\\b[^{]*\\{`));
    expect(start, `interface ${name} is declared`).toBeGreaterThanOrEqual(0);
    let depth = 0;
    for (let i = HUSH_DECLARATIONS.indexOf("{", start); i < HUSH_DECLARATIONS.length; i++) {
      if (HUSH_DECLARATIONS[i] === "{") depth++;
      if (HUSH_DECLARATIONS[i] === "}" && --depth === 0) return HUSH_DECLARATIONS.slice(start, i + 1);
    }
    throw new Error("unbalanced");
  }

  function publicMembers(proto: object, stopAt: object = Object.prototype): string[] {
    const out = new Set<string>();
    for (let p: object | null = proto; p && p !== stopAt; p = Object.getPrototypeOf(p)) {
      for (const n of Object.getOwnPropertyNames(p)) if (n !== "constructor" && n !== "measure") out.add(n);
    }
    return [...out];
  }

  test.each([
    ["Hush", Hush.prototype, Object.prototype, ["Hush"]],
    ["SealedTable", SealedTable.prototype, Aggregates.prototype, ["SealedTable"]],
    ["Aggregates", Aggregates.prototype, Object.prototype, ["Aggregates"]],
    ["Answer", Answer.prototype, Object.prototype, ["Answer"]],
    ["CostQuote", CostQuote.prototype, Object.prototype, ["CostQuote"]],
    ["BudgetReport", BudgetReport.prototype, Object.prototype, ["BudgetReport"]],
    ["LedgerView", LedgerView.prototype, Object.prototype, ["LedgerView"]],
    ["Filter", Filter.prototype, Object.prototype, ["Filter"]],
    ["Column", Column.prototype, Object.prototype, ["Column"]],
  ])("every public member of %s is declared", (_name, proto, stopAt, ifaces) => {
    const body = ifaces.map(interfaceBody).join("\n");
    for (const m of publicMembers(proto, stopAt)) expect(body, `${_name}.${m}`).toMatch(new RegExp(`(^|\\s|readonly )${m}\\??[(:<]`, "m"));
  });

  test("instance fields are declared too", () => {
    expect(interfaceBody("Answer")).toMatch(/readonly release: Release/);
    expect(interfaceBody("Answer")).toMatch(/readonly sessionSpent: string/);
    expect(interfaceBody("CostQuote")).toMatch(/readonly preview: Preview/);
    expect(interfaceBody("Filter")).toMatch(/readonly condition: Condition/);
  });
});
