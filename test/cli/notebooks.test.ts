/**
 * `hush notebooks` (demo layout, issue 11): the tracked notebooks are clean templates and users
 * work in copies in a git-ignored folder, so running and saving a demo notebook changes no tracked
 * file. Through the built CLI (dist/cli/main.js).
 */
import { spawnSync } from "node:child_process";
import { existsSync, mkdtempSync, readFileSync, readdirSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import { afterAll, describe, expect, it } from "vitest";

const ROOT = resolve(import.meta.dirname, "../..");
const CLI = join(ROOT, "dist", "cli", "main.js");
const work = mkdtempSync(join(tmpdir(), "hush-notebooks-"));
afterAll(() => rmSync(work, { recursive: true, force: true }));

const hush = (args: string[]) => spawnSync(process.execPath, [CLI, ...args], { cwd: ROOT, encoding: "utf8", timeout: 30_000 });
const templates = readdirSync(join(ROOT, "notebooks")).filter((f) => f.endsWith(".ipynb")).sort();

describe.skipIf(!existsSync(CLI))("hush notebooks", () => {
  it("the tracked templates carry no outputs", () => {
    expect(templates).toEqual(["course-assignment.ipynb", "exploration.ipynb"]);
    for (const f of templates) {
      const nb = JSON.parse(readFileSync(join(ROOT, "notebooks", f), "utf8")) as { cells: { outputs?: unknown[]; execution_count?: unknown }[] };
      for (const c of nb.cells) {
        expect(c.outputs ?? [], f).toEqual([]);
        expect(c.execution_count ?? null, f).toBeNull();
      }
    }
  });

  it("copies the templates, then keeps the user's copies as they are", () => {
    const to = join(work, "mine");
    const first = hush(["notebooks", "--to", to]);
    expect(first.status, first.stderr).toBe(0);
    for (const f of templates) {
      expect(readFileSync(join(to, f), "utf8")).toBe(readFileSync(join(ROOT, "notebooks", f), "utf8"));
      expect(first.stdout).toContain(`copied  ${join(to, f)}`);
    }
    expect(first.stdout).toMatch(/open them with: jupyter notebook /);
    writeFileSync(join(to, "exploration.ipynb"), "my work");
    const second = hush(["notebooks", "--to", to]);
    expect(second.status).toBe(0);
    expect(second.stdout).toContain(`kept    ${join(to, "exploration.ipynb")}`);
    expect(readFileSync(join(to, "exploration.ipynb"), "utf8")).toBe("my work");
  });

  it("refuses to copy into the templates' own folder", () => {
    const file = join(work, "a-file");
    writeFileSync(file, "");
    expect(hush(["notebooks", "--to", file]).stderr).toMatch(/is a file, not a folder/);
    for (const to of [join(ROOT, "notebooks"), join(ROOT, "notebooks", "x"), ROOT]) {
      const r = hush(["notebooks", "--to", to]);
      expect(r.status, to).toBe(2);
      expect(r.stderr).toMatch(/outside the tracked notebooks/);
    }
  });

  it("git ignores the default workspace, executed copies, checkpoints and the demo state", () => {
    for (const path of ["workspace/exploration.ipynb", "notebooks/exploration.out.ipynb", "notebooks/.ipynb_checkpoints/exploration-checkpoint.ipynb", ".hush/data/visits.csv", ".hush/demo/keys/curator.key"]) {
      const r = spawnSync("git", ["check-ignore", "-q", path], { cwd: ROOT });
      expect(r.status, path).toBe(0);
    }
    expect(spawnSync("git", ["check-ignore", "-q", "notebooks/exploration.ipynb"], { cwd: ROOT }).status).toBe(1);
  });
});
