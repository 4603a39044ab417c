/** Kernelspec install (jupyter_client "Kernel specs") and the logo PNGs. */
import { mkdtempSync, readFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { inflateSync } from "node:zlib";
import { describe, expect, it } from "vitest";
import { installKernelspec, kernelspecDir } from "../../kernel/kernelspec.js";
import { crc32 } from "../../kernel/png.js";

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
