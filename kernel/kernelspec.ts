/**
 * Installs the kernelspec (jupyter_client "Kernel specs"): kernel.json plus two logos, written
 * straight into a Jupyter data directory, no Python needed.
 *
 *   default      JUPYTER_DATA_DIR/kernels/<name>, else ~/.local/share/jupyter/kernels/<name>
 *                (macOS: ~/Library/Jupyter/kernels/<name>)
 *   prefix       <prefix>/share/jupyter/kernels/<name>
 *   user: false  /usr/local/share/jupyter/kernels/<name> (system-wide)
 */
import { existsSync, mkdirSync, writeFileSync } from "node:fs";
import { homedir } from "node:os";
import { join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import { BadInputError } from "../runtime/errors.js";
import { logoPng } from "./logo.js";

export const DEFAULT_KERNEL_NAME = "hush";

export interface KernelspecOptions {
  /** Per-user data dir (the default); false installs system-wide. */
  user?: boolean;
  /** Install under PREFIX/share/jupyter/kernels (wins over `user`). */
  prefix?: string;
  name?: string;
}

export function kernelspecJson(mainJs: string = kernelMainScript()): Record<string, unknown> {
  return {
    argv: [process.execPath, mainJs, "--connection-file", "{connection_file}"],
    display_name: "TypeScript (hush)",
    language: "typescript",
    interrupt_mode: "message",
    env: {},
    metadata: { hush: { kernel: "typescript", protocol_version: "5.3" } },
  };
}

export function kernelspecDir(opts: KernelspecOptions = {}, env: NodeJS.ProcessEnv = process.env): string {
  const name = opts.name ?? DEFAULT_KERNEL_NAME;
  if (!/^[A-Za-z0-9._-]+$/.test(name)) {
    throw new BadInputError(`kernel name "${name}" may only use letters, digits, ".", "_" and "-"`);
  }
  if (opts.prefix !== undefined) return join(resolve(opts.prefix), "share", "jupyter", "kernels", name);
  if (opts.user === false) return join("/usr/local/share/jupyter/kernels", name);
  if (env.JUPYTER_DATA_DIR) return join(resolve(env.JUPYTER_DATA_DIR), "kernels", name);
  if (process.platform === "darwin") return join(homedir(), "Library", "Jupyter", "kernels", name);
  const xdg = env.XDG_DATA_HOME || join(homedir(), ".local", "share");
  return join(xdg, "jupyter", "kernels", name);
}

export function installKernelspec(opts: KernelspecOptions = {}): { dir: string } {
  const dir = kernelspecDir(opts);
  mkdirSync(dir, { recursive: true });
  writeFileSync(join(dir, "kernel.json"), JSON.stringify(kernelspecJson(), null, 2) + "\n");
  writeFileSync(join(dir, "logo-64x64.png"), logoPng(64));
  writeFileSync(join(dir, "logo-32x32.png"), logoPng(32));
  return { dir };
}

/** Absolute path of dist/kernel/main.js (from dist/ itself, or from sources under vitest). */
export function kernelMainScript(): string {
  for (const rel of ["./main.js", "../dist/kernel/main.js"]) {
    const p = fileURLToPath(new URL(rel, import.meta.url));
    if (existsSync(p)) return p;
  }
  throw new BadInputError("dist/kernel/main.js not found: build with `npx tsc -p .` first");
}
