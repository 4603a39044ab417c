/**
 * Installs the kernelspec (jupyter_client "Kernel specs"): kernel.json plus two logos, written
 * straight into a Jupyter data directory, no Python needed.
 *
 *   default      JUPYTER_DATA_DIR/kernels/<name>, else ~/.local/share/jupyter/kernels/<name>
 *                (macOS: ~/Library/Jupyter/kernels/<name>)
 *   prefix       <prefix>/share/jupyter/kernels/<name>
 *   user: false  /usr/local/share/jupyter/kernels/<name> (system-wide)
 *
 * With an identity (`hush install --analyst kit --token-file FILE [--curator ADDR] [--dataset D]`)
 * the kernelspec is that analyst's: Jupyter's own way to give a kernel its settings is the
 * kernelspec's `env` (jupyter_client "Kernel specs"), chosen in the notebook's kernel picker and
 * recorded in the notebook's metadata.kernelspec.name. The env names the analyst, the curator and
 * the token FILE; the token is read from that file (0600, runtime/api/token-file.ts) when a cell
 * first uses `hush`, so it is never in kernel.json (jupyter-server serves every file of a kernelspec
 * directory to its clients: jupyter_server/kernelspecs/handlers.py, KernelSpecResourceHandler) nor
 * in a notebook. HUSH_TOKEN, HUSH_CONFIG and an unused HUSH_CURATOR_KEY are set to "" (unset, for
 * runtime/api/config.ts), so settings the server was started with cannot mix in.
 */
