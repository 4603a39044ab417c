/**
 * The notebooks of a class audit: the paths given (files, or folders searched for `.ipynb` files),
 * and which roster student handed each in. Globs are the shell's job (`hush audit hand-ins/*.ipynb`).
 */
import { lstatSync, readdirSync, statSync } from "node:fs";
import { basename, dirname, join, relative, resolve } from "node:path";
import { BadInputError } from "../../runtime/errors.js";
import type { RosterEntry } from "./roster.js";

const MAX_NOTEBOOKS = 5000;
const MAX_DEPTH = 8;

export interface HandIn {
  file: string;
  /** How the notebook is named in the table without a roster: its path under the folder given, without ".ipynb". */
  label: string;
}

/**
 * Every notebook under the paths, in a stable order, each once. Folders are searched down to
 * MAX_DEPTH; hidden entries (`.ipynb_checkpoints`, `.git`) and symbolic links to folders are skipped
 * (a link loop cannot make the walk run forever). A path that does not exist is bad input.
 */
export function findHandIns(paths: readonly string[]): HandIn[] {
  const found: HandIn[] = [];
  const seen = new Set<string>();
  const add = (file: string, label: string): void => {
    const key = resolve(file);
    if (seen.has(key)) return;
    if (found.length >= MAX_NOTEBOOKS) throw new BadInputError(`more than ${MAX_NOTEBOOKS} notebooks given`);
    seen.add(key);
    found.push({ file, label });
  };
  for (const p of paths) {
    let isDir: boolean;
    try {
      isDir = statSync(p).isDirectory();
    } catch (e: unknown) {
      const code = e !== null && typeof e === "object" && "code" in e ? String((e as { code: unknown }).code) : "error";
      throw new BadInputError(`${p} cannot be read (${code})${/[*?[]/.test(p) ? "; patterns are expanded by your shell, not by hush" : ""}`);
    }
    if (!isDir) {
      add(p, basename(p).replace(/\.ipynb$/i, ""));
      continue;
    }
    const walk = (dir: string, depth: number): void => {
      const names = readdirSync(dir).sort();
      for (const name of names) {
        if (name.startsWith(".")) continue;
        const full = join(dir, name);
        const st = lstatSync(full);
        if (st.isDirectory() && depth < MAX_DEPTH) walk(full, depth + 1);
        else if ((st.isFile() || (st.isSymbolicLink() && statSync(full, { throwIfNoEntry: false })?.isFile() === true)) && /\.ipynb$/i.test(name)) {
          add(full, relative(p, full).replace(/\.ipynb$/i, ""));
        }
      }
    };
    walk(p, 0);
  }
  return found;
}

/**
 * The roster student who handed in `file`: the one named by the file (`kit.ipynb`), else by its
 * folder (`kit/assignment.ipynb`), else the longest student name the file name starts with followed
 * by "-", "_", "." or a space (`kit_assignment3.ipynb`). Null when none matches.
 */
export function studentOf(file: string, roster: readonly RosterEntry[]): RosterEntry | null {
  const stem = basename(file).replace(/\.ipynb$/i, "");
  const folder = basename(dirname(resolve(file)));
  const exact = roster.find((e) => e.student === stem) ?? roster.find((e) => e.student === folder);
  if (exact !== undefined) return exact;
  let best: RosterEntry | null = null;
  for (const e of roster) {
    if (stem.length > e.student.length && stem.startsWith(e.student) && /[-_. ]/.test(stem[e.student.length])) {
      if (best === null || e.student.length > best.student.length) best = e;
    }
  }
  return best;
}
