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

/**
 * Help menu entries (spec "Kernel info": help_links). They point at this install's own copy of the
 * documents, as file: URLs (the project has no hosted site; a clone moved elsewhere is found again
 * after `hush install`). The classic notebook and JupyterLab open them in a new tab; a browser may
 * refuse file: links from a page served over http, in which case the path in the URL is the file.
 */
export function helpLinks(root: URL | undefined = pkgUrl ? new URL(".", pkgUrl) : undefined): Array<{ text: string; url: string }> {
  if (!root) return [];
  const links = [
    { text: "hush: getting started (README)", file: "README.md" },
    { text: "hush: methods, privacy loss and error bars", file: "docs/methods.md" },
  ];
  return links.filter((l) => existsSync(new URL(l.file, root))).map((l) => ({ text: l.text, url: new URL(l.file, root).href }));
}

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
    help_links: helpLinks(),
  };
}
