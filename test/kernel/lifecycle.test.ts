/**
 * shutdown_request (spec "Kernel shutdown"): the kernel replies, closes the cell API session and
 * exits; with restart=true the client starts a fresh process on the same connection file.
 */
import { existsSync, mkdtempSync, readFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { expect, it } from "vitest";
import { startKernel } from "./helpers.js";

it("restart gives a fresh kernel: no old variables, counting from 1", async () => {
  const k = await startKernel();
  try {
    await k.execute("const kept = 1");
    const before = k.pid;
    await k.shutdown(true);
    expect(k.pid).not.toBe(before);
    const r = await k.execute("kept");
    expect(r.reply.execution_count).toBe(1);
    expect(r.reply).toMatchObject({ status: "error", ename: "TypeScriptError" });
    expect(String(r.reply.evalue)).toMatch(/Cannot find name 'kept'/);
  } finally {
    await k.shutdown().catch(() => k.kill());
  }
});

it("shutdown replies, closes the session and ends the process", async () => {
  const closedFile = join(mkdtempSync(join(tmpdir(), "hush-life-")), "closed");
  const k = await startKernel({ env: { FAKE_SESSION_CLOSED_FILE: closedFile } });
  const pid = k.pid as number;
  // The session loads with the cell engine (after kernel_info, or on the first cell); a kernel
  // shut down before that has no session to close.
  expect((await k.execute("1")).reply.status).toBe("ok");
  const reply = await k.request("control", "shutdown_request", { restart: false });
  expect(reply).toEqual({ status: "ok", restart: false });
  await new Promise<void>((resolve) => {
    const check = () => {
      try {
        process.kill(pid, 0);
        setTimeout(check, 20);
      } catch {
        resolve();
      }
    };
    check();
  });
  expect(existsSync(closedFile) && readFileSync(closedFile, "utf8")).toBe("closed\n");
  k.kill();
});
