/**
 * interrupt_request (interrupt_mode "message"): aimed at the cell running when the control thread
 * receives it (kernel/interrupt-target.ts). It stops that cell's synchronous stretch (one SIGINT
 * while it runs inside vm, breakOnSigint), its loops after an await (interrupt points), and the
 * wait for its top-level await; it never reaches a later cell, and is dropped between cells.
 */
import { existsSync, mkdtempSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, expect, it } from "vitest";
import type { KernelProcess } from "../../kernel/client/index.js";
import { startKernel } from "./helpers.js";

let k: KernelProcess;
beforeAll(async () => {
  k = await startKernel();
});
afterAll(async () => {
  await k?.shutdown().catch(() => k.kill());
});

/** Waits for the cell's marker file (checked every 20 ms); fails at once if the cell ends first (with its reply). */
async function fileAppears(path: string, exec?: Promise<{ reply: unknown }>): Promise<void> {
  let ended: { reply: unknown } | null = null;
  void exec?.then((r) => (ended = r));
  while (!existsSync(path)) {
    if (ended !== null) throw new Error(`the cell ended before writing ${path}: ${JSON.stringify((ended as { reply: unknown }).reply)}`);
    await new Promise((r) => setTimeout(r, 20));
  }
}

it("interrupts a cell awaiting in a loop, then runs the next cell", async () => {
  let started!: () => void;
  const running = new Promise<void>((r) => (started = r));
  // The loop checks a flag: an interrupted async cell stops being awaited, but work it already
  // scheduled keeps running unless it looks at something like this.
  const exec = k.execute(
    "console.log('started'); for (let i = 0; !(globalThis as any).stopLoop; i++) await new Promise((r) => setTimeout(r, 10));",
    { onOutput: (m) => m.header.msg_type === "stream" && started() },
  );
  await running;
  await k.interrupt();
  const r = await exec;
  expect(r.reply).toMatchObject({ status: "error", ename: "Interrupted" });
  expect(r.outputs.at(-1)).toMatchObject({ output_type: "error", ename: "Interrupted" });
  expect((await k.execute("(globalThis as any).stopLoop = true; 'next'")).reply.status).toBe("ok");
});

it("interrupts a synchronous busy loop", async () => {
  const marker = join(mkdtempSync(join(tmpdir(), "hush-int-")), "spinning");
  const exec = k.execute(
    `import { writeFileSync } from "fs";\nwriteFileSync(${JSON.stringify(marker)}, "x");\nlet spins = 0;\nwhile (true) { spins++; }`,
  );
  await fileAppears(marker, exec);
  await k.interrupt();
  const r = await exec;
  expect(r.reply).toMatchObject({ status: "error", ename: "Interrupted" });
  const after = await k.execute("'still here'");
  expect(after.outputs[0]).toMatchObject({ data: { "text/plain": "'still here'" } });
});

it("interrupts a busy loop even when the interrupt lands while the cell is still compiling", async () => {
  let announced!: () => void;
  const inputSeen = new Promise<void>((r) => (announced = r));
  // Interrupting as soon as execute_input arrives usually lands while TypeScript still compiles
  // the cell, before the loop runs under vm; the control thread repeats SIGINT until it ends.
  const exec = k.execute("let n = 0;\nwhile (true) { n++; }");
  const off = k.onMessage((ch, m) => {
    if (ch === "iopub" && m.header.msg_type === "execute_input" && m.content.code === "let n = 0;\nwhile (true) { n++; }") announced();
  });
  await inputSeen;
  off();
  await k.interrupt();
  expect((await exec).reply).toMatchObject({ status: "error", ename: "Interrupted" });
});

it("answers interrupt_request when nothing runs, and keeps working", async () => {
  await k.interrupt();
  expect((await k.execute("21 * 2")).outputs[0]).toMatchObject({ data: { "text/plain": "42" } });
});

it("interrupts a busy loop that runs after an await, then answers the next cell", async () => {
  const marker = join(mkdtempSync(join(tmpdir(), "hush-int-")), "spinning");
  // After the await the loop runs as a promise continuation, outside tslab's vm call, so a SIGINT
  // alone cannot stop it; the interrupt point in the loop body does.
  const exec = k.execute(
    `import { writeFileSync } from "fs";\nawait new Promise((r) => setTimeout(r, 5));\nwriteFileSync(${JSON.stringify(marker)}, "x");\nlet spins = 0;\nwhile (true) { spins++; }`,
  );
  await fileAppears(marker, exec);
  await k.interrupt();
  const r = await exec;
  expect(r.reply).toMatchObject({ status: "error", ename: "Interrupted" });
  const after = await k.execute("'answers after an interrupted async loop'");
  expect(after.outputs[0]).toMatchObject({ data: { "text/plain": "'answers after an interrupted async loop'" } });
});

