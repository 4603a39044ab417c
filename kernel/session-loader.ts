/**
 * Loads the cell API session (kernel/hush-session.ts, owned by the cell-API side) at run time, so
 * the kernel still starts when that module is absent or fails to load: cells then run without the
 * `hush` object and results fall back to plain-text rendering.
 *
 * HUSH_KERNEL_SESSION_MODULE names another module with the same export (tests use a small fake).
 */
import { pathToFileURL } from "node:url";
import { errorText, kernelLog } from "./log.js";

export interface MimeBundle {
  data: Record<string, unknown>;
  metadata: Record<string, unknown>;
}

export interface CellHost {
  display(bundle: MimeBundle, opts?: { displayId?: string; update?: boolean }): void;
}

/** The part of HushSession the kernel uses (structural, so no compile-time import is needed). */
export interface CellSession {
  readonly api: object | null;
  render(value: unknown): Promise<MimeBundle | null>;
  afterCell(): Promise<MimeBundle | null>;
  typeDeclarations(): string;
  /**
   * Names for completion inside a string argument of `receiver.method("…")`: dataset names on the
   * `hush` object, column names on a dataset handle (public schema only); null when none apply.
   * Optional: a session without it gets no name completion in strings.
   */
  publicNames?(receiver: unknown, method: string): Promise<string[] | null>;
  close(): Promise<void>;
}

interface SessionModule {
  HushSession: { create(host: CellHost, env?: NodeJS.ProcessEnv): CellSession };
}

export const NULL_SESSION: CellSession = {
  api: null,
  render: async () => null,
  afterCell: async () => null,
  typeDeclarations: () => "",
  close: async () => {},
};

export async function loadSession(host: CellHost, env: NodeJS.ProcessEnv = process.env): Promise<CellSession> {
  const override = env.HUSH_KERNEL_SESSION_MODULE;
  const spec = override ? pathToFileURL(override).href : new URL("./hush-session.js", import.meta.url).href;
  let mod: unknown;
  try {
    mod = await import(spec);
  } catch (e: unknown) {
    kernelLog(`cell API unavailable (${errorText(e)}); cells run without \`hush\``);
    return NULL_SESSION;
  }
  if (!isSessionModule(mod)) {
    kernelLog(`cell API module ${spec} has no HushSession.create; cells run without \`hush\``);
    return NULL_SESSION;
  }
  try {
    return mod.HushSession.create(host, env);
  } catch (e: unknown) {
    kernelLog(`cell API failed to start (${errorText(e)}); cells run without \`hush\``);
    return NULL_SESSION;
  }
}

function isSessionModule(m: unknown): m is SessionModule {
  if (m === null || typeof m !== "object" || !("HushSession" in m)) return false;
  const s = (m as { HushSession: unknown }).HushSession;
  return typeof s === "function" && typeof (s as { create?: unknown }).create === "function";
}
