/**
 * Build step: the declaration of the `hush` global for the kernel's language service, made from
 * the compiler's own declaration output (`tsc --declaration`) of runtime/api, so it cannot drift
 * from the code.
 *
 * The emitted .d.ts files are modules that import each other; the language service needs one
 * script that declares a global. This bundles them: starting from the class `Hush` (the type of
 * the global), it follows every type reference, through imports and into runtime/protocol, and
 * copies each declaration it reaches (with its doc comment) into one `declare namespace HushApi`,
 * so the names never clash with a notebook's own. What cells cannot use is left out: constructors
 * become `private constructor()` (handles come from `hush`, never from `new`), and private and
 * protected members are dropped, with the internal types only they mention. References written
 * through an alias, a namespace import or `import("…")` are rewritten to the bundled name. Two
 * reached declarations with the same name, or a reference to a file outside the project that is
 * not a standard library or Node declaration, stop the build with an error.
 *
 * `npm run build` runs this after tsc: `node dist/kernel/api-declarations.js` writes
 * dist/runtime/api/hush-declarations.d.ts, which runtime/api/declarations.ts reads.
 */
import { createHash } from "node:crypto";
import { existsSync, readdirSync, readFileSync, renameSync, writeFileSync } from "node:fs";
import { createRequire } from "node:module";
import { join, relative, resolve, sep } from "node:path";
import { fileURLToPath, pathToFileURL } from "node:url";
import type * as TS from "typescript";

// The compiler (a development dependency) loads only when a bundle is made, never when the kernel
// merely reads the generated file.
const require = createRequire(import.meta.url);
let ts: typeof TS;
function compiler(): typeof TS {
  ts ??= require("typescript") as typeof TS;
  return ts;
}

/** The class whose instance is the `hush` global: where the walk starts. */
const ROOT_CLASS = "Hush";
/** The file (relative to the declaration root) that declares it. */
const ROOT_FILE = "runtime/api/hush.d.ts";
export const GENERATED_FILE = "runtime/api/hush-declarations.d.ts";

const HEADER =
  "// Generated at build time by kernel/api-declarations.ts from the compiler's declaration output\n" +
  "// of runtime/api (tsc --declaration). Do not edit: change runtime/api and rebuild.\n";
const GLOBAL =
  '/** Sealed datasets and privacy-budgeted aggregates. Start with: const visits = await hush.open("visits"). */\n' +
  "declare const hush: HushApi.Hush;\n";

interface Edit {
  start: number;
  end: number;
  text: string;
}

/**
 * The bundled declaration text. `files` maps paths (relative to one root, "/"-separated, e.g.
 * "runtime/api/hush.d.ts") to the compiler's .d.ts output.
 */