import { existsSync, mkdirSync, writeFileSync } from "node:fs";
import { homedir } from "node:os";
import { isAbsolute, join, relative, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import { EMBEDDED_CURATOR } from "../runtime/api/config.js";
import { readTokenFile } from "../runtime/api/token-file.js";
import { BadInputError } from "../runtime/errors.js";
import { logoPng } from "./logo.js";

export const DEFAULT_KERNEL_NAME = "hush";

export interface KernelspecOptions {
  /** Per-user data dir (the default); false installs system-wide. */
  user?: boolean;
  /** Install under PREFIX/share/jupyter/kernels (wins over `user`). */
  prefix?: string;
  name?: string;
  /** Who this kernel runs as; without it, the plain "hush" kernelspec (embedded demo default). */
  identity?: KernelIdentity;
}

export interface KernelIdentity {
  /** The analyst's name in the steward's policy. */
  analyst: string;
  /** A file holding the analyst's token, readable only by its owner (made absolute on install). */
  tokenFile: string;
  /** ipc://PATH, tcp://HOST:PORT, or "embedded" (the demo curator the kernel starts itself). */
  curator: string;
  /** The curator's CURVE public key (z85); needed for tcp. */
  curatorKey?: string;
  /** The dataset the notebook is for: names the kernelspec and shows in the kernel picker. */
  dataset?: string;
}

/** Policy names (runtime/curator/policy.ts): letters, digits, - and _, starting with a letter. */
const POLICY_NAME = /^[A-Za-z][A-Za-z0-9_-]{0,63}$/;

export function kernelspecJson(mainJs: string = kernelMainScript(), identity?: KernelIdentity): Record<string, unknown> {
  const base = {
    argv: [process.execPath, mainJs, "--connection-file", "{connection_file}"],
    language: "typescript",
    interrupt_mode: "message",
  };
  if (identity === undefined) {
    return { ...base, display_name: "TypeScript (hush)", env: {}, metadata: { hush: { kernel: "typescript", protocol_version: "5.3" } } };
  }
  const { analyst, tokenFile, curator, curatorKey, dataset } = identity;
  return {
    ...base,
    display_name: `TypeScript (hush · ${analyst}${dataset !== undefined ? ` on ${dataset}` : ""})`,
    env: {
      HUSH_CURATOR: envValue(curator),
      HUSH_CURATOR_KEY: envValue(curatorKey ?? ""),
      HUSH_ANALYST: analyst,
      HUSH_TOKEN_FILE: envValue(tokenFile),
      HUSH_TOKEN: "",
      HUSH_CONFIG: "",
    },
    metadata: {
      hush: {
        kernel: "typescript",
        protocol_version: "5.3",
        analyst,
        curator,
        ...(dataset !== undefined ? { dataset } : {}),
      },
    },
  };
}

/**
 * jupyter_client fills a kernelspec's env values as string.Template against the server's environment
 * (provisioner_base.py, __apply_env_substitutions), so a `$` in a path or a z85 key would be
 * replaced; `$$` is Template's escape for one `$`.
 */
function envValue(v: string): string {
  return v.replaceAll("$", "$$$$");
}

/** The kernelspec name an identity installs under unless --name says otherwise: hush-DATASET, else hush-ANALYST. */
export function identityKernelName(identity: KernelIdentity): string {
  return `hush-${identity.dataset ?? identity.analyst}`;
}

/**
 * Checks an identity before anything is written, so a student learns of a bad token file at
 * install time rather than in the notebook: names as the policy allows them, a curator address
 * the kernel accepts, and a token file that reads (private, one token).
 */
export function checkIdentity(identity: KernelIdentity): KernelIdentity {
  const { analyst, curator, curatorKey, dataset } = identity;
  if (!POLICY_NAME.test(analyst)) throw new BadInputError(`analyst "${analyst}": names use letters, digits, - and _ (at most 64, starting with a letter)`);
  if (dataset !== undefined && !POLICY_NAME.test(dataset)) {
    throw new BadInputError(`dataset "${dataset}": names use letters, digits, - and _ (at most 64, starting with a letter)`);
  }
  if (curator !== EMBEDDED_CURATOR && !/^(ipc:\/\/.+|tcp:\/\/[^/]+:\d+)$/.test(curator)) {
    throw new BadInputError(`curator "${curator}" must be ${EMBEDDED_CURATOR}, ipc://PATH or tcp://HOST:PORT`);
  }
  if (curator.startsWith("tcp://") && curatorKey === undefined) throw new BadInputError(`the tcp curator ${curator} needs --curator-key (its CURVE public key, z85)`);
  if (curatorKey !== undefined && !/^[0-9A-Za-z.\-:+=^!/*?&<>()[\]{}@%$#]{40}$/.test(curatorKey)) {
    throw new BadInputError("--curator-key must be a z85 CURVE public key (40 characters)");
  }
  const tokenFile = resolve(identity.tokenFile);
  readTokenFile(tokenFile);
  return { ...identity, tokenFile };
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

export function installKernelspec(opts: KernelspecOptions = {}): { dir: string; name: string; displayName: string } {
  const identity = opts.identity !== undefined ? checkIdentity(opts.identity) : undefined;
  const name = opts.name ?? (identity !== undefined ? identityKernelName(identity) : DEFAULT_KERNEL_NAME);
  const dir = kernelspecDir({ ...opts, name });
  // jupyter-server serves every file of a kernelspec directory over HTTP (its kernelspec resources):
  // a token file inside one would be readable by anyone who can reach the server.
  if (identity !== undefined && isInside(identity.tokenFile, dir)) {
    throw new BadInputError(`the token file ${identity.tokenFile} is inside the kernelspec directory ${dir}, which the notebook server publishes; keep it elsewhere`);
  }
  const spec = kernelspecJson(kernelMainScript(), identity);
  mkdirSync(dir, { recursive: true });
  writeFileSync(join(dir, "kernel.json"), JSON.stringify(spec, null, 2) + "\n");
  writeFileSync(join(dir, "logo-64x64.png"), logoPng(64));
  writeFileSync(join(dir, "logo-32x32.png"), logoPng(32));
  return { dir, name, displayName: String(spec.display_name) };
}

function isInside(file: string, dir: string): boolean {
  const rel = relative(resolve(dir), resolve(file));
  return rel !== "" && !rel.startsWith("..") && !isAbsolute(rel);
}

/** Absolute path of dist/kernel/main.js (from dist/ itself, or from sources under vitest). */
export function kernelMainScript(): string {
  for (const rel of ["./main.js", "../dist/kernel/main.js"]) {
    const p = fileURLToPath(new URL(rel, import.meta.url));
    if (existsSync(p)) return p;
  }
  throw new BadInputError("dist/kernel/main.js not found: build with `npx tsc -p .` first");
}
