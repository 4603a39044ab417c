/**
 * The `hush` command as a user runs it: the built dist/cli/main.js in a child process, real files,
 * a real curator. Exit codes are part of the contract (cli/main.ts).
 */
import { spawn, spawnSync, type StdioOptions } from "node:child_process";
import { existsSync, mkdtempSync, readFileSync, rmSync, statSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import { createInterface } from "node:readline";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { DEMO_ANALYSTS, ensureDemoData, type DemoData } from "../../notebooks/scenario/generate.js";
import { CuratorClient } from "../../runtime/client/client.js";
import { verifyToken } from "../../runtime/curator/tokens.js";
import { loadPublicKey } from "../../runtime/protocol/receipts.js";

/** Standard input closed, output captured (a mutable array: StdioOptions does not take a readonly tuple). */
const NO_STDIN: StdioOptions = ["ignore", "pipe", "pipe"];

const CLI = resolve(import.meta.dirname, "../../dist/cli/main.js");

function cli(args: string[], input?: string) {
  const r = spawnSync(process.execPath, [CLI, ...args], {
    encoding: "utf8",
    timeout: 120_000,
    ...(input === undefined ? { stdio: NO_STDIN } : { input }),
  });
  return { code: r.status, stdout: r.stdout, stderr: r.stderr };
}

let dir: string;
beforeAll(() => {
  if (!existsSync(CLI)) throw new Error("dist/cli/main.js is missing: run `npx tsc -p .` (npm test does) first");
  dir = mkdtempSync(join(tmpdir(), "hush-cli-"));
});
afterAll(() => rmSync(dir, { recursive: true, force: true }));

describe("hush (usage)", () => {
  it("prints help with exit 0 and refuses an unknown command with exit 2", () => {
    const help = cli(["--help"]);
    expect(help.code).toBe(0);
    for (const c of ["install", "serve", "keygen", "token", "run", "audit", "ledger", "demo"]) expect(help.stdout).toContain(c);
    expect(cli(["frobnicate"]).code).toBe(2);
    expect(cli(["audit", "x.ipynb"]).code).toBe(2); // --key is required
  });
});

describe("hush keygen and token", () => {
  it("writes a key pair once and refuses to overwrite it (exit 2)", () => {
    const key = join(dir, "k", "curator.key");
    const r = cli(["keygen", "--out", key]);
    expect(r.code).toBe(0);
    expect((statSync(key).mode & 0o777).toString(8)).toBe("600");
    const b64 = /public key \(base64\) (\S+)/.exec(r.stdout)![1];
    expect(loadPublicKey(readFileSync(`${key}.pub`, "utf8")).export({ type: "spki", format: "der" }).toString("base64")).toBe(b64);
    const again = cli(["keygen", "--out", key]);
    expect(again.code).toBe(2);
    expect(again.stderr).toMatch(/already exists/);
  });

  it("hashes a piped token, and makes a fresh random one when none is piped", async () => {
    const piped = cli(["token", "--analyst", "ada"], "my-own-token\n");
    expect(piped.code).toBe(0);
    expect(piped.stdout).toContain("my-own-token");
    const hash = /ada: \{ token: "([^"]+)" \}/.exec(piped.stdout)![1];
    expect(await verifyToken(hash, "my-own-token")).toBe(true);
    expect(await verifyToken(hash, "my-own-tokem")).toBe(false);

    const fresh = cli(["token", "--analyst", "ben"]);
    expect(fresh.code).toBe(0);
    const token = /not shown again\): (\S+)/.exec(fresh.stdout)![1];
    expect(token).toMatch(/^[A-Za-z0-9_-]{43}$/); // 32 random bytes, base64url
    expect(await verifyToken(/ben: \{ token: "([^"]+)" \}/.exec(fresh.stdout)![1], token)).toBe(true);
    expect(cli(["token", "--analyst", "1bad"]).code).toBe(2);
  });
});

describe("hush install", () => {
  it("writes the kernelspec under --prefix", () => {
    const r = cli(["install", "--prefix", join(dir, "venv")]);
    expect(r.code).toBe(0);
    const spec = JSON.parse(readFileSync(join(dir, "venv", "share", "jupyter", "kernels", "hush", "kernel.json"), "utf8")) as Record<string, unknown>;
    expect(spec.display_name).toBe("TypeScript (hush)");
    expect(spec.language).toBe("typescript");
  });
});

