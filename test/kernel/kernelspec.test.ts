/** Kernelspec install (jupyter_client "Kernel specs") and the logo PNGs. */
import { spawnSync } from "node:child_process";
import { chmodSync, existsSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { inflateSync } from "node:zlib";
import { describe, expect, it } from "vitest";
import { runInstall } from "../../cli/commands/install.js";
import { KernelProcess } from "../../kernel/client/index.js";
import { installKernelspec, kernelspecDir, type KernelIdentity } from "../../kernel/kernelspec.js";
import { crc32 } from "../../kernel/png.js";
import { BadInputError } from "../../runtime/errors.js";

describe("installKernelspec", () => {
  it("writes kernel.json and logos under PREFIX/share/jupyter/kernels/<name>", () => {
    const prefix = mkdtempSync(join(tmpdir(), "hush-spec-"));
    const { dir } = installKernelspec({ prefix });
    expect(dir).toBe(join(prefix, "share", "jupyter", "kernels", "hush"));
    const spec = JSON.parse(readFileSync(join(dir, "kernel.json"), "utf8"));
    expect(spec).toMatchObject({ display_name: "TypeScript (hush)", language: "typescript", interrupt_mode: "message" });
    expect(spec.argv[0]).toBe(process.execPath);
    expect(spec.argv[1]).toMatch(/dist[/\\]kernel[/\\]main\.js$/);
    expect(spec.argv.slice(2)).toEqual(["--connection-file", "{connection_file}"]);
    for (const size of [32, 64]) expect(pngSize(readFileSync(join(dir, `logo-${size}x${size}.png`)))).toEqual([size, size]);
  });

  it("picks the per-user, JUPYTER_DATA_DIR and system directories", () => {
    expect(kernelspecDir({}, { JUPYTER_DATA_DIR: "/data/j" })).toBe("/data/j/kernels/hush");
    expect(kernelspecDir({ user: false }, {})).toBe("/usr/local/share/jupyter/kernels/hush");
    expect(kernelspecDir({ name: "hush-dev" }, { XDG_DATA_HOME: "/x" })).toMatch(/(\/x\/jupyter|Library\/Jupyter)\/kernels\/hush-dev$/);
    expect(() => kernelspecDir({ name: "../evil" }, {})).toThrow(/kernel name/);
  });
});

const TOKEN = "demo-kit-not-secret";

/** A private token file in a fresh directory (name may carry characters Jupyter treats specially). */
function privateToken(name = "kit.token", mode = 0o600, text = `${TOKEN}\n`): string {
  const dir = mkdtempSync(join(tmpdir(), "hush-tok-"));
  const p = join(dir, name);
  writeFileSync(p, text);
  chmodSync(p, mode);
  return p;
}

function kitIdentity(tokenFile: string, more: Partial<KernelIdentity> = {}): KernelIdentity {
  return { analyst: "kit", tokenFile, curator: "embedded", dataset: "visits-course", ...more };
}

describe("installKernelspec for an identity", () => {
  it("names the analyst, curator and token file; the token itself is in no file it writes", () => {
    const prefix = mkdtempSync(join(tmpdir(), "hush-spec-"));
    const tokenFile = privateToken();
    const { dir, name, displayName } = installKernelspec({ prefix, identity: kitIdentity(tokenFile) });
    expect(name).toBe("hush-visits-course");
    expect(dir).toBe(join(prefix, "share", "jupyter", "kernels", "hush-visits-course"));
    expect(displayName).toBe("TypeScript (hush · kit on visits-course)");
    const spec = JSON.parse(readFileSync(join(dir, "kernel.json"), "utf8"));
    expect(spec.display_name).toBe(displayName);
    expect(spec.argv.slice(2)).toEqual(["--connection-file", "{connection_file}"]);
    expect(spec.env).toEqual({
      HUSH_CURATOR: "embedded",
      HUSH_CURATOR_KEY: "",
      HUSH_ANALYST: "kit",
      HUSH_TOKEN_FILE: tokenFile,
      HUSH_TOKEN: "",
      HUSH_CONFIG: "",
    });
    expect(spec.metadata.hush).toMatchObject({ analyst: "kit", curator: "embedded", dataset: "visits-course" });
    for (const f of readdirSync(dir)) expect(readFileSync(join(dir, f)).includes(TOKEN), f).toBe(false);
  });

  it("is named hush-ANALYST without a dataset, or as --name says", () => {
    const prefix = mkdtempSync(join(tmpdir(), "hush-spec-"));
    const tokenFile = privateToken();
    expect(installKernelspec({ prefix, identity: { analyst: "kit", tokenFile, curator: "embedded" } })).toMatchObject({
      name: "hush-kit",
      displayName: "TypeScript (hush · kit)",
    });
    expect(installKernelspec({ prefix, name: "stats-101", identity: kitIdentity(tokenFile) }).name).toBe("stats-101");
  });

  it("refuses a token file others can read, a missing one and bad content before writing anything", () => {
    const prefix = mkdtempSync(join(tmpdir(), "hush-spec-"));
    const cases: [string, RegExp][] = [
      [privateToken("open.token", 0o644), /chmod 600/],
      [privateToken("group.token", 0o640), /chmod 600/],
      [join(prefix, "missing.token"), /does not exist/],
      [privateToken("two.token", 0o600, "a\nb\n"), /2 non-empty lines/],
    ];
    for (const [tokenFile, msg] of cases) {
      expect(() => installKernelspec({ prefix, identity: kitIdentity(tokenFile) })).toThrow(msg);
    }
    expect(existsSync(join(prefix, "share"))).toBe(false);
  });

  it("refuses a token file inside the kernelspec directory (the server publishes its files)", () => {
    const prefix = mkdtempSync(join(tmpdir(), "hush-spec-"));
    const dir = join(prefix, "share", "jupyter", "kernels", "hush-visits-course");
    mkdirSync(dir, { recursive: true });
    const tokenFile = join(dir, "token");
    writeFileSync(tokenFile, `${TOKEN}\n`, { mode: 0o600 });
    chmodSync(tokenFile, 0o600);
    expect(() => installKernelspec({ prefix, identity: kitIdentity(tokenFile) })).toThrow(/publishes/);
    expect(existsSync(join(dir, "kernel.json"))).toBe(false);
  });

  it.each([
    [{ analyst: "../kit" }, /analyst "..\/kit"/],
    [{ dataset: "visits course" }, /dataset "visits course"/],
    [{ curator: "http://x" }, /must be embedded, ipc:\/\/PATH or tcp:\/\/HOST:PORT/],
    [{ curator: "tcp://h:1" }, /needs --curator-key/],
    [{ curator: "tcp://h:1", curatorKey: "short" }, /z85/],
  ])("refuses %j", (more, msg) => {
    const prefix = mkdtempSync(join(tmpdir(), "hush-spec-"));
    expect(() => installKernelspec({ prefix, identity: kitIdentity(privateToken(), more) })).toThrow(BadInputError);
    expect(() => installKernelspec({ prefix, identity: kitIdentity(privateToken(), more) })).toThrow(msg);
  });

  // jupyter_client fills a kernelspec's env values with string.Template against the server's environment
  // (jupyter_client/provisioning/provisioner_base.py); check with Python itself that a `$` survives.
  it.skipIf(spawnSync("python3", ["-c", "import string"]).status !== 0)("escapes `$` so Jupyter's env substitution gives the path back", () => {
    const prefix = mkdtempSync(join(tmpdir(), "hush-spec-"));
    const tokenFile = privateToken("$HOME-kit.token");
    const key = "rq:rM>}U?@Lns47E1%kR.o@n%FcmmsL/@{H8]yf7"; // z85 example key of the zmq_curve(7) manual page
    const { dir } = installKernelspec({ prefix, identity: kitIdentity(tokenFile, { curator: "tcp://127.0.0.1:5555", curatorKey: key }) });
    const env = JSON.parse(readFileSync(join(dir, "kernel.json"), "utf8")).env;
    const py = "import json,sys,string,os; e=json.load(open(sys.argv[1]))['env']; print(json.dumps({k: string.Template(v).safe_substitute(os.environ) for k,v in e.items()}))";
    const r = spawnSync("python3", ["-c", py, join(dir, "kernel.json")], { encoding: "utf8", env: { ...process.env, HOME: "/elsewhere" } });
    expect(r.status, r.stderr).toBe(0);
    expect(JSON.parse(r.stdout)).toMatchObject({ HUSH_TOKEN_FILE: tokenFile, HUSH_CURATOR_KEY: key });
    expect(env.HUSH_TOKEN_FILE).toContain("$$HOME");
  });
});

describe("a kernel started with an identity's env", () => {
  // The kernelspec's env as jupyter_client applies it; the kernel reads the token file when a cell
  // first uses `hush`, so a refusal is shown in that cell (not as a kernel that dies at start).
  it("refuses a token file others can read in the cell's error, then runs once it is fixed", { timeout: 120_000 }, async () => {
    const prefix = mkdtempSync(join(tmpdir(), "hush-spec-"));
    const tokenFile = privateToken();
    const { dir } = installKernelspec({ prefix, identity: kitIdentity(tokenFile) });
    const env = JSON.parse(readFileSync(join(dir, "kernel.json"), "utf8")).env as Record<string, string>;
    chmodSync(tokenFile, 0o644);
    const kernel = await KernelProcess.start({ env: { ...env, HUSH_DEMO_DIR: join(prefix, "demo") } });
    try {
      const first = await kernel.execute('await hush.open("visits-course")');
      expect(first.reply.status).toBe("error");
      expect(String(first.reply.evalue)).toContain(`chmod 600 ${tokenFile}`);
      expect(JSON.stringify(first.outputs)).not.toContain(TOKEN);
      chmodSync(tokenFile, 0o600);
      const second = await kernel.execute('(await hush.open("visits-course")).toString()');
      expect(second.reply.status, JSON.stringify(second.outputs)).toBe("ok");
      expect(JSON.stringify(second.outputs)).toContain("as analyst kit");
    } finally {
      await kernel.shutdown();
    }
  });
});

describe("hush install", () => {
  it("needs --token-file with --analyst, and --analyst with the identity flags", () => {
    const prefix = mkdtempSync(join(tmpdir(), "hush-spec-"));
    expect(() => runInstall({ prefix, analyst: "kit" }, () => {})).toThrow(/--analyst needs --token-file/);
    expect(() => runInstall({ prefix, tokenFile: privateToken() }, () => {})).toThrow(/go with --analyst/);
    expect(() => runInstall({ prefix, dataset: "visits-course" }, () => {})).toThrow(/go with --analyst/);
  });

  it("prints the kernel's name and what to pick, not the token", () => {
    const prefix = mkdtempSync(join(tmpdir(), "hush-spec-"));
    let printed = "";
    runInstall({ prefix, analyst: "kit", tokenFile: privateToken(), dataset: "visits-course" }, (s) => (printed += s));
    expect(printed).toContain('installed kernelspec "hush-visits-course"');
    expect(printed).toContain('pick "TypeScript (hush · kit on visits-course)"');
    expect(printed).not.toContain(TOKEN);
  });
});

describe("crc32", () => {
  it("matches the standard check value", () => {
    // CRC-32/ISO-HDLC check value for "123456789" (Greg Cook's CRC catalogue): 0xCBF43926.
    expect(crc32(Buffer.from("123456789"))).toBe(0xcbf43926);
  });
});

/** Walks the chunks (checking each CRC), inflates IDAT and checks its size; returns [w, h]. */
function pngSize(png: Buffer): [number, number] {
  expect(png.subarray(0, 8)).toEqual(Buffer.from([0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a]));
  let at = 8;
  let w = 0;
  let h = 0;
  const idat: Buffer[] = [];
  for (;;) {
    const len = png.readUInt32BE(at);
    const type = png.toString("ascii", at + 4, at + 8);
    const body = png.subarray(at + 4, at + 8 + len);
    expect(png.readUInt32BE(at + 8 + len)).toBe(crc32(body));
    if (type === "IHDR") {
      w = png.readUInt32BE(at + 8);
      h = png.readUInt32BE(at + 12);
    }
    if (type === "IDAT") idat.push(png.subarray(at + 8, at + 8 + len));
    at += 12 + len;
    if (type === "IEND") break;
  }
  expect(inflateSync(Buffer.concat(idat)).length).toBe(h * (1 + w * 4));
  return [w, h];
}