export function bundleDeclarations(files: ReadonlyMap<string, string>): string {
  compiler();
  const root = "/hush-decl/";
  const abs = (p: string) => root + p;
  const options: TS.CompilerOptions = {
    target: ts.ScriptTarget.ES2022,
    module: ts.ModuleKind.NodeNext,
    moduleResolution: ts.ModuleResolutionKind.NodeNext,
    types: ["node"],
    noEmit: true,
    strict: true,
  };
  const host = ts.createCompilerHost(options);
  const byAbs = new Map([...files].map(([p, text]) => [abs(p), text]));
  const getSourceFile = host.getSourceFile.bind(host);
  host.getSourceFile = (name, lang, onError) => {
    const text = byAbs.get(name);
    return text !== undefined ? ts.createSourceFile(name, text, lang, true) : getSourceFile(name, lang, onError);
  };
  const fileExists = host.fileExists.bind(host);
  host.fileExists = (name) => byAbs.has(name) || fileExists(name);
  const readFile = host.readFile.bind(host);
  host.readFile = (name) => byAbs.get(name) ?? readFile(name);
  const dirs = new Set<string>();
  for (const p of byAbs.keys()) for (let i = p.indexOf("/", 1); i > 0; i = p.indexOf("/", i + 1)) dirs.add(p.slice(0, i));
  const directoryExists = host.directoryExists?.bind(host);
  host.directoryExists = (d) => dirs.has(d.replace(/\/$/, "")) || (directoryExists ? directoryExists(d) : false);
  const realpath = host.realpath?.bind(host);
  host.realpath = (p) => (p.startsWith(root) ? p : realpath ? realpath(p) : p);
  // Type packages (@types/node) resolve from this project, not from the virtual root.
  host.getCurrentDirectory = () => process.cwd();
  const rootAbs = abs(ROOT_FILE);
  if (!byAbs.has(rootAbs)) throw new Error(`declarations: ${ROOT_FILE} is missing from the compiler output`);
  const program = ts.createProgram([rootAbs], options, host);
  const checker = program.getTypeChecker();
  const ours = (sf: TS.SourceFile) => byAbs.has(sf.fileName);

  const rootFile = program.getSourceFile(rootAbs) as TS.SourceFile;
  const rootModule = checker.getSymbolAtLocation(rootFile);
  const rootSymbol = rootModule && checker.getExportsOfModule(rootModule).find((s) => s.name === ROOT_CLASS);
  if (!rootSymbol) throw new Error(`declarations: ${ROOT_FILE} exports no ${ROOT_CLASS}`);

  // A variable's declaration is inside a statement: print the statement (its doc comment sits there).
  const printable = (d: TS.Declaration): TS.Node => (ts.isVariableDeclaration(d) ? d.parent.parent : d);
  const included = new Map<TS.Symbol, TS.Declaration[]>();
  const byName = new Map<string, TS.Symbol>();
  const queue: TS.Symbol[] = [];
  const editsOf = new Map<TS.Declaration, Edit[]>();

  const include = (symbol: TS.Symbol, from: TS.Node): void => {
    if (included.has(symbol)) return;
    const decls = (symbol.declarations ?? []).filter((d) => ours(d.getSourceFile()));
    if (decls.length === 0) return;
    const clash = byName.get(symbol.name);
    if (clash && clash !== symbol) {
      throw new Error(
        `declarations: two declarations named ${symbol.name} are reached (${where(clash)} and ${where(symbol)}), ` +
          `from ${from.getSourceFile().fileName.slice(root.length)}; rename one`,
      );
    }
    byName.set(symbol.name, symbol);
    included.set(symbol, decls);
    queue.push(symbol);
  };
  const where = (s: TS.Symbol) => (s.declarations?.[0]?.getSourceFile().fileName ?? "?").slice(root.length);

  /** The declared symbol a reference names (aliases followed), or null for type parameters and globals. */
  const target = (name: TS.Node): TS.Symbol | null => {
    let s = checker.getSymbolAtLocation(name);
    if (!s) return null;
    if (s.flags & ts.SymbolFlags.Alias) s = checker.getAliasedSymbol(s);
    const decl = s.declarations?.[0];
    if (!decl || ts.isTypeParameterDeclaration(decl)) return null;
    const sf = decl.getSourceFile();
    if (ours(sf)) return s;
    if (program.isSourceFileDefaultLibrary(sf) || /[\\/]node_modules[\\/]@types[\\/]node[\\/]/.test(sf.fileName)) return null;
    throw new Error(`declarations: ${name.getText()} comes from ${sf.fileName}, outside the project; the cell API should not expose it`);
  };

  const walk = (node: TS.Node, edits: Edit[]): void => {
    if (dropped(node)) {
      edits.push({ start: node.getFullStart(), end: node.getEnd(), text: "" });
      return;
    }
    if (ts.isConstructorDeclaration(node)) {
      edits.push({ start: node.getStart(), end: node.getEnd(), text: "private constructor();" });
      return;
    }
    if (ts.isTypeReferenceNode(node) || ts.isExpressionWithTypeArguments(node) || ts.isTypeQueryNode(node)) {
      const nameNode = ts.isTypeReferenceNode(node) ? node.typeName : ts.isTypeQueryNode(node) ? node.exprName : node.expression;
      const s = target(rightmost(nameNode));
      if (s) {
        include(s, node);
        if (nameNode.getText() !== s.name) edits.push({ start: nameNode.getStart(), end: nameNode.getEnd(), text: s.name });
      }
      // Type arguments still need walking.
      node.forEachChild((c) => {
        if (c !== nameNode) walk(c, edits);
      });
      return;
    }
    if (ts.isImportTypeNode(node)) {
      const q = node.qualifier;
      if (!q) throw new Error(`declarations: import type without a name in ${node.getSourceFile().fileName}`);
      const s = target(rightmost(q));
      if (s) {
        include(s, node);
        const args = node.typeArguments ? `<${node.typeArguments.map((a) => a.getText()).join(", ")}>` : "";
        if (args.includes("import(")) throw new Error("declarations: nested import types are not bundled");
        edits.push({ start: node.getStart(), end: node.getEnd(), text: s.name + args });
        return;
      }
    }
    node.forEachChild((c) => walk(c, edits));
  };

  include(rootSymbol, rootFile);
  while (queue.length > 0) {
    const s = queue.shift() as TS.Symbol;
    for (const d of included.get(s) ?? []) {
      const edits: Edit[] = [];
      // Modifiers `export`, `declare`, `default`: everything in a declared namespace is visible.
      const stmt = printable(d);
      for (const m of ts.canHaveModifiers(stmt) ? (ts.getModifiers(stmt) ?? []) : []) {
        if (m.kind === ts.SyntaxKind.ExportKeyword || m.kind === ts.SyntaxKind.DeclareKeyword || m.kind === ts.SyntaxKind.DefaultKeyword) {
          edits.push({ start: m.getStart(), end: m.getEnd() + 1, text: "" });
        }
      }
      d.forEachChild((c) => walk(c, edits));
      editsOf.set(d, edits);
    }
  }

  const ordered = [...included.values()]
    .flat()
    .sort((a, b) => a.getSourceFile().fileName.localeCompare(b.getSourceFile().fileName) || a.getStart() - b.getStart());
  const blocks: string[] = [];
  for (const d of ordered) {
    const node = printable(d);
    const sf = node.getSourceFile();
    // The node and its doc comment: the last comment before it, when that is a /** */ block (a
    // file's header comment before its first declaration is not that declaration's doc).
    const comments = ts.getLeadingCommentRanges(sf.text, node.getFullStart()) ?? [];
    const doc = comments.at(-1);
    const header = doc !== undefined && sf.text.slice(0, doc.pos).trim() === "";
    const start = doc && !header && sf.text.startsWith("/**", doc.pos) ? doc.pos : node.getStart();
    let text = sf.text.slice(start, node.getEnd());
    const edits = (editsOf.get(d) ?? []).sort((a, b) => b.start - a.start);
    let last = Number.POSITIVE_INFINITY;
    for (const e of edits) {
      if (e.end > last) continue; // inside an edit already applied (a dropped member's references)
      text = text.slice(0, e.start - start) + e.text + text.slice(e.end - start);
      last = e.start;
    }
    blocks.push(reindent(text));
  }
  return `${HEADER}declare namespace HushApi {\n${blocks.join("\n")}\n}\n\n${GLOBAL}`;
}

