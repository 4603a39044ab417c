/**
 * The main job end to end: `hush demo` (what `npm run demo` runs after the build) in a temporary
 * state directory. It must run the exploration notebook through the kernel and audit it clean.
 */
import { spawnSync } from "node:child_process";
import { mkdtempSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import { OUTPUT_METADATA_KEY } from "../../runtime/protocol/messages.js";

const ROOT = resolve(import.meta.dirname, "../..");
const CLI = join(ROOT, "dist/cli/main.js");

describe("hush demo", () => {
  const dir = mkdtempSync(join(tmpdir(), "hush-demo-run-"));
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  it("runs the exploration notebook on the demo data and the audit passes (exit 0)", () => {
    const r = spawnSync(process.execPath, [CLI, "demo", "--state", dir], { cwd: ROOT, encoding: "utf8", timeout: 400_000, stdio: ["ignore", "pipe", "pipe"] });
    expect(r.status, `stdout:\n${r.stdout}\nstderr:\n${r.stderr}`).toBe(0);
    expect(r.stdout).toMatch(/^verdict: PASS \(\d+ receipts verified, spend within the cap\)$/m);
    // Each answer is printed with its error bar; the spend is printed too.
    expect(r.stdout).toContain("±");
    expect(r.stdout).toMatch(/ε/);

    const out = JSON.parse(readFileSync(join(dir, "exploration.out.ipynb"), "utf8")) as {
      cells: { cell_type: string; execution_count: number | null; outputs?: { output_type: string; metadata?: Record<string, unknown> }[] }[];
    };
    const code = out.cells.filter((c) => c.cell_type === "code");
    expect(code.every((c) => typeof c.execution_count === "number")).toBe(true);
    expect(code.flatMap((c) => c.outputs ?? []).some((o) => o.output_type === "error")).toBe(false);
    expect(code.flatMap((c) => c.outputs ?? []).filter((o) => o.metadata?.[OUTPUT_METADATA_KEY] !== undefined).length).toBeGreaterThanOrEqual(6);

    // A reviewer with only the public key reaches the same verdict.
    const audit = spawnSync(process.execPath, [CLI, "audit", join(dir, "exploration.out.ipynb"), "--key", join(dir, "keys", "curator.key.pub")], {
      encoding: "utf8",
      stdio: ["ignore", "pipe", "pipe"],
    });
    expect(audit.status).toBe(0);
    expect(audit.stdout).toMatch(/^verdict: PASS/m);
  }, 420_000);
});
