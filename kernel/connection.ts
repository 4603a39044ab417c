/**
 * The connection file a Jupyter client writes before starting a kernel (jupyter_client
 * "Connection files"): transport, ip, five ports, the signing key and scheme.
 */
import { readFileSync } from "node:fs";
import { BadInputError } from "../runtime/errors.js";

export type Channel = "shell" | "iopub" | "stdin" | "control" | "hb";
export const CHANNELS: readonly Channel[] = ["shell", "iopub", "stdin", "control", "hb"];

export interface ConnectionInfo {
  transport: "tcp" | "ipc";
  ip: string;
  shell_port: number;
  iopub_port: number;
  stdin_port: number;
  control_port: number;
  hb_port: number;
  key: string;
  signature_scheme: string;
  kernel_name?: string;
}

export function readConnectionFile(path: string): ConnectionInfo {
  let raw: unknown;
  try {
    raw = JSON.parse(readFileSync(path, "utf8"));
  } catch (e: unknown) {
    throw new BadInputError(`cannot read connection file ${path}`, { cause: e });
  }
  return parseConnectionInfo(raw, path);
}

export function parseConnectionInfo(raw: unknown, where = "connection info"): ConnectionInfo {
  if (raw === null || typeof raw !== "object") throw new BadInputError(`${where}: not a JSON object`);
  const o = raw as Record<string, unknown>;
  const transport = o.transport ?? "tcp";
  if (transport !== "tcp" && transport !== "ipc") {
    throw new BadInputError(`${where}: transport must be "tcp" or "ipc"`);
  }
  if (typeof o.ip !== "string" || o.ip === "") throw new BadInputError(`${where}: ip missing`);
  const ports: Record<string, number> = {};
  for (const ch of CHANNELS) {
    const v = o[`${ch}_port`];
    if (typeof v !== "number" || !Number.isInteger(v) || v < 0 || v > 65535) {
      throw new BadInputError(`${where}: ${ch}_port must be an integer port number`);
    }
    ports[ch] = v;
  }
  if (typeof o.key !== "string") throw new BadInputError(`${where}: key missing`);
  const scheme = o.signature_scheme ?? "hmac-sha256";
  if (typeof scheme !== "string") throw new BadInputError(`${where}: signature_scheme must be a string`);
  return {
    transport,
    ip: o.ip,
    shell_port: ports.shell,
    iopub_port: ports.iopub,
    stdin_port: ports.stdin,
    control_port: ports.control,
    hb_port: ports.hb,
    key: o.key,
    signature_scheme: scheme,
    kernel_name: typeof o.kernel_name === "string" ? o.kernel_name : undefined,
  };
}

/** ZeroMQ endpoint of a channel; ipc follows jupyter_client's "<ip>-<port>" path convention. */
export function endpoint(info: ConnectionInfo, ch: Channel): string {
  const port = info[`${ch}_port`];
  return info.transport === "tcp" ? `tcp://${info.ip}:${port}` : `ipc://${info.ip}-${port}`;
}
