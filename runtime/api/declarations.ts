/**
 * The TypeScript declaration of the `hush` global, given to the kernel's language service so that
 * type checking, completion and hover docs work on `hush.` and on every object it returns.
 *
 * It is generated, not written by hand: `npm run build` bundles the compiler's own declaration
 * output of runtime/api (tsc --declaration) into one global declaration (kernel/api-declarations.ts)
 * and writes dist/runtime/api/hush-declarations.d.ts, which this module reads. Types live in the
 * `HushApi` namespace so they never clash with names a notebook defines. test/kernel/declarations.test.ts
 * fails if that text differs from a fresh bundle of the compiler's output for the current sources.
 */
import { existsSync, readFileSync } from "node:fs";

const FILE = "hush-declarations.d.ts";

/** Where the generated text is: beside the built module, or in dist/ when running from sources. */
export function declarationsFile(): URL {
  const beside = new URL(`./${FILE}`, import.meta.url);
  if (existsSync(beside)) return beside;
  const built = new URL(`../../dist/runtime/api/${FILE}`, import.meta.url);
  if (existsSync(built)) return built;
  throw new Error(`the hush declarations are not generated yet (${FILE}); run \`npm run build\``);
}

let cached: string | null = null;

/** The declaration text (read once). Throws when the build has not generated it. */
export function hushDeclarations(): string {
  cached ??= readFileSync(declarationsFile(), "utf8");
  return cached;
}
