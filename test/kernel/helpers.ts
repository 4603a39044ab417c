/** Shared setup for the kernel protocol tests: a built kernel started with the fake cell API. */
import { fileURLToPath } from "node:url";
import { KernelProcess, type StartOptions } from "../../kernel/client/index.js";

export const FAKE_SESSION = fileURLToPath(new URL("./fake-session.mjs", import.meta.url));

export function startKernel(opts: StartOptions = {}): Promise<KernelProcess> {
  return KernelProcess.start({ ...opts, env: { HUSH_KERNEL_SESSION_MODULE: FAKE_SESSION, ...opts.env } });
}
