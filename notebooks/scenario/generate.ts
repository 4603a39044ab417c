/**
 * Makes the demo ready to run: the invented visits CSV, a curator signing key and the demo policy
 * in a state directory. The kernel's embedded default and `hush demo` both call ensureDemoData.
 *
 * Several processes may call it at once (parallel kernels in tests), so every file appears by an
 * atomic rename: a reader sees either nothing or the whole file, never half of one, and two
 * racing writers never leave a key that does not match its policy.
 */
import { existsSync, mkdirSync, readFileSync, renameSync, rmSync, writeFileSync } from "node:fs";
import { randomBytes } from "node:crypto";
import { dirname, join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import { generateCuratorKey } from "../../runtime/curator/keys.js";
import { BadInputError } from "../../runtime/errors.js";
import { DEFAULT_SEED, generateVisitsCsv } from "./visits.js";

export { DEFAULT_SEED, DEFAULT_PATIENTS, DEFAULT_VISITS, generateVisitsCsv } from "./visits.js";

/**
 * DEMO ONLY: these tokens are printed in the README and their hashes sit in notebooks/demo/policy.yaml.
 * A real deployment makes its own with `hush token`.
 */
export const DEMO_ANALYSTS = {
  rowan: { token: "demo-rowan-not-secret", dataset: "visits", role: "researcher" },
  kit: { token: "demo-kit-not-secret", dataset: "visits-course", role: "student" },
} as const;
export type DemoAnalyst = keyof typeof DEMO_ANALYSTS;

export interface DemoData {
  policyFile: string;
  /** The default researcher analyst and its demo token. */
  analyst: string;
  token: string;
  /** The state directory holding policy.yaml, keys/ and state/. */
  dir: string;
  dataFile: string;
  /** The curator's public key (SPKI PEM), what a reviewer passes to `hush audit --key`. */
  publicKeyFile: string;
}

/** The repository root: the nearest directory above this file whose package.json is hush's. */
export function repoRoot(): string {
  let dir = dirname(fileURLToPath(import.meta.url));
  for (;;) {
    const pkg = join(dir, "package.json");
    if (existsSync(pkg)) {
      try {
        if ((JSON.parse(readFileSync(pkg, "utf8")) as { name?: unknown }).name === "hush") return dir;
      } catch {
        // not ours; keep climbing
      }
    }
    const up = dirname(dir);
    if (up === dir) throw new BadInputError("demo data: cannot find the hush repository root above this file");
    dir = up;
  }
}

function tempSibling(path: string): string {
  return `${path}.tmp-${process.pid}-${randomBytes(4).toString("hex")}`;
}

function errCode(e: unknown): string | undefined {
  return e !== null && typeof e === "object" && "code" in e ? String((e as { code: unknown }).code) : undefined;
}

/** Writes the demo CSV if it is missing; returns its path. */
export function ensureVisitsCsv(file: string, seed = DEFAULT_SEED): string {
  if (existsSync(file)) return file;
  mkdirSync(dirname(file), { recursive: true });
  const tmp = tempSibling(file);
  writeFileSync(tmp, generateVisitsCsv({ seed }));
  renameSync(tmp, file); // same bytes from every writer, so the last rename wins harmlessly
  return file;
}

/** The demo policy text for a state directory: the committed template with `source` made absolute. */
export function demoPolicyText(root: string, dataFile: string): string {
  const template = readFileSync(join(root, "notebooks", "demo", "policy.yaml"), "utf8");
  return template.replace(/^(\s*source:\s*)\.\.\/data\/visits\.csv\s*$/gm, (_m, lead: string) => `${lead}${JSON.stringify(dataFile)}`);
}

export async function ensureDemoData(opts: { dir?: string } = {}): Promise<DemoData> {
  const root = repoRoot();
  // Outside the notebook tree and under a hidden, git-ignored folder: a notebook server started in
  // the clone neither lists nor serves it (DEVELOPERS.md, "Demo layout").
  const dataFile = ensureVisitsCsv(join(root, ".hush", "data", "visits.csv"));
  const dir = resolve(opts.dir ?? join(root, ".hush", "demo"));
  const policyFile = join(dir, "policy.yaml");
  const keyFile = join(dir, "keys", "curator.key");
  const result: DemoData = {
    policyFile,
    analyst: "rowan",
    token: DEMO_ANALYSTS.rowan.token,
    dir,
    dataFile,
    publicKeyFile: `${keyFile}.pub`,
  };
  if (existsSync(policyFile) && existsSync(keyFile)) return result;

  // Build the whole state directory aside, then move it into place in one step.
  const tmp = tempSibling(dir);
  mkdirSync(join(tmp, "state"), { recursive: true, mode: 0o700 });
  try {
    generateCuratorKey(join(tmp, "keys", "curator.key"));
    writeFileSync(join(tmp, "policy.yaml"), demoPolicyText(root, dataFile));
    mkdirSync(dirname(dir), { recursive: true });
    try {
      renameSync(tmp, dir); // succeeds onto a missing or empty directory
    } catch (e: unknown) {
      const code = errCode(e);
      if (code !== "ENOTEMPTY" && code !== "EEXIST") throw e;
      // Someone else finished first (or the directory holds other files): use what is there.
      if (!existsSync(policyFile) || !existsSync(keyFile)) {
        throw new BadInputError(`demo state directory ${dir} exists but has no policy.yaml and keys/curator.key; remove it or pick another`);
      }
    }
  } finally {
    rmSync(tmp, { recursive: true, force: true });
  }
  return result;
}