/**
 * Private or protected class members, and members under a computed key (`[INSPECT]()`: Node's
 * inspect hook, which `console.log` calls, not a cell): not part of what a cell can call.
 */
function dropped(node: TS.Node): boolean {
  if (!ts.isClassElement(node) || ts.isConstructorDeclaration(node)) return false;
  if (node.name && ts.isPrivateIdentifier(node.name)) return false; // `#private;` keeps the class nominal
  if (node.name && ts.isComputedPropertyName(node.name)) return true;
  const mods = ts.canHaveModifiers(node) ? (ts.getModifiers(node) ?? []) : [];
  return mods.some((m) => m.kind === ts.SyntaxKind.PrivateKeyword || m.kind === ts.SyntaxKind.ProtectedKeyword);
}

function rightmost(n: TS.Node): TS.Node {
  if (ts.isQualifiedName(n)) return n.right;
  if (ts.isPropertyAccessExpression(n)) return n.name;
  return n;
}

/** Indents a declaration by two spaces inside the namespace. */
function reindent(text: string): string {
  return text
    .split("\n")
    .map((l) => (l.trim() === "" ? "" : `  ${l}`))
    .join("\n");
}

/** Every .d.ts under `dir`, keyed by its path relative to `dir` with "/" separators. */
export function readDeclarationTree(dir: string, under: string[] = ["runtime"]): Map<string, string> {
  const out = new Map<string, string>();
  const visit = (d: string): void => {
    for (const e of readdirSync(d, { withFileTypes: true })) {
      const p = join(d, e.name);
      if (e.isDirectory()) visit(p);
      else if (e.name.endsWith(".d.ts") && !p.endsWith(GENERATED_FILE.split("/").join(sep))) {
        out.set(relative(dir, p).split(sep).join("/"), readFileSync(p, "utf8"));
      }
    }
  };
  for (const u of under) visit(join(dir, u));
  return out;
}

