/**
 * `jupyter console` with the hush kernel (README, "The classic notebook and jupyter console"):
 * Debian's jupyter-console, a temp JUPYTER_PATH with the real kernelspec, the embedded demo in a
 * temp HUSH_DEMO_DIR, cells fed on stdin. Releases, refusals and the budget print as text/plain.
 */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { spawn } from "node:child_process";
import { afterAll, expect, it } from "vitest";
import { installKernelspec } from "../../kernel/kernelspec.js";
import { findPython } from "./tools.js";

const python = findPython(["jupyter_console"], "jupyter console (apt-get install -y jupyter-console)");
const work = mkdtempSync(join(tmpdir(), "hush-console-"));
afterAll(() => rmSync(work, { recursive: true, force: true }));

const CELLS = [
  "await hush.budget()",
  'const visits = await hush.open("visits")',
  "await visits.count({ within: 25 })",
  "await visits.count({ epsilon: 0.05 })",
  "await visits.count({ within: 25, atMost: 1 })",
];

it.skipIf(!python)("runs hush cells in jupyter console and prints their text views", { timeout: 180_000 }, async () => {
  const prefix = join(work, "prefix");
  installKernelspec({ prefix, name: "hush" });
  const env: NodeJS.ProcessEnv = { ...process.env };
  for (const k of Object.keys(env)) if (k.startsWith("JUPYTER_") || k.startsWith("HUSH_")) delete env[k];
  Object.assign(env, {
    JUPYTER_PATH: join(prefix, "share", "jupyter"),
    JUPYTER_RUNTIME_DIR: join(work, "runtime"),
    JUPYTER_CONFIG_DIR: join(work, "config"),
    JUPYTER_DATA_DIR: join(work, "data"),
    HUSH_DEMO_DIR: join(work, "demo"),
    PYTHONDONTWRITEBYTECODE: "1",
  });
  const child = spawn(python as string, ["-m", "jupyter_console", "--kernel", "hush", "--simple-prompt"], { env, cwd: work, stdio: ["pipe", "pipe", "pipe"] });
  let out = "";
  child.stdout.on("data", (d: Buffer) => (out += d.toString("utf8")));
  child.stderr.on("data", (d: Buffer) => (out += d.toString("utf8")));
  const done = new Promise<number | null>((r) => child.on("close", (code) => r(code)));
  const killer = setTimeout(() => child.kill("SIGKILL"), 170_000);
  child.stdin.end(`${CELLS.join("\n")}\nexit\n`);
  const code = await done;
  clearTimeout(killer);
  expect(code, out).toBe(0);
  expect(out).toMatch(/privacy budget of rowan: your spend so far, from the curator's ledger/);
  expect(out).toMatch(/an error bar of ±25 \(95%\) costs ε 0\.939298; an accuracy-first ask needs an upper bound/);
  expect(out).toMatch(/count = [\d,]+ ± \d+ · cost ε=0\.05\n  at least 95% of such answers fall within ±\d+ of the true count/);
  // The bounded ask spends its price, 0.939298 on top of 0.05.
  expect(out).toMatch(/cost ε=0\.939298/);
  expect(out).toMatch(/Shutting down kernel/);
});
