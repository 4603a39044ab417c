/**
 * `hush notebooks [--to DIR]`: copies the demo notebooks into a working folder (default
 * `workspace/` in the clone, ignored by git) and prints how to open them.
 *
 * The tracked notebooks under notebooks/ are clean templates (no outputs). Running and saving a
 * notebook rewrites its file, so a user works in a copy: saving there touches no tracked file.
 * An existing copy is never overwritten (it may hold the user's work); it is listed as kept.
 */
import { copyFileSync, existsSync, mkdirSync, readdirSync, statSync } from "node:fs";
import { join, relative, resolve } from "node:path";
import { repoRoot } from "../../notebooks/scenario/generate.js";
import { BadInputError } from "../../runtime/errors.js";

/** The templates: every .ipynb directly under notebooks/. */
export function notebookTemplates(root: string): string[] {
  return readdirSync(join(root, "notebooks"))
    .filter((f) => f.endsWith(".ipynb") && !f.endsWith(".out.ipynb"))
    .sort();
}

export function runNotebooks(o: { to?: string }, out: (s: string) => void): { copied: string[]; kept: string[]; dir: string } {
  const root = repoRoot();
  const dir = resolve(o.to ?? join(root, "workspace"));
  const rel = relative(root, dir);
  if (rel === "notebooks" || rel.startsWith(`notebooks/`) || rel === "") {
    throw new BadInputError(`--to ${dir}: pick a folder outside the tracked notebooks/ (the templates live there)`);
  }
  if (existsSync(dir) && !statSync(dir).isDirectory()) throw new BadInputError(`--to ${dir}: is a file, not a folder`);
  mkdirSync(dir, { recursive: true });
  const copied: string[] = [];
  const kept: string[] = [];
  for (const name of notebookTemplates(root)) {
    const target = join(dir, name);
    if (existsSync(target)) {
      kept.push(target);
      continue;
    }
    copyFileSync(join(root, "notebooks", name), target);
    copied.push(target);
  }
  for (const f of copied) out(`copied  ${f}\n`);
  for (const f of kept) out(`kept    ${f} (already there; remove it for a fresh copy)\n`);
  const shown = rel.startsWith("..") ? dir : rel;
  out(`\nopen them with: jupyter notebook ${shown}/   (or jupyter lab; the notebooks pick the hush kernel)\n`);
  return { copied, kept, dir };
}
