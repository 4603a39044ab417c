/**
 * @jupyterlab/services (the client JupyterLab itself uses) drives our kernel through a real
 * `jupyter server` on 127.0.0.1, a free port and a token of this test.
 */
import { spawn, type ChildProcess } from "node:child_process";
import { randomBytes } from "node:crypto";
import { afterAll, expect, it } from "vitest";
import { KernelManager, ServerConnection, type KernelMessage } from "@jupyterlab/services";
import { freePorts } from "../../kernel/client/index.js";
import { findPython, kernelEnv } from "./tools.js";

const python = findPython(["jupyter_server"], "jupyter server + @jupyterlab/services");
let server: ChildProcess | null = null;
afterAll(() => {
  server?.kill("SIGTERM");
});

/** Resolves once the server answers /api/status (polled every 200 ms, bounded by the test timeout). */
async function serverUp(baseUrl: string, token: string): Promise<void> {
  for (;;) {
    try {
      const r = await fetch(`${baseUrl}api/status`, { headers: { Authorization: `token ${token}` } });
      if (r.ok) return;
    } catch {
      // not listening yet
    }
    if (server?.exitCode !== null) throw new Error("jupyter server exited");
    await new Promise((r) => setTimeout(r, 200));
  }
}

it.skipIf(!python)("starts a kernel through the server, executes, and reads outputs", { timeout: 300_000 }, async () => {
  const { env, root, kernelName } = kernelEnv();
  const [port] = await freePorts(1);
  const token = randomBytes(16).toString("hex");
  server = spawn(
    python as string,
    [
      "-m",
      "jupyter_server",
      "--no-browser",
      "--allow-root", // CI containers run as root
      `--ServerApp.ip=127.0.0.1`,
      `--ServerApp.port=${port}`,
      "--ServerApp.port_retries=0",
      `--ServerApp.token=${token}`,
      `--ServerApp.root_dir=${root}`,
    ],
    { env, stdio: ["ignore", "ignore", "pipe"] },
  );
  let log = "";
  server.stderr?.on("data", (d: Buffer) => (log += d.toString("utf8")));
  const baseUrl = `http://127.0.0.1:${port}/`;
  try {
    await serverUp(baseUrl, token);
  } catch (e) {
    console.error(log);
    throw e;
  }

  const serverSettings = ServerConnection.makeSettings({ baseUrl, wsUrl: `ws://127.0.0.1:${port}/`, token });
  const manager = new KernelManager({ serverSettings });
  await manager.ready;
  const kernel = await manager.startNew({ name: kernelName });
  try {
    const info = await kernel.info;
    expect(info.implementation).toBe("hush");
    expect(info.language_info.name).toBe("typescript");

    const outputs: KernelMessage.IIOPubMessage[] = [];
    const future = kernel.requestExecute({ code: "const shared = 20; console.log('via server'); shared + 22" });
    future.onIOPub = (msg) => {
      if (msg.header.msg_type !== "status") outputs.push(msg);
    };
    const reply = await future.done;
    expect(reply.content.status).toBe("ok");
    const byType = Object.fromEntries(outputs.map((m) => [m.header.msg_type, m.content as any]));
    expect(byType.stream).toMatchObject({ name: "stdout", text: "via server\n" });
    expect(byType.execute_result.data).toEqual({ "text/plain": "42" });

    const complete = await kernel.requestComplete({ code: "sha", cursor_pos: 3 });
    expect(complete.content.status === "ok" && complete.content.matches).toContain("shared");

    await kernel.interrupt();
    await kernel.restart();
    const after = kernel.requestExecute({ code: "typeof globalThis" });
    expect((await after.done).content.status).toBe("ok");
  } finally {
    await kernel.shutdown().catch(() => {});
    kernel.dispose();
    manager.dispose();
  }
});
