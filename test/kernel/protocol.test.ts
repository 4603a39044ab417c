/**
 * The kernel over real ZeroMQ sockets, driven by our KernelProcess client: one kernel shared by
 * the tests of this file (each test uses names of its own). Expected behaviour is taken from the
 * Jupyter messaging protocol 5.3 (jupyter-client.readthedocs.io, "Messaging in Jupyter").
 */
import { existsSync, mkdtempSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import type { KernelProcess } from "../../kernel/client/index.js";
import { request, serialize, Signer, type Message } from "../../kernel/wire.js";
import { startKernel } from "./helpers.js";

let k: KernelProcess;
beforeAll(async () => {
  k = await startKernel();
});
afterAll(async () => {
  await k?.shutdown().catch(() => k.kill());
});

const types = (ms: Message[]) => ms.map((m) => m.header.msg_type);

describe("kernel_info", () => {
  it("names the implementation and the TypeScript language (spec: Kernel info)", async () => {
    const { reply } = await k.roundTrip("shell", "kernel_info_request", {});
    const c = reply.content as Record<string, any>;
    expect(c.status).toBe("ok");
    expect(c.protocol_version).toBe("5.3");
    expect(c.implementation).toBe("hush");
    expect(c.language_info).toMatchObject({
      name: "typescript",
      file_extension: ".ts",
      mimetype: "text/typescript",
      codemirror_mode: "typescript",
    });
    expect(c.banner).toMatch(/hush/);
    expect(reply.header.version).toBe("5.3");
    expect(reply.header.session).not.toBe(k.session);
  });
});

describe("status around every request", () => {
  const requests: Array<[string, object]> = [
    ["kernel_info_request", {}],
    ["execute_request", { code: "1", silent: false, store_history: false, user_expressions: {}, allow_stdin: false }],
    ["complete_request", { code: "Mat", cursor_pos: 3 }],
    ["inspect_request", { code: "Math", cursor_pos: 2, detail_level: 0 }],
    ["is_complete_request", { code: "let a = 1" }],
    ["history_request", { hist_access_type: "tail", n: 1, output: false, raw: true }],
    ["comm_info_request", {}],
  ];
  for (const [type, content] of requests) {
    it(`${type}: busy first, idle last, all tagged with the request`, async () => {
      const { reply, iopub } = await k.roundTrip("shell", type, content);
      expect(reply.parent_header).toMatchObject({ msg_type: type });
      const statuses = iopub.filter((m) => m.header.msg_type === "status").map((m) => m.content.execution_state);
      expect(statuses).toEqual(["busy", "idle"]);
      expect(iopub[0].content.execution_state).toBe("busy");
      expect(iopub[iopub.length - 1].content.execution_state).toBe("idle");
      for (const m of iopub) expect((m.parent_header as { msg_id: string }).msg_id).toBe(reply.parent_header.msg_id);
    });
  }
});

describe("execute", () => {
  it("counts executions; silent and store_history=false do not count (spec: Execute)", async () => {
    const a = await k.execute("const countA = 1");
    const b = await k.execute("const countB = 2");
    expect(b.reply.execution_count).toBe((a.reply.execution_count as number) + 1);
    const s = await k.roundTrip("shell", "execute_request", {
      code: "console.log('hidden'); display('hidden too'); countA",
      silent: true,
      store_history: true,
    });
    expect(s.reply.content.execution_count).toBe(b.reply.execution_count);
    expect(types(s.iopub)).toEqual(["status", "status"]); // silent: nothing but busy/idle
    const n = await k.execute("countA + countB", { storeHistory: false });
    expect(n.reply.execution_count).toBe(b.reply.execution_count);
    const c = await k.execute("countB");
    expect(c.reply.execution_count).toBe((b.reply.execution_count as number) + 1);
  });

  it("publishes execute_input, then output, then the result, before idle", async () => {
    const { iopub } = await k.roundTrip("shell", "execute_request", { code: "console.log('x'); 6 * 7" });
    expect(types(iopub)).toEqual(["status", "execute_input", "stream", "execute_result", "status"]);
    expect(iopub[1].content.code).toBe("console.log('x'); 6 * 7");
    expect(iopub[3].content.data).toEqual({ "text/plain": "42" });
  });

  it("keeps state across cells and awaits at top level", async () => {
    await k.execute("let acc = 2");
    await k.execute("acc = acc * 5");
    const r = await k.execute("await new Promise<number>((res) => setTimeout(() => res(acc + 1), 5))");
    expect(r.outputs).toEqual([{ output_type: "execute_result", execution_count: r.reply.execution_count, data: { "text/plain": "11" }, metadata: {} }]);
  });

  it("sees earlier cells' names in shorthand properties", async () => {
    await k.execute("const shortA = 1; let shortB = 'b'");
    const r = await k.execute("({ shortA, shortB })");
    expect(r.outputs[0]).toMatchObject({ data: { "text/plain": "{ shortA: 1, shortB: 'b' }" } });
  });

  it("captures console.log, console.error and process.stdout of the cell as streams", async () => {
    const r = await k.execute("console.log('one'); console.error('two'); void process.stdout.write('three\\n')");
    expect(r.outputs).toEqual([
      { output_type: "stream", name: "stdout", text: "one\n" },
      { output_type: "stream", name: "stderr", text: "two\n" },
      { output_type: "stream", name: "stdout", text: "three\n" },
    ]);
  });

  it("captures output written while the cell awaits", async () => {
    const r = await k.execute("setTimeout(() => console.log('later'), 1); await new Promise((r) => setTimeout(r, 20)); 'done'");
    expect(r.outputs.map((o) => o.output_type)).toEqual(["stream", "execute_result"]);
    expect(r.outputs[0]).toMatchObject({ name: "stdout", text: "later\n" });
  });

  it("reports a thrown error with a readable traceback and keeps running", async () => {
    const r = await k.execute("function failing(n: number) { throw new RangeError('out of range: ' + n) }\nfailing(7)");
    expect(r.reply).toMatchObject({ status: "error", ename: "RangeError", evalue: "out of range: 7" });
    expect(r.outputs).toHaveLength(1);
    const e = r.outputs[0];
    if (e.output_type !== "error") throw new Error("expected an error output");
    // Only the user's frames, each with the cell's In [n], its own line and that line's code.
    const n = r.reply.execution_count as number;
    expect(e.traceback).toEqual([
      "RangeError: out of range: 7",
      `    at failing (In [${n}], line 1):  function failing(n: number) { throw new RangeError('out of range: ' + n) }`,
      `    at In [${n}], line 2:  failing(7)`,
    ]);
    expect((await k.execute("1 + 1")).reply.status).toBe("ok");
  });

  it("names the user's line after blank lines, types and an await, and in a function an earlier cell defined", async () => {
    const r = await k.execute("interface Shape { w: number }\n\ntype Id = string;\nconst sides: number = 4;\nawait new Promise((r) => setTimeout(r, 5));\n\nconst bad: any = null;\nbad.width");
    const n = r.reply.execution_count as number;
    const e = r.outputs.find((o) => o.output_type === "error");
    if (e?.output_type !== "error") throw new Error("expected an error output");
    expect(e.traceback).toEqual(["TypeError: Cannot read properties of null (reading 'width')", `    at In [${n}], line 8:  bad.width`]);
    const def = await k.execute("function laterFails(x: number): number {\n  if (x > 1) throw new Error('too big');\n  return x;\n}");
    const call = await k.execute("const fine = 1;\nlaterFails(fine + 5)");
    const [d, c] = [def.reply.execution_count as number, call.reply.execution_count as number];
    const ce = call.outputs.find((o) => o.output_type === "error");
    if (ce?.output_type !== "error") throw new Error("expected an error output");
    expect(ce.traceback).toEqual(["Error: too big", `    at laterFails (In [${d}], line 2):  if (x > 1) throw new Error('too big');`, `    at In [${c}], line 2:  laterFails(fine + 5)`]);
  });

  it("draws a refusal as an output with the cell and line, and reports it in one traceback line", async () => {
    const code = [
      "// a refusal as the cell API throws it (runtime/errors.ts: a name and a kind), made outside the cell's code",
      "const refuse = new Function(\"m\", \"return Object.assign(new Error(m), { name: 'OverCapError', kind: 'over-cap' })\");",
      "await Promise.resolve();",
      "throw refuse('over the cap: this query costs ε 0.71, but ada has ε 0.5 left');",
    ].join("\n");
    const r = await k.execute(code);
    const n = r.reply.execution_count as number;
    expect(r.reply).toMatchObject({ status: "error", ename: "OverCapError", evalue: "over the cap: this query costs ε 0.71, but ada has ε 0.5 left" });
    expect(r.outputs.map((o) => o.output_type)).toEqual(["display_data", "error"]);
    const shown = r.outputs[0];
    if (shown.output_type !== "display_data") throw new Error("expected the refusal drawn");
    expect(shown.data["text/plain"]).toBe(`refused: over the cap (In [${n}], line 4)\n  over the cap: this query costs ε 0.71, but ada has ε 0.5 left`);
    expect(shown.data["text/html"]).toMatch(/^<div class="hush-refusal" /);
    const e = r.outputs[1];
    if (e.output_type !== "error") throw new Error("expected an error output");
    expect(e.traceback).toEqual([`OverCapError at In [${n}], line 4: refused, nothing was spent (shown above)`]);
  });

  it("reports a type error as TypeScriptError with the compiler's message, the cell and the line", async () => {
    const r = await k.execute("const fineHere = 1;\nconst wrongType: string = 5");
    expect(r.reply).toMatchObject({ status: "error", ename: "TypeScriptError" });
    expect(String(r.reply.evalue)).toBe(`In [${r.reply.execution_count as number}], line 2, column 7: Type 'number' is not assignable to type 'string'.`);
  });

  it("evaluates user_expressions after the cell", async () => {
    const r = await k.execute("const ue = 20", { userExpressions: { twice: "ue * 2", bad: "nope(" } });
    const ux = r.reply.user_expressions as Record<string, any>;
    expect(ux.twice).toEqual({ status: "ok", data: { "text/plain": "40" }, metadata: {} });
    expect(ux.bad.status).toBe("error");
  });

  it("aborts execute requests queued behind a failure when stop_on_error is set", async () => {
    // The failing cell waits a moment so the two requests after it are already queued in the
    // kernel when it fails (the spec aborts what is queued at that point).
    const failing = k.execute("await new Promise((r) => setTimeout(r, 300)); throw new Error('stop here')");
    const skipped = k.execute("globalThis.shouldNotRun = 1");
    const skippedToo = k.execute("2");
    const [f, s1, s2] = await Promise.all([failing, skipped, skippedToo]);
    expect(f.reply.status).toBe("error");
    expect(s1.reply).toMatchObject({ status: "error", ename: "ExecutionAborted" });
    expect(s2.reply).toMatchObject({ status: "error", ename: "ExecutionAborted" });
    expect((await k.execute("typeof (globalThis as any).shouldNotRun")).outputs[0]).toMatchObject({
      data: { "text/plain": "'undefined'" },
    });
  });

  it("runs queued requests after a failure when stop_on_error is false", async () => {
    const failing = k.execute("await new Promise((r) => setTimeout(r, 100)); throw new Error('go on')", { stopOnError: false });
    const next = k.execute("'ran'");
    const [f, n] = await Promise.all([failing, next]);
    expect(f.reply.status).toBe("error");
    expect(n.reply.status).toBe("ok");
  });
});

describe("display and the cell API", () => {
  it("display() publishes display_data in output order", async () => {
    const r = await k.execute("console.log('before'); display({ a: 1 }); console.log('after')");
    expect(r.outputs).toEqual([
      { output_type: "stream", name: "stdout", text: "before\n" },
      { output_type: "display_data", data: { "text/plain": "{ a: 1 }" }, metadata: {} },
      { output_type: "stream", name: "stdout", text: "after\n" },
    ]);
  });

  it("renders results through the session and shows its line after a spending cell", async () => {
    const r = await k.execute("hush.release('mean age')");
    expect(r.outputs).toEqual([
      {
        output_type: "execute_result",
        execution_count: r.reply.execution_count,
        data: { "text/html": "<b>mean age</b>", "text/plain": "release mean age" },
        metadata: { hush: { fake: true } },
      },
      { output_type: "display_data", data: { "text/plain": "privacy loss so far: fake" }, metadata: {} },
    ]);
    const quiet = await k.execute("hush.version");
    expect(quiet.outputs.map((o) => o.output_type)).toEqual(["execute_result"]);
  });

  it("routes tslab's own display helpers to display_data", async () => {
    const r = await k.execute('import * as tslab from "tslab";\ntslab.display.html("<i>rich</i>")');
    expect(r.outputs).toEqual([{ output_type: "display_data", data: { "text/html": "<i>rich</i>" }, metadata: {} }]);
  });

  it("update_display_data replaces the output with the same display_id", async () => {
    const seen: string[] = [];
    const r = await k.execute("hush.progress('p1', 'step 1'); hush.progress('p1', 'step 2', true)", {
      onOutput: (m) => seen.push(m.header.msg_type),
    });
    expect(seen).toEqual(["display_data", "update_display_data"]);
    expect(r.outputs).toEqual([{ output_type: "display_data", data: { "text/plain": "step 2" }, metadata: {} }]);
  });
});

describe("language service", () => {
  it("completes a variable defined in an earlier cell", async () => {
    await k.execute("const budgetLeft = 3");
    const c = await k.request("shell", "complete_request", { code: "budg", cursor_pos: 4 });
    expect(c).toMatchObject({ status: "ok", cursor_start: 0, cursor_end: 4 });
    expect(c.matches).toContain("budgetLeft");
  });

  it("counts cursor positions in code points, as the spec does", async () => {
    // "🙂" is one code point but two UTF-16 units; the cursor after "Math.fl" is code point 13.
    const code = "'🙂🙂🙂'; Math.fl";
    const c = await k.request("shell", "complete_request", { code, cursor_pos: [...code].length });
    expect(c).toMatchObject({ matches: ["floor"], cursor_start: [...code].length - 2, cursor_end: [...code].length });
  });

  it("completes members of the hush global from its type declarations", async () => {
    const c = await k.request("shell", "complete_request", { code: "hush.", cursor_pos: 5 });
    expect(c.matches).toEqual(expect.arrayContaining(["release", "progress", "version"]));
    expect(c.cursor_start).toBe(5);
  });

  it("inspects a name with its type and documentation", async () => {
    const i = await k.request("shell", "inspect_request", { code: "hush.version", cursor_pos: 8, detail_level: 0 });
    expect(i.found).toBe(true);
    expect((i.data as Record<string, string>)["text/plain"]).toMatch(/version: string[\s\S]*version of the fake/);
    const none = await k.request("shell", "inspect_request", { code: "   ", cursor_pos: 1, detail_level: 0 });
    expect(none).toMatchObject({ status: "ok", found: false, data: {} });
  });

  it("tells complete, incomplete (with indent) and invalid code apart", async () => {
    expect(await k.request("shell", "is_complete_request", { code: "let done = 1" })).toEqual({ status: "complete" });
    expect(await k.request("shell", "is_complete_request", { code: "function f() {" })).toEqual({
      status: "incomplete",
      indent: "  ",
    });
    expect(await k.request("shell", "is_complete_request", { code: "let x = )" })).toEqual({ status: "invalid" });
  });
});

describe("history", () => {
  it("answers tail, range and search over the session's inputs", async () => {
    const a = await k.execute("const histOne = 'first'");
    await k.execute("const histTwo = 'second'");
    const tail = await k.request("shell", "history_request", { hist_access_type: "tail", n: 2, output: false, raw: true });
    expect(tail.history).toEqual([
      [1, a.reply.execution_count, "const histOne = 'first'"],
      [1, (a.reply.execution_count as number) + 1, "const histTwo = 'second'"],
    ]);
    const range = await k.request("shell", "history_request", {
      hist_access_type: "range",
      session: 0,
      start: a.reply.execution_count,
      stop: (a.reply.execution_count as number) + 1,
      output: false,
      raw: true,
    });
    expect(range.history).toEqual([[1, a.reply.execution_count, "const histOne = 'first'"]]);
    const search = await k.request("shell", "history_request", {
      hist_access_type: "search",
      pattern: "const hist*",
      output: false,
      raw: true,
    });
    expect((search.history as unknown[]).length).toBe(2);
    const withOutput = await k.request("shell", "history_request", { hist_access_type: "tail", n: 1, output: true, raw: true });
    expect((withOutput.history as unknown[][])[0][2]).toEqual(["const histTwo = 'second'", null]);
  });
});

describe("other requests", () => {
  it("has no comms: comm_info is empty and an opened comm is closed", async () => {
    expect(await k.request("shell", "comm_info_request", {})).toEqual({ status: "ok", comms: {} });
    const closed = new Promise<Message>((resolve) => {
      const off = k.onMessage((ch, m) => {
        if (ch === "iopub" && m.header.msg_type === "comm_close") {
          off();
          resolve(m);
        }
      });
    });
    await k.sendRaw("shell", serialize(request("comm_open", { comm_id: "c1", target_name: "none", data: {} }, k.session), signer()));
    expect((await closed).content).toEqual({ comm_id: "c1", data: {} });
  });

  it("answers debug_request as unsupported", async () => {
    const r = await k.request("control", "debug_request", { seq: 4, type: "request", command: "initialize", arguments: {} });
    expect(r).toMatchObject({ type: "response", request_seq: 4, success: false, command: "initialize" });
  });

  it("echoes heartbeats", async () => {
    expect((await k.heartbeat(Buffer.from("are you there"))).toString()).toBe("are you there");
  });
});

describe("signatures", () => {
  it("drops shell and control messages with a bad signature, unanswered and unexecuted", async () => {
    const marker = join(mkdtempSync(join(tmpdir(), "hush-sig-")), "ran");
    const badIds: string[] = [];
    const answeredBad: Message[] = [];
    const off = k.onMessage((_ch, m) => {
      if (badIds.includes((m.parent_header as { msg_id?: string }).msg_id ?? "")) answeredBad.push(m);
    });
    const wrongKey = new Signer("hmac-sha256", "not-the-key");
    const bad = request("execute_request", { code: `require("fs").writeFileSync(${JSON.stringify(marker)}, "x")` }, k.session);
    const badShutdown = request("shutdown_request", { restart: false }, k.session);
    badIds.push(bad.header.msg_id, badShutdown.header.msg_id);
    await k.sendRaw("shell", serialize(bad, wrongKey));
    await k.sendRaw("control", serialize(badShutdown, wrongKey));
    // A truncated signature and a frame edited after signing are dropped as well.
    const tampered = serialize(request("execute_request", { code: "1" }, k.session), signer());
    tampered[tampered.length - 1] = Buffer.from(JSON.stringify({ code: "2" }));
    await k.sendRaw("shell", tampered);
    // Requests are handled in order per channel: once these are answered, the bad ones were seen.
    expect((await k.request("shell", "kernel_info_request", {})).status).toBe("ok");
    expect((await k.request("control", "kernel_info_request", {})).status).toBe("ok");
    off();
    expect(answeredBad).toEqual([]);
    expect(existsSync(marker)).toBe(false);
    expect(k.stderr()).toMatch(/dropped a (shell|control) message/);
  });
});

function signer(): Signer {
  return new Signer(k.info.signature_scheme, k.info.key);
}
