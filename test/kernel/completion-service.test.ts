/**
 * The language service on its own thread (kernel/completion-service.ts with the built worker,
 * dist/kernel/completion-thread.js): synchronous conversion for tslab's executor, asynchronous
 * completion and signature help, and a new worker after the old one died.
 */
import { existsSync } from "node:fs";
import { fileURLToPath } from "node:url";
import { afterAll, beforeAll, expect, it } from "vitest";
import { ThreadedService } from "../../kernel/completion-service.js";

const WORKER = new URL("../../dist/kernel/completion-thread.js", import.meta.url);
let svc: ThreadedService;

async function ready(s: ThreadedService): Promise<void> {
  while (!s.ready()) await new Promise((r) => setTimeout(r, 50));
}

beforeAll(async () => {
  if (!existsSync(fileURLToPath(WORKER))) throw new Error("build first: npm run build");
  svc = new ThreadedService(WORKER);
  // Completion before the service is built answers null at once (the kernel's quick path answers).
  expect(svc.ready()).toBe(false);
  expect(await svc.complete("", "Math.fl", 7)).toBeNull();
  await ready(svc);
}, 120_000);
afterAll(() => svc?.close());

it("converts a cell synchronously, with diagnostics for type errors", () => {
  const ok = svc.convert("", "const n: number = 2;\nn * 21");
  expect(ok.diagnostics).toEqual([]);
  expect(ok.output).toContain("n * 21");
  const bad = svc.convert("", 'const s: number = "x";');
  expect(bad.diagnostics.map((d) => d.messageText).join()).toMatch(/not assignable to type 'number'/);
});

it("completes and shows signatures inside parentheses", async () => {
  expect((await svc.complete("", "Math.fl", 7))?.candidates).toEqual(["floor"]);
  expect(await svc.inspect("", "Math.max(", 9)).toContain("max(...values: number[]): number");
  // Earlier cells' declarations are passed along with each request.
  expect((await svc.complete("export declare const earlierValue: string;\n", "earlierValue.toUpp", 18))?.candidates).toEqual(["toUpperCase"]);
});

it("replaces a worker that died, and converts again once the new one is built", async () => {
  const dead = (svc as unknown as { worker: { terminate(): Promise<number> } }).worker;
  await dead.terminate();
  // The exit event arrives on this thread; the service starts a new worker.
  await new Promise((r) => setTimeout(r, 100));
  await ready(svc);
  expect(svc.convert("", "1 + 1").output).toContain("1 + 1");
}, 120_000);
