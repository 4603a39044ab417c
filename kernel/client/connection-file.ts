/**
 * Writes a connection file for a kernel we start: loopback tcp with five ports picked by binding
 * port 0 (or ipc paths in a temp dir), and a random signing key.
 */
import { randomBytes } from "node:crypto";
import { mkdtempSync, writeFileSync } from "node:fs";
import { createServer } from "node:net";
import { tmpdir } from "node:os";
import { join } from "node:path";
import type { ConnectionInfo } from "../connection.js";

/** Ports the OS reports free right now (each bound once to port 0, then released). */
export async function freePorts(n: number, host = "127.0.0.1"): Promise<number[]> {
  const servers = await Promise.all(
    Array.from({ length: n }, () => {
      const s = createServer();
      return new Promise<ReturnType<typeof createServer>>((resolve, reject) => {
        s.once("error", reject);
        s.listen(0, host, () => resolve(s));
      });
    }),
  );
  const ports = servers.map((s) => {
    const a = s.address();
    if (!a || typeof a === "string") throw new Error("no tcp address");
    return a.port;
  });
  await Promise.all(servers.map((s) => new Promise((r) => s.close(r))));
  return ports;
}

export async function writeConnectionFile(
  opts: { dir?: string; transport?: "tcp" | "ipc" } = {},
): Promise<{ path: string; info: ConnectionInfo }> {
  const d = opts.dir ?? mkdtempSync(join(tmpdir(), "hush-kernel-"));
  const ipc = opts.transport === "ipc";
  // ipc endpoints are files "<ip>-<port>" (jupyter_client's convention), here inside our temp dir.
  const [shell, iopub, stdin, control, hb] = ipc ? [1, 2, 3, 4, 5] : await freePorts(5);
  const info: ConnectionInfo = {
    transport: ipc ? "ipc" : "tcp",
    ip: ipc ? join(d, "kernel") : "127.0.0.1",
    shell_port: shell,
    iopub_port: iopub,
    stdin_port: stdin,
    control_port: control,
    hb_port: hb,
    key: randomBytes(32).toString("hex"),
    signature_scheme: "hmac-sha256",
    kernel_name: "hush",
  };
  const path = join(d, "connection.json");
  writeFileSync(path, JSON.stringify(info, null, 2), { mode: 0o600 });
  return { path, info };
}
