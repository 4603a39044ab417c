/** The embedded curator: a child process on an ipc socket in a private directory. */
import { spawn } from "node:child_process";
import { createInterface } from "node:readline";
import { mkdtempSync, rmSync, statSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { dirname, join } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import { CuratorClient } from "../../runtime/client/client.js";
import { startEmbeddedCurator } from "../../runtime/client/embedded.js";
import { PolicyError } from "../../runtime/errors.js";
import { verifyReceipt, loadPublicKey } from "../../runtime/protocol/receipts.js";
import { ROOT, countPlan, makeWorkspace, requireBuild, type Workspace } from "./helpers.js";

function alive(pid: number): boolean {
  try {
    process.kill(pid, 0);
    return true;
  } catch {
    return false;
  }
}

describe("embedded curator", () => {
  let ws: Workspace;
  afterAll(() => {
    if (ws) rmSync(ws.dir, { recursive: true, force: true });
  });

  it("serves on a socket only this user can reach and stops on request", async () => {
    requireBuild();
    ws = makeWorkspace("emb", "1");
    const cur = await startEmbeddedCurator({ policyFile: ws.policyFile, stateDir: ws.dir });
    try {
      expect(cur.address).toMatch(/^ipc:\/\//);
      const sockDir = dirname(cur.address.slice("ipc://".length));
      expect(statSync(sockDir).mode & 0o777).toBe(0o700);
      expect(cur.publicKeyB64).toBe(ws.publicKeyB64);
      expect(alive(cur.pid)).toBe(true);
      const c = await CuratorClient.connect({ address: cur.address, analyst: "ada", token: ws.tokens.ada, timeoutMs: 30_000 });
      try {
        const r = await c.ask(countPlan("0.1"));
        expect(verifyReceipt(r.receipt, loadPublicKey(cur.publicKeyB64))).toEqual({ ok: true });
      } finally {
        await c.close();
      }
    } finally {
      await cur.stop();
    }
    expect(alive(cur.pid)).toBe(false);
  });

  it("does not outlive a parent killed with SIGKILL", async () => {
    requireBuild();
    const parent = spawn(
      process.execPath,
      [join(ROOT, "test/integration/fixtures/embedded-parent.mjs"), join(ROOT, "dist/runtime/client/embedded.js"), ws.policyFile, ws.dir],
      { stdio: ["ignore", "pipe", "inherit"] },
    );
    const line = await new Promise<string>((ok) => createInterface({ input: parent.stdout! }).once("line", ok));
    const { pid } = JSON.parse(line) as { pid: number };
    expect(alive(pid)).toBe(true);
    const parentGone = new Promise((ok) => parent.once("exit", ok));
    parent.kill("SIGKILL");
    await parentGone;
    // The curator is not our child, so there is no exit event to await: poll, bounded at 30 s.
    for (let i = 0; i < 600 && alive(pid); i++) await new Promise((r) => setTimeout(r, 50));
    expect(alive(pid)).toBe(false);
  });

  it("reports a broken policy as a PolicyError", async () => {
    const dir = mkdtempSync(join(tmpdir(), "hs-embbad-"));
    try {
      const bad = join(dir, "policy.yaml");
      writeFileSync(bad, "curator: {}\ndatasets: 3\n");
      const e = await startEmbeddedCurator({ policyFile: bad, stateDir: dir }).then(
        () => null,
        (x: unknown) => x,
      );
      expect(e).toBeInstanceOf(PolicyError);
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  });
});