/** dist/: one up when this runs built (dist/kernel/), the repository's dist/ when run from sources. */
const HERE_ROOT = resolve(fileURLToPath(new URL("..", import.meta.url)));
const DIST = existsSync(join(HERE_ROOT, "runtime", "api", "declarations.js")) ? HERE_ROOT : join(HERE_ROOT, "dist");

/** First line of the generated file: a digest of the compiler output it was made from. */
const INPUTS_LINE = /^\/\/ inputs sha256 ([0-9a-f]{64})\n/;

function inputsDigest(files: ReadonlyMap<string, string>): string {
  const h = createHash("sha256");
  for (const p of [...files.keys()].sort()) h.update(p).update("\0").update(files.get(p) as string).update("\0");
  return h.digest("hex");
}

/** The generated text without its inputs line (the part that is the bundle). */
export function withoutInputsLine(text: string): string {
  return text.replace(INPUTS_LINE, "");
}

/** Bundles dist/'s declaration output and writes the generated file; returns its text. */
export function generateDeclarations(dist = DIST, files = readDeclarationTree(dist)): string {
  const text = `// inputs sha256 ${inputsDigest(files)}\n${bundleDeclarations(files)}`;
  const file = join(dist, GENERATED_FILE);
  // Written whole, then renamed: a kernel starting meanwhile never reads half a file.
  writeFileSync(`${file}.${process.pid}.tmp`, text);
  renameSync(`${file}.${process.pid}.tmp`, file);
  return text;
}

/**
 * The generated text, made again first when it is missing or was made from other compiler output
 * than dist/ holds now (a build by `tsc` alone after a change). Checking costs a read of the
 * .d.ts files and one digest; only a change pays for loading the compiler and bundling.
 */
export function ensureDeclarations(dist = DIST): string {
  const file = join(dist, GENERATED_FILE);
  const files = readDeclarationTree(dist);
  if (existsSync(file)) {
    const text = readFileSync(file, "utf8");
    if (INPUTS_LINE.exec(text)?.[1] === inputsDigest(files)) return text;
  }
  return generateDeclarations(dist, files);
}

if (process.argv[1] && import.meta.url === pathToFileURL(process.argv[1]).href) {
  try {
    const text = generateDeclarations();
    process.stdout.write(`hush: wrote ${join(DIST, GENERATED_FILE)} (${text.length} characters)\n`);
  } catch (e: unknown) {
    process.stderr.write(`hush: ${e instanceof Error ? e.message : String(e)}\n`);
    process.exit(1);
  }
}
