/**
 * Acceptance (issue 10, "Identity from Jupyter"): a student follows the README's course steps
 * word for word, then the course notebook runs as that student through a real `jupyter server`
 * (and the classic notebook server, when installed) driven by @jupyterlab/services (the client
 * JupyterLab uses), on the kernel its metadata names; and headless with the README's `hush run` line.
 *
 * The README block is read from README.md and run with bash in a fresh HOME (so `hush install`
 * writes the per-user kernelspec there, where the server looks); `hush` on PATH is the built CLI,
 * as `npm link` would put it. The block's last line opens the notebook in a notebook server; the
 * test starts the server itself (same HOME, a free port, its own token) and opens a session on the
 * notebook, then executes its code cells in order as Run All would.
 *
 * The server is started with a *different* identity in its environment (researcher rowan's demo
 * token, and a HUSH_CONFIG that does not exist): the releases must still be kit's, which shows that
 * the identity comes from the kernel the notebook picked, not from the server's environment.
 * HUSH_DEMO_DIR only says where the embedded demo keeps its data, key and ledger (a temp dir here).
 */
import { spawnSync } from "node:child_process";
import { chmodSync, cpSync, mkdirSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { KernelManager, KernelSpecManager, ServerConnection, SessionManager, type KernelMessage } from "@jupyterlab/services";
import type { Receipt } from "../../runtime/protocol/messages.js";
import { OUTPUT_METADATA_KEY } from "../../runtime/protocol/messages.js";
import { auditNotebook } from "../../cli/audit/checks.js";
import type { NbCell, Notebook } from "../../cli/audit/notebook.js";
import { loadPublicKey, verifyReceipt } from "../../runtime/protocol/receipts.js";
import { findPython, run, startJupyterServer, type RunningServer } from "./tools.js";

const ROOT = resolve(import.meta.dirname, "../..");
const CLI = join(ROOT, "dist", "cli", "main.js");
const NOTEBOOK = "notebooks/course-assignment.ipynb";
const python = findPython(["jupyter_server"], "course notebook under jupyter server");
// The classic notebook server (Debian jupyter-notebook, 6.x) is optional: run there too when present.
const classicPython = findPython(["notebook"], "course notebook under the classic notebook server");
const SERVERS = [
  { what: "jupyter server", python, classic: false },
  { what: "the classic notebook server", python: classicPython, classic: true },
];

/** One iopub output message as nbformat 4 stores it in a saved notebook. */
function savedOutput(m: KernelMessage.IIOPubMessage, count: number | null): NonNullable<NbCell["outputs"]>[number] {
  const c = m.content as Record<string, unknown>;
  switch (m.header.msg_type) {
    case "execute_result":
      return { output_type: "execute_result", data: c.data, metadata: c.metadata ?? {}, execution_count: count } as NonNullable<NbCell["outputs"]>[number];
    case "display_data":
      return { output_type: "display_data", data: c.data, metadata: c.metadata ?? {} } as NonNullable<NbCell["outputs"]>[number];
    case "stream":
      return { output_type: "stream", name: c.name, text: c.text } as NonNullable<NbCell["outputs"]>[number];
    default:
      return { output_type: "error", ename: c.ename, evalue: c.evalue, traceback: c.traceback } as NonNullable<NbCell["outputs"]>[number];
  }
}

/** The fenced block after "The student version" in README.md, as lines. */
function readmeCourseSteps(): string[] {
  const readme = readFileSync(join(ROOT, "README.md"), "utf8");
  const at = readme.indexOf("The student version");
  expect(at, "README has a student version section").toBeGreaterThan(0);
  const block = /```\n([\s\S]*?)```/.exec(readme.slice(at));
  expect(block, "the student version section has a fenced block of commands").not.toBeNull();
  return block![1].split("\n").filter((l) => l.trim() !== "");
}

/** The headless command the student version gives after "Headless, the same identity runs with". */
function readmeHeadlessStep(): string {
  const readme = readFileSync(join(ROOT, "README.md"), "utf8");
  const section = readme.slice(readme.indexOf("The student version"));
  const m = /Headless, the same identity runs with\s+`([^`]+)`/.exec(section);
  expect(m, "the student version names a headless command").not.toBeNull();
  return m![1];
}

const work = mkdtempSync(join(tmpdir(), "hush-course-"));
const home = join(work, "home");
const bin = join(work, "bin");
/** Each server's embedded demo keeps its own ledger, so the runs are independent. */
const demoDir = (classic: boolean): string => join(work, classic ? "demo-classic" : "demo");
const servers: RunningServer[] = [];
afterAll(() => {
  for (const s of servers) s.stop();
  rmSync(work, { recursive: true, force: true });
});

/** A student's shell: a fresh HOME, `hush` on PATH, no Jupyter or hush settings inherited. */
function studentEnv(): NodeJS.ProcessEnv {
  const env: NodeJS.ProcessEnv = { ...process.env, HOME: home, PATH: `${bin}:${process.env.PATH ?? ""}`, PYTHONDONTWRITEBYTECODE: "1" };
  for (const k of Object.keys(env)) if (k.startsWith("JUPYTER_") || k.startsWith("HUSH_") || k.startsWith("XDG_")) delete env[k];
  return env;
}

describe.skipIf(!python && !classicPython)("the course notebook, as the README tells a student to run it", () => {
  // The README's steps up to opening the notebook: save the token, install the student's kernel.
  beforeAll(() => {
    mkdirSync(home, { recursive: true });
    mkdirSync(bin, { recursive: true });
    writeFileSync(join(bin, "hush"), `#!/bin/sh\nexec "${process.execPath}" "${CLI}" "$@"\n`);
    chmodSync(join(bin, "hush"), 0o755);
    const steps = readmeCourseSteps();
    expect(steps[steps.length - 1]).toBe(`jupyter notebook ${NOTEBOOK}`);
    const setup = spawnSync("bash", ["-euc", steps.slice(0, -1).join("\n")], { cwd: ROOT, env: studentEnv(), encoding: "utf8", timeout: 60_000 });
    expect(setup.status, setup.stderr).toBe(0);
  });

  for (const { what, python: py, classic } of SERVERS) {
    it.skipIf(py === null)(`runs as kit on visits-course through ${what}, with no token in kernel.json`, { timeout: 600_000 }, async () => {
      // What `hush install` wrote: found by Jupyter under the student's HOME, naming a token file.
      const specFile = join(home, ".local", "share", "jupyter", "kernels", "hush-visits-course", "kernel.json");
      const specText = readFileSync(specFile, "utf8");
      expect(specText).not.toContain("demo-kit-not-secret");
      expect(JSON.parse(specText).env).toMatchObject({ HUSH_ANALYST: "kit", HUSH_CURATOR: "embedded", HUSH_TOKEN: "" });

      const nb = JSON.parse(readFileSync(join(ROOT, NOTEBOOK), "utf8"));
      const kernelName: string = nb.metadata.kernelspec.name;
      expect(kernelName).toBe("hush-visits-course");

      const env: NodeJS.ProcessEnv = {
        ...studentEnv(),
        HUSH_DEMO_DIR: demoDir(classic),
        // A different identity in the server's environment, which the student's kernel must not use.
        HUSH_ANALYST: "rowan",
        HUSH_TOKEN: "demo-rowan-not-secret",
        HUSH_CONFIG: join(work, "no-such-config.yaml"),
      };
      const root = mkdtempSync(join(work, "repo-"));
      mkdirSync(join(root, "notebooks"), { recursive: true });
      cpSync(join(ROOT, NOTEBOOK), join(root, NOTEBOOK)); // the server opens a copy: nothing is written into the repository
      const server = await startJupyterServer(py as string, { env, root, classic });
      servers.push(server);
      const serverSettings = ServerConnection.makeSettings({ baseUrl: server.baseUrl, wsUrl: server.wsUrl, token: server.token });

      const specs = new KernelSpecManager({ serverSettings });
      await specs.ready;
      expect(specs.specs?.kernelspecs[kernelName]?.display_name).toBe("TypeScript (hush · kit on visits-course)");

      const kernels = new KernelManager({ serverSettings });
      const sessions = new SessionManager({ kernelManager: kernels, serverSettings });
      await sessions.ready;
      const session = await sessions.startNew({ path: NOTEBOOK, name: "course-assignment.ipynb", type: "notebook", kernel: { name: kernelName } });
      const receipts: Receipt[] = [];
      const texts: string[] = [];
      // The notebook as the frontend saves it after Run All (nbformat 4 outputs from the iopub
      // messages), so the audit can hold it to the student as a teaching assistant would.
      const saved: Notebook = { ...nb, cells: [] };
      try {
        expect(session.kernel?.name).toBe(kernelName);
        for (const cell of nb.cells as NbCell[]) {
          if (cell.cell_type !== "code") {
            saved.cells.push(cell);
            continue;
          }
          const code = Array.isArray(cell.source) ? cell.source.join("") : String(cell.source);
          const future = session.kernel!.requestExecute({ code });
          const outputs: KernelMessage.IIOPubMessage[] = [];
          future.onIOPub = (msg) => {
            if (["execute_result", "display_data", "stream", "error"].includes(msg.header.msg_type)) outputs.push(msg);
          };
          const reply = await future.done;
          const shown = outputs.map((m) => JSON.stringify(m.content)).join("\n");
          expect(reply.content.status, `cell ${code}\n${shown}\n${server.log().slice(-2000)}`).toBe("ok");
          const count = (reply.content as { execution_count?: number }).execution_count ?? null;
          saved.cells.push({ ...cell, execution_count: count, outputs: outputs.map((m) => savedOutput(m, count)) });
          for (const m of outputs) {
            const c = m.content as { data?: Record<string, unknown>; metadata?: Record<string, unknown> };
            if (typeof c.data?.["text/plain"] === "string") texts.push(c.data["text/plain"]);
            const meta = c.metadata?.[OUTPUT_METADATA_KEY] as { receipt?: Receipt } | undefined;
            if (meta?.receipt) receipts.push(meta.receipt);
          }
        }
      } finally {
        await session.shutdown();
        session.dispose();
        sessions.dispose();
        kernels.dispose();
      }

      // Four releases: Q1 count, Q2 means by district, Q3 counts by reason, Q4 median.
      expect(receipts.length).toBe(4);
      const key = loadPublicKey(readFileSync(join(demoDir(classic), "keys", "curator.key.pub"), "utf8"));
      for (const r of receipts) {
        expect(r.analyst).toBe("kit");
        expect(r.dataset).toBe("visits-course");
        expect(verifyReceipt(r, key)).toEqual({ ok: true });
      }
      expect(texts.join("\n")).toMatch(/privacy loss on visits-course \(population clinic-patients\): ε [\d.]+ of 1 used/); // the running spend is against kit's cap of ε = 1
      // The saved notebook passes the audit held to the student and the course dataset.
      const report = auditNotebook(saved, key, { analyst: "kit", dataset: "visits-course" });
      expect(report.findings).toEqual([]);
      expect(report.notes).toEqual([]);
    });
  }

  it("runs headless as kit with the README's hush run line", { timeout: 600_000 }, async () => {
    const line = readmeHeadlessStep();
    const cwd = join(work, "headless");
    mkdirSync(join(cwd, "notebooks"), { recursive: true });
    cpSync(join(ROOT, NOTEBOOK), join(cwd, NOTEBOOK));
    const env = { ...studentEnv(), HUSH_DEMO_DIR: join(work, "demo-headless") };
    const r = await run("bash", ["-euc", line], { env, cwd, timeoutMs: 500_000 });
    expect(r.code, r.stdout + r.stderr).toBe(0);
    const out = JSON.parse(readFileSync(join(cwd, "notebooks", "course-assignment.out.ipynb"), "utf8"));
    const key = loadPublicKey(readFileSync(join(work, "demo-headless", "keys", "curator.key.pub"), "utf8"));
    const receipts: Receipt[] = out.cells
      .flatMap((c: { outputs?: { metadata?: Record<string, { receipt?: Receipt }> }[] }) => c.outputs ?? [])
      .map((o: { metadata?: Record<string, { receipt?: Receipt }> }) => o.metadata?.[OUTPUT_METADATA_KEY]?.receipt)
      .filter((x: Receipt | undefined): x is Receipt => x !== undefined);
    expect(receipts.length).toBe(4);
    for (const rc of receipts) {
      expect([rc.analyst, rc.dataset]).toEqual(["kit", "visits-course"]);
      expect(verifyReceipt(rc, key)).toEqual({ ok: true });
    }
  });
});
