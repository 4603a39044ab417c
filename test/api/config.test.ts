/**
 * Where the curator is: environment variables, a JSON or YAML config file, or the embedded default.
 */
import { mkdtempSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { describe, expect, test } from "vitest";
import { resolveConfig } from "../../runtime/api/config.js";
import { BadInputError } from "../../runtime/errors.js";

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
    [{ HUSH_CURATOR: "ipc:///x.sock", HUSH_ANALYST: "ada" }, /HUSH_TOKEN \(token\) is missing/],
    [{ HUSH_CURATOR: "ipc:///x.sock" }, /HUSH_ANALYST \(analyst\) and HUSH_TOKEN \(token\) are missing/],
    [{ HUSH_CURATOR: "http://x", HUSH_ANALYST: "a", HUSH_TOKEN: "t" }, /must be ipc:\/\/PATH or tcp:\/\/HOST:PORT/],
    [{ HUSH_CURATOR: "tcp://h:1", HUSH_ANALYST: "a", HUSH_TOKEN: "t" }, /needs HUSH_CURATOR_KEY/],
    [{ HUSH_ANALYST: "a" }, /set both HUSH_ANALYST and HUSH_TOKEN/],
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
