/**
 * Where the curator is: environment variables, a JSON or YAML config file, or the embedded default;
 * and the analyst's token read from a private file.
 */
import { spawnSync } from "node:child_process";
import { chmodSync, chownSync, mkdtempSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { dirname, join } from "node:path";
import { describe, expect, test } from "vitest";
import { resolveConfig } from "../../runtime/api/config.js";
import { MAX_TOKEN_FILE_BYTES, readTokenFile } from "../../runtime/api/token-file.js";
import { BadInputError } from "../../runtime/errors.js";

const TOKEN_FILE_JS = join(import.meta.dirname, "../../dist/runtime/api/token-file.js"); // the built module (npm run build)
const KEY = "rq:rM>}U?@Lns47E1%kR.o@n%FcmmsL/@{H8]yf7"; // the example server public key of the zmq_curve(7) manual page

function file(name: string, text: string): string {
  const dir = mkdtempSync(join(tmpdir(), "hush-cfg-"));
  const p = join(dir, name);
  writeFileSync(p, text);
  return p;
}

describe("resolveConfig", () => {
  test("nothing configured: the embedded default", () => {
    expect(resolveConfig({})).toEqual({ mode: "embedded" });
    expect(resolveConfig({ HUSH_CURATOR: "  " })).toEqual({ mode: "embedded" });
    expect(resolveConfig({ HUSH_DEMO_DIR: "/tmp/d" })).toEqual({ mode: "embedded", demoDir: "/tmp/d" });
    expect(resolveConfig({ HUSH_ANALYST: "kit", HUSH_TOKEN: "t" })).toEqual({ mode: "embedded", analyst: "kit", token: "t" });
  });

  test("environment variables", () => {
    expect(resolveConfig({ HUSH_CURATOR: "ipc:///run/hush.sock", HUSH_ANALYST: "ada", HUSH_TOKEN: "s3cret" })).toEqual({
      mode: "remote",
      address: "ipc:///run/hush.sock",
      analyst: "ada",
      token: "s3cret",
      origin: "environment",
    });
    expect(resolveConfig({ HUSH_CURATOR: "tcp://10.0.0.5:7070", HUSH_CURATOR_KEY: KEY, HUSH_ANALYST: "ada", HUSH_TOKEN: "t" })).toMatchObject({
      mode: "remote",
      address: "tcp://10.0.0.5:7070",
      curveServerKey: KEY,
    });
  });

  test("a YAML or JSON config file, with variables overriding it", () => {
    const yaml = file("hush.yaml", `curator: tcp://curator.example:7070\ncuratorKey: "${KEY}"\nanalyst: ada\ntoken: from-file\n`);
    expect(resolveConfig({ HUSH_CONFIG: yaml })).toEqual({
      mode: "remote",
      address: "tcp://curator.example:7070",
      curveServerKey: KEY,
      analyst: "ada",
      token: "from-file",
      origin: `config file ${yaml}`,
    });
    expect(resolveConfig({ HUSH_CONFIG: yaml, HUSH_TOKEN: "from-env" })).toMatchObject({ token: "from-env" });
    const json = file("hush.json", JSON.stringify({ HUSH_CURATOR: "ipc:///x.sock", HUSH_ANALYST: "ben", HUSH_TOKEN: "j" }));
    expect(resolveConfig({ HUSH_CONFIG: json })).toMatchObject({ mode: "remote", address: "ipc:///x.sock", analyst: "ben", token: "j" });
  });

  test.each([
    [{ HUSH_CURATOR: "ipc:///x.sock", HUSH_ANALYST: "ada" }, /HUSH_TOKEN or HUSH_TOKEN_FILE \(token\) is missing/],
    [{ HUSH_CURATOR: "ipc:///x.sock" }, /HUSH_ANALYST \(analyst\) and HUSH_TOKEN or HUSH_TOKEN_FILE \(token\) are missing/],
    [{ HUSH_CURATOR: "http://x", HUSH_ANALYST: "a", HUSH_TOKEN: "t" }, /must be ipc:\/\/PATH or tcp:\/\/HOST:PORT/],
    [{ HUSH_CURATOR: "tcp://h:1", HUSH_ANALYST: "a", HUSH_TOKEN: "t" }, /needs HUSH_CURATOR_KEY/],
    [{ HUSH_ANALYST: "a" }, /set both HUSH_ANALYST and a token \(HUSH_TOKEN or HUSH_TOKEN_FILE\)/],
    [{ HUSH_CONFIG: "/nonexistent/hush.yaml" }, /cannot be read/],
  ])("refuses %j", (env, msg) => {
    expect(() => resolveConfig(env)).toThrow(BadInputError);
    expect(() => resolveConfig(env)).toThrow(msg);
  });

  test("refuses malformed config files, naming the problem", () => {
    expect(() => resolveConfig({ HUSH_CONFIG: file("a.json", "{nope") })).toThrow(/not valid JSON/);
    expect(() => resolveConfig({ HUSH_CONFIG: file("a.yaml", "- 1\n- 2\n") })).toThrow(/must hold an object/);
    expect(() => resolveConfig({ HUSH_CONFIG: file("a.yaml", "curatr: ipc:///x\n") })).toThrow(/unknown setting "curatr"/);
    expect(() => resolveConfig({ HUSH_CONFIG: file("a.yaml", "curator: 5\n") })).toThrow(/must be a non-empty string/);
  });
});

/** A token file with the given text and mode, in its own temp directory. */
function tokenFile(text: string | Buffer, mode = 0o600): string {
  const p = file("token", "");
  writeFileSync(p, text);
  chmodSync(p, mode); // chmod after writing: the umask cannot widen or narrow what the test means
  return p;
}

describe("readTokenFile", () => {
  test("one token on one line, with or without a final newline (LF or CRLF)", () => {
    expect(readTokenFile(tokenFile("demo-kit-not-secret\n"))).toBe("demo-kit-not-secret");
    expect(readTokenFile(tokenFile("demo-kit-not-secret"))).toBe("demo-kit-not-secret");
    expect(readTokenFile(tokenFile("  demo-kit-not-secret \r\n\n"))).toBe("demo-kit-not-secret");
    expect(readTokenFile(tokenFile("t", 0o400))).toBe("t");
  });

  // Any access for group or others is refused (as OpenSSH refuses a private key that is too open).
  test.each([0o644, 0o640, 0o604, 0o620, 0o602, 0o610, 0o601, 0o666, 0o777].map((m) => [m.toString(8), m] as const))("refuses mode %s, naming the fix and not the token", (_, mode) => {
    const p = tokenFile("demo-kit-not-secret\n", mode);
    let err: unknown;
    try {
      readTokenFile(p);
    } catch (e: unknown) {
      err = e;
    }
    expect(err).toBeInstanceOf(BadInputError);
    expect((err as Error).message).toContain(`chmod 600 ${p}`);
    expect((err as Error).message).toContain(`mode ${mode.toString(8)}`);
    expect((err as Error).message).not.toContain("demo-kit-not-secret");
  });

  test("refuses a missing file, a directory and a FIFO (without waiting for a writer)", { timeout: 30_000 }, () => {
    expect(() => readTokenFile("/nonexistent/hush/kit.token")).toThrow(/does not exist/);
    const dir = mkdtempSync(join(tmpdir(), "hush-tokdir-"));
    chmodSync(dir, 0o700);
    expect(() => readTokenFile(dir)).toThrow(/not a regular file/);
    const fifo = join(dir, "fifo");
    const made = spawnSync("mkfifo", ["-m", "600", fifo]);
    expect(made.status).toBe(0);
    // In a child process with a timeout: a blocking open would hang this worker, not fail the test.
    const probe = `import("${TOKEN_FILE_JS}").then((m) => m.readTokenFile(process.argv[1])).catch((e) => console.log(e.message))`;
    const r = spawnSync(process.execPath, ["-e", probe, fifo], { encoding: "utf8", timeout: 20_000 });
    expect(r.signal, "reading a FIFO must not wait for a writer").toBeNull();
    expect(r.stdout).toMatch(/not a regular file/);
  });

  test.each([
    ["", /is empty/],
    ["\n \n\t\n", /is empty/],
    ["demo-kit-not-secret\nsecond-line\n", /2 non-empty lines/],
    ["token with spaces", /characters a token does not have/],
    ["tök", /characters a token does not have/],
    ["tok\u0000en", /characters a token does not have/],
    ["x".repeat(MAX_TOKEN_FILE_BYTES + 1), /at most 4096 bytes/],
  ])("refuses content %j", (text, msg) => {
    const p = tokenFile(text);
    expect(() => readTokenFile(p)).toThrow(BadInputError);
    expect(() => readTokenFile(p)).toThrow(msg);
    if (text.length > 3 && text.length < 100) expect(() => readTokenFile(p)).not.toThrow(text.trim());
  });

  test("accepts a token at the size bound", () => {
    expect(readTokenFile(tokenFile("x".repeat(MAX_TOKEN_FILE_BYTES)))).toHaveLength(MAX_TOKEN_FILE_BYTES);
  });

  test.skipIf(process.getuid?.() !== 0)("refuses a file owned by another user (run as root, as CI does)", () => {
    const p = tokenFile("t\n");
    chownSync(p, 65534, 65534);
    expect(() => readTokenFile(p)).toThrow(/belongs to another user/);
  });
});

describe("resolveConfig with a token file", () => {
  test("HUSH_TOKEN_FILE gives the token, embedded (unset or `embedded`) and remote", () => {
    const p = tokenFile("demo-kit-not-secret\n");
    expect(resolveConfig({ HUSH_ANALYST: "kit", HUSH_TOKEN_FILE: p })).toEqual({ mode: "embedded", analyst: "kit", token: "demo-kit-not-secret" });
    expect(resolveConfig({ HUSH_CURATOR: "embedded", HUSH_ANALYST: "kit", HUSH_TOKEN_FILE: p })).toEqual({
      mode: "embedded",
      analyst: "kit",
      token: "demo-kit-not-secret",
    });
    expect(resolveConfig({ HUSH_CURATOR: "ipc:///x.sock", HUSH_ANALYST: "kit", HUSH_TOKEN_FILE: p })).toMatchObject({
      mode: "remote",
      analyst: "kit",
      token: "demo-kit-not-secret",
    });
  });

  test("a kernelspec's empty values clear what the server was started with", () => {
    const p = tokenFile("demo-kit-not-secret\n");
    const server = { HUSH_ANALYST: "rowan", HUSH_TOKEN: "demo-rowan-not-secret", HUSH_CONFIG: "/nonexistent/hush.yaml", HUSH_CURATOR: "ipc:///elsewhere" };
    const kernelspec = { HUSH_CURATOR: "embedded", HUSH_CURATOR_KEY: "", HUSH_ANALYST: "kit", HUSH_TOKEN_FILE: p, HUSH_TOKEN: "", HUSH_CONFIG: "" };
    // jupyter_client starts the kernel with the server's environment updated by the kernelspec's env.
    expect(resolveConfig({ ...server, ...kernelspec })).toEqual({ mode: "embedded", analyst: "kit", token: "demo-kit-not-secret" });
  });

  test("a config file's tokenFile is read beside the config file", () => {
    const p = tokenFile("from-file-token\n");
    const cfg = join(dirname(p), "hush.yaml");
    writeFileSync(cfg, "curator: ipc:///x.sock\nanalyst: ada\ntokenFile: token\n");
    expect(resolveConfig({ HUSH_CONFIG: cfg })).toMatchObject({ analyst: "ada", token: "from-file-token" });
  });

  test.each([
    [{ HUSH_ANALYST: "kit", HUSH_TOKEN: "t", HUSH_TOKEN_FILE: "/x" }, /HUSH_TOKEN or HUSH_TOKEN_FILE, not both/],
    [{ HUSH_CURATOR: "embedded", HUSH_TOKEN_FILE: "/x" }, /set both HUSH_ANALYST and a token/],
    [{ HUSH_ANALYST: "kit", HUSH_TOKEN_FILE: "/nonexistent/kit.token" }, /token file \/nonexistent\/kit.token does not exist/],
    [{ HUSH_CURATOR: "ipc:///x.sock", HUSH_ANALYST: "kit", HUSH_TOKEN_FILE: "/nonexistent/kit.token" }, /does not exist/],
  ])("refuses %j", (env, msg) => {
    expect(() => resolveConfig(env)).toThrow(BadInputError);
    expect(() => resolveConfig(env)).toThrow(msg);
  });

  test("refuses a token file others can read, through the configuration too", () => {
    const p = tokenFile("demo-kit-not-secret\n", 0o644);
    expect(() => resolveConfig({ HUSH_CURATOR: "embedded", HUSH_ANALYST: "kit", HUSH_TOKEN_FILE: p })).toThrow(/chmod 600/);
  });
});