describe("hush serve and hush ledger on the demo policy", () => {
  let demo: DemoData;
  beforeAll(async () => {
    demo = await ensureDemoData({ dir: join(dir, "demo") });
  });

  async function serve(listen: string): Promise<{ lines: string[]; stop(signal: NodeJS.Signals): Promise<{ code: number | null; out: string }> }> {
    const child = spawn(process.execPath, [CLI, "serve", "--policy", demo.policyFile, "--listen", listen], { stdio: ["ignore", "pipe", "pipe"] });
    const lines: string[] = [];
    const exited = new Promise<number | null>((r) => child.once("exit", (code) => r(code)));
    await new Promise<void>((ready, fail) => {
      child.once("exit", (code) => fail(new Error(`hush serve exited early (${code}): ${lines.join("\n")}`)));
      createInterface({ input: child.stdout }).on("line", (l) => {
        lines.push(l);
        if (l.startsWith("ready")) ready();
      });
    });
    return {
      lines,
      stop: async (signal) => {
        child.kill(signal);
        return { code: await exited, out: lines.join("\n") };
      },
    };
  }

  it("serves over tcp with CURVE, answers a pinned client, and stops cleanly on SIGTERM", async () => {
    const s = await serve("tcp://127.0.0.1:0");
    const address = /HUSH_CURATOR=(\S+)/.exec(s.lines.join("\n"))![1];
    const curve = /HUSH_CURATOR_KEY=(\S+)/.exec(s.lines.join("\n"))![1];
    expect(address).toMatch(/^tcp:\/\/127\.0\.0\.1:\d+$/);
    const client = await CuratorClient.connect({ address, curveServerKey: curve, analyst: "kit", token: DEMO_ANALYSTS.kit.token });
    try {
      const cat = await client.catalogue();
      expect(cat.datasets.map((d) => d.name)).toContain("visits-course");
      expect(s.lines.join("\n")).toContain(cat.publicKey);
      await client.ask({ v: 1, dataset: "visits-course", measure: { kind: "count" }, privacy: { epsilon: "0.05" } });
      await client.ask({ v: 1, dataset: "visits-course", measure: { kind: "count" }, privacy: { epsilon: "1/8" } });
    } finally {
      await client.close();
    }
    const { code, out } = await s.stop("SIGTERM");
    expect(code).toBe(0);
    expect(out).toMatch(/stopped$/);
  });

  it("shows the steward each analyst's spend, exactly as the ledger holds it, without writing to it", () => {
    const ledgerFile = join(demo.dir, "state", "ledger.sqlite");
    const before = readFileSync(ledgerFile);
    const r = cli(["ledger", "--policy", demo.policyFile, "--json"]);
    expect(r.code).toBe(0);
    const lines = JSON.parse(r.stdout) as { analyst: string; dataset: string; releases: number; spent: string; remaining: string }[];
    const kit = lines.find((l) => l.analyst === "kit" && l.dataset === "visits-course")!;
    // 0.05 + 1/8 = 7/40, in exact rationals.
    expect(kit).toMatchObject({ releases: 2, spent: "7/40", remaining: "33/40" });
    expect(lines.find((l) => l.analyst === "rowan" && l.dataset === "visits")).toMatchObject({ releases: 0, spent: "0" });
    expect(readFileSync(ledgerFile).equals(before)).toBe(true);
    const table = cli(["ledger", "--policy", demo.policyFile, "--analyst", "kit"]);
    expect(table.stdout).toMatch(/kit\s+visits-course\s+2\s+ε 0\.175\s+ε 1\s+ε 0\.825/);
    expect(cli(["ledger", "--policy", join(dir, "missing.yaml")]).code).toBe(2);
  });
});

describe("hush run", () => {
  it("executes cells in order, writes outputs and counts, stops at the first failure unless --keep-going", () => {
    const nb = {
      nbformat: 4,
      nbformat_minor: 5,
      metadata: {},
      cells: [
        { cell_type: "markdown", metadata: {}, source: "plain TypeScript, no dataset" },
        { cell_type: "code", metadata: {}, source: "const x: number = 6 * 7;\nconsole.log(`x is ${x}`);", outputs: [], execution_count: null },
        { cell_type: "code", metadata: {}, source: 'throw new Error("boom")', outputs: [], execution_count: null },
        { cell_type: "code", metadata: {}, source: "x + 1", outputs: [], execution_count: null },
      ],
    };
    const file = join(dir, "plain.ipynb");
    writeFileSync(file, JSON.stringify(nb));
    const stop = cli(["run", file, "-o", join(dir, "stop.ipynb")]);
    expect(stop.code).toBe(1);
    expect(stop.stdout).toMatch(/cell 2\/3 \[2\] FAILED Error: boom/);
    const stopped = JSON.parse(readFileSync(join(dir, "stop.ipynb"), "utf8")) as typeof nb & { cells: { outputs?: { text?: string; output_type: string }[]; execution_count?: number | null }[] };
    expect(stopped.cells[1].execution_count).toBe(1);
    expect(stopped.cells[1].outputs![0]).toMatchObject({ output_type: "stream", text: "x is 42\n" });
    expect(stopped.cells[3].execution_count).toBeNull();

    const keep = cli(["run", file, "-o", join(dir, "keep.ipynb"), "--keep-going"]);
    expect(keep.code).toBe(1);
    const kept = JSON.parse(readFileSync(join(dir, "keep.ipynb"), "utf8")) as { cells: { outputs: { data?: Record<string, string> }[] }[] };
    expect(kept.cells[3].outputs[0].data!["text/plain"]).toBe("43");
    expect(cli(["run", join(dir, "absent.ipynb")]).code).toBe(2);
  });
});
