/**
 * Start-up order: the kernel answers kernel_info before it loads the cell API session and builds
 * the TypeScript program (seconds), so a client sees it up early; requests that need neither
 * are served meanwhile. A session module that never loads makes the order observable without
 * timing anything.
 */
import { fileURLToPath } from "node:url";
import { expect, it } from "vitest";
import { startKernel } from "./helpers.js";

const HANGING_SESSION = fileURLToPath(new URL("./hanging-session.mjs", import.meta.url));

it("answers kernel_info, is_complete and history while the cell engine is not ready", async () => {
  // start() resolves only on a kernel_info_reply and its idle (jupyter_client wait_for_ready).
  const k = await startKernel({ env: { HUSH_KERNEL_SESSION_MODULE: HANGING_SESSION } });
  try {
    const info = await k.request("shell", "kernel_info_request", {});
    expect(info).toMatchObject({ status: "ok", implementation: "hush", language_info: { name: "typescript" } });
    expect(String((info.language_info as { version: string }).version)).toMatch(/^\d+\.\d+\.\d+$/);
    expect(await k.request("shell", "is_complete_request", { code: "for (;;) {" })).toMatchObject({ status: "incomplete" });
    expect(await k.request("shell", "is_complete_request", { code: "await (await p).q()" })).toEqual({ status: "complete" });
    expect(await k.request("shell", "history_request", { hist_access_type: "tail", n: 1, output: false, raw: true })).toEqual({
      status: "ok",
      history: [],
    });
  } finally {
    k.kill();
  }
});
