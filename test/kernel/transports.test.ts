/** The same core exchange over ipc as over tcp (the other files run on tcp). */
import { afterAll, beforeAll, expect, it } from "vitest";
import type { KernelProcess } from "../../kernel/client/index.js";
import { startKernel } from "./helpers.js";

let k: KernelProcess;
beforeAll(async () => {
  k = await startKernel({ transport: "ipc" });
});
afterAll(async () => {
  await k?.shutdown().catch(() => k.kill());
});

it("uses ipc endpoints from the connection file", () => {
  expect(k.info.transport).toBe("ipc");
});

it("executes, completes, beats and interrupts over ipc", async () => {
  await k.execute("const overIpc = 5");
  const r = await k.execute("console.log('ipc'); overIpc * 2");
  expect(r.outputs).toEqual([
    { output_type: "stream", name: "stdout", text: "ipc\n" },
    { output_type: "execute_result", execution_count: 2, data: { "text/plain": "10" }, metadata: {} },
  ]);
  expect((await k.request("shell", "complete_request", { code: "overI", cursor_pos: 5 })).matches).toContain("overIpc");
  expect((await k.heartbeat()).toString()).toBe("ping");
  await k.interrupt();
  expect((await k.execute("'after'")).reply.status).toBe("ok");
});
