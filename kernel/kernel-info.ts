/** kernel_info_reply content (messaging spec 5.3 "Kernel info"). */
import { existsSync, readFileSync } from "node:fs";
import { TYPESCRIPT_VERSION } from "./execution.js";
import { PROTOCOL_VERSION, type JsonObject } from "./wire.js";

// Runs from kernel/ (sources under vitest) or dist/kernel/ (built): the package root is one or two up.
const pkgUrl = [new URL("../package.json", import.meta.url), new URL("../../package.json", import.meta.url)].find((u) =>
  existsSync(u),
);
const pkg = (pkgUrl ? JSON.parse(readFileSync(pkgUrl, "utf8")) : { version: "0.0.0" }) as { version: string };

export const KERNEL_VERSION = pkg.version;

export function kernelInfo(): JsonObject {
  return {
    status: "ok",
    protocol_version: PROTOCOL_VERSION,
    implementation: "hush",
    implementation_version: KERNEL_VERSION,
    language_info: {
      name: "typescript",
      version: TYPESCRIPT_VERSION,
      mimetype: "text/typescript",
      file_extension: ".ts",
      pygments_lexer: "typescript",
      codemirror_mode: "typescript",
      nbconvert_exporter: "script",
    },
    banner:
      `hush ${KERNEL_VERSION}: TypeScript cells over sealed datasets; every released aggregate carries ` +
      `noise, an error bar and the running privacy loss (TypeScript ${TYPESCRIPT_VERSION}, Node ${process.versions.node})`,
    debugger: false,
    help_links: [],
  };
}
