/**
 * @jupyterlab/services (the client JupyterLab itself uses) drives our kernel through a real
 * `jupyter server` on 127.0.0.1, a free port and a token of this test.
 */
import { afterAll, expect, it } from "vitest";
import { KernelManager, ServerConnection, type KernelMessage } from "@jupyterlab/services";
import { findPython, kernelEnv, startJupyterServer, type RunningServer } from "./tools.js";

const python = findPython(["jupyter_server"], "jupyter server + @jupyterlab/services");
let server: RunningServer | null = null;
afterAll(() => {
  server?.stop();
});

it.skipIf(!python)("starts a kernel through the server, executes, and reads outputs", { timeout: 300_000 }, async () => {
  const { env, root, kernelName } = kernelEnv();
  server = await startJupyterServer(python as string, { env, root });

  const serverSettings = ServerConnection.makeSettings({ baseUrl: server.baseUrl, wsUrl: server.wsUrl, token: server.token });
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
