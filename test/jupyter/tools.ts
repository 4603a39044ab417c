/**
 * Finds Python with Debian's Jupyter tools and installs our kernelspec into a temp prefix for
 * them. When the tools are absent, tests print a visible SKIP line and skip.
 */
import { spawn, spawnSync } from "node:child_process";
import { randomBytes } from "node:crypto";
import { mkdtempSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { fileURLToPath } from "node:url";
import { freePorts } from "../../kernel/client/index.js";
import { installKernelspec } from "../../kernel/kernelspec.js";

export const FAKE_SESSION = fileURLToPath(new URL("../kernel/fake-session.mjs", import.meta.url));
export const HERE = fileURLToPath(new URL(".", import.meta.url));

const INSTALL_HINT =
  "install with: apt-get install -y jupyter-client python3-jupyter-kernel-test python3-nbclient jupyter-server python3-nbformat";

/** A Python interpreter that can import every module listed, or null (with a SKIP line). */
export function findPython(modules: string[], what: string): string | null {
  const candidates = [process.env.HUSH_PYTHON, "python3", "/usr/bin/python3"].filter((c): c is string => !!c);
  for (const py of candidates) {
    const r = spawnSync(py, ["-c", modules.map((m) => `import ${m}`).join("; ")], { stdio: "ignore" });
    if (r.status === 0) return py;
  }
  console.warn(`SKIP: ${what} needs Python modules ${modules.join(", ")} (${INSTALL_HINT})`);
  return null;
}

/** Kernelspec "hush" under a fresh prefix; env for Jupyter tools that should find it. */
export function kernelEnv(): { env: NodeJS.ProcessEnv; root: string; kernelName: string } {
  const root = mkdtempSync(join(tmpdir(), "hush-jupyter-"));
  installKernelspec({ prefix: root, name: "hush" });
  return {
    root,
    kernelName: "hush",
    env: {
      ...process.env,
      JUPYTER_PATH: join(root, "share", "jupyter"),
      JUPYTER_RUNTIME_DIR: join(root, "runtime"),
      JUPYTER_CONFIG_DIR: join(root, "config"),
      JUPYTER_DATA_DIR: join(root, "data"),
      HUSH_KERNEL_NAME: "hush",
      HUSH_KERNEL_SESSION_MODULE: FAKE_SESSION,
      PYTHONDONTWRITEBYTECODE: "1",
    },
  };
}

export interface RunResult {
  code: number | null;
  stdout: string;
  stderr: string;
}

/** Runs a command to completion (killed after `timeoutMs`). */
export function run(cmd: string, args: string[], opts: { env: NodeJS.ProcessEnv; cwd?: string; timeoutMs: number }): Promise<RunResult> {
  return new Promise((resolve) => {
    const child = spawn(cmd, args, { env: opts.env, cwd: opts.cwd, stdio: ["ignore", "pipe", "pipe"] });
    let stdout = "";
    let stderr = "";
    child.stdout.on("data", (d: Buffer) => (stdout += d.toString("utf8")));
    child.stderr.on("data", (d: Buffer) => (stderr += d.toString("utf8")));
    const timer = setTimeout(() => child.kill("SIGKILL"), opts.timeoutMs);
    child.on("close", (code) => {
      clearTimeout(timer);
      resolve({ code, stdout, stderr });
    });
  });
}

export interface RunningServer {
  baseUrl: string;
  wsUrl: string;
  token: string;
  /** The server's stderr so far, for failure messages. */
  log(): string;
  stop(): void;
}

/**
 * Starts `python -m jupyter_server` (or the classic `python -m notebook`) on 127.0.0.1, a free port and a fresh token, and resolves once
 * /api/status answers (polled every 200 ms; the calling test's timeout bounds the wait).
 */
export async function startJupyterServer(
  python: string,
  opts: { env: NodeJS.ProcessEnv; root: string; /** the classic notebook server (module `notebook`, 6.x) instead of jupyter_server */ classic?: boolean },
): Promise<RunningServer> {
  const [port] = await freePorts(1);
  const token = randomBytes(16).toString("hex");
  const app = opts.classic ? "NotebookApp" : "ServerApp";
  const server = spawn(
    python,
    [
      "-m",
      opts.classic ? "notebook" : "jupyter_server",
      "--no-browser",
      "--allow-root", // CI containers run as root
      `--${app}.ip=127.0.0.1`,
      `--${app}.port=${port}`,
      `--${app}.port_retries=0`,
      `--${app}.token=${token}`,
      opts.classic ? `--NotebookApp.notebook_dir=${opts.root}` : `--ServerApp.root_dir=${opts.root}`,
    ],
    { env: opts.env, stdio: ["ignore", "ignore", "pipe"] },
  );
  let log = "";
  server.stderr?.on("data", (d: Buffer) => (log += d.toString("utf8")));
  const running: RunningServer = {
    baseUrl: `http://127.0.0.1:${port}/`,
    wsUrl: `ws://127.0.0.1:${port}/`,
    token,
    log: () => log,
    stop: () => {
      if (server.exitCode === null) server.kill("SIGTERM");
    },
  };
  for (;;) {
    try {
      const r = await fetch(`${running.baseUrl}api/status`, { headers: { Authorization: `token ${token}` } });
      if (r.ok) return running;
    } catch (e: unknown) {
      if (!(e instanceof TypeError)) throw e; // fetch's "not listening yet" is a TypeError
    }
    if (server.exitCode !== null) throw new Error(`jupyter server exited (${server.exitCode}):\n${log}`);
    await new Promise((r) => setTimeout(r, 200));
  }
}