it("an interrupt point is not swallowed by a try inside the loop", async () => {
  const marker = join(mkdtempSync(join(tmpdir(), "hush-int-")), "spinning");
  const exec = k.execute(
    `import { writeFileSync } from "fs";\nawait Promise.resolve();\nwriteFileSync(${JSON.stringify(marker)}, "x");\nfor (;;) { try { for (;;) {} } catch { /* swallowed */ } }`,
  );
  await fileAppears(marker, exec);
  await k.interrupt();
  expect((await exec).reply).toMatchObject({ status: "error", ename: "Interrupted" });
  expect((await k.execute("1 + 1")).outputs[0]).toMatchObject({ data: { "text/plain": "2" } });
});

it("interrupts a loop with slow passes after an await without waiting for many passes", { timeout: 30_000 }, async () => {
  const marker = join(mkdtempSync(join(tmpdir(), "hush-int-")), "spinning");
  // Each pass blocks 200 ms in a library call (no cell loop inside it). The points read the flag
  // on every 256th pass only; the interrupt also moves the pass counter to the next check, so
  // this stops after about one pass rather than 256 (51 s, past this test's time limit).
  const exec = k.execute(
    `import { writeFileSync } from "fs";\nawait Promise.resolve();\nwriteFileSync(${JSON.stringify(marker)}, "x");\nconst cell = new Int32Array(new SharedArrayBuffer(4));\nfor (;;) Atomics.wait(cell, 0, 0, 200);`,
  );
  await fileAppears(marker, exec);
  await k.interrupt();
  expect((await exec).reply).toMatchObject({ status: "error", ename: "Interrupted" });
  expect((await k.execute("'after slow passes'")).outputs[0]).toMatchObject({ data: { "text/plain": "'after slow passes'" } });
});

it("stops a synchronous stretch that runs no loop (only the SIGINT reaches it)", async () => {
  const marker = join(mkdtempSync(join(tmpdir(), "hush-int-")), "waiting");
  // Atomics.wait without a time limit: no interrupt point runs; the SIGINT's termination wakes it.
  const exec = k.execute(
    `import { writeFileSync } from "fs";\nwriteFileSync(${JSON.stringify(marker)}, "x");\nAtomics.wait(new Int32Array(new SharedArrayBuffer(4)), 0, 0);`,
  );
  await fileAppears(marker, exec);
  await k.interrupt();
  expect((await exec).reply).toMatchObject({ status: "error", ename: "Interrupted" });
  expect((await k.execute("'after a wait'")).outputs[0]).toMatchObject({ data: { "text/plain": "'after a wait'" } });
});

/**
 * A cell that notices any interrupt mechanism: loops in its synchronous stretch (SIGINT and
 * points), a top-level await (tslab's race) and loops after it (points). Value: `tag`.
 */
const SENSITIVE = (tag: string): string =>
  `let s = 0;\nfor (let i = 0; i < 300000; i++) s += i % 7;\nawait new Promise((r) => setTimeout(r, 20));\nfor (let i = 0; i < 300000; i++) s += i % 7;\n${JSON.stringify(tag)}`;

it("an interrupt answered after its cell ended does not stop the next cell", { timeout: 120_000 }, async () => {
  for (let round = 0; round < 8; round++) {
    const a = await k.execute(`let t${round} = 0;\nfor (let i = 0; i < ${1000 * round}; i++) t${round} += i;\nt${round}`);
    expect(a.reply.status).toBe("ok");
    // Sent once the cell's reply is in: no cell runs, so the kernel drops it.
    await k.interrupt();
    const b = await k.execute(SENSITIVE(`b${round}`));
    expect(b.reply, `round ${round}`).toMatchObject({ status: "ok" });
    expect(b.outputs[0]).toMatchObject({ data: { "text/plain": `'b${round}'` } });
  }
});

it("many interrupts around a cell's end stop at most that cell, never the next one", { timeout: 180_000 }, async () => {
  let stopped = 0;
  const rounds = 12;
  for (let round = 0; round < rounds; round++) {
    // A: a synchronous loop of varied length, an await, and a loop after it; interrupts are sent
    // 0 to 60 ms after it, some landing in each part, some after it ended.
    const spin = 20_000 * (round % 7);
    const a = k.execute(
      `let u = 0;\nfor (let i = 0; i < ${spin}; i++) u += i % 3;\nawait new Promise((r) => setTimeout(r, ${round % 4}));\nfor (let i = 0; i < ${spin}; i++) u += i % 3;\nu`,
    );
    const interrupts = [0, 3, 10, 25, 60].map((ms) => new Promise((r) => setTimeout(r, ms)).then(() => k.interrupt()));
    const ra = await a;
    if (ra.reply.status === "error") {
      expect(ra.reply).toMatchObject({ ename: "Interrupted" });
      stopped++;
    }
    await Promise.all(interrupts);
    // Every interrupt has been answered: the next cell must run to its end.
    const b = await k.execute(SENSITIVE(`after ${round}`));
    expect(b.reply, `round ${round}`).toMatchObject({ status: "ok" });
    expect(b.outputs[0]).toMatchObject({ data: { "text/plain": `'after ${round}'` } });
  }
  // The interrupts did reach cells (those sent while A ran).
  expect(stopped).toBeGreaterThan(0);
});
