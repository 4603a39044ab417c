/**
 * The dispatch path in memory (no sockets): busy → handler → idle on every request, bad
 * signatures dropped, a failing handler still answered, stop_on_error aborting the queue.
 */
import { expect, it } from "vitest";
import { Dispatcher, type Handler } from "../../kernel/dispatch.js";
import { Output } from "../../kernel/output.js";
import { deserialize, request, serialize, Signer, type Message } from "../../kernel/wire.js";

const signer = new Signer("hmac-sha256", "k");

function setup(handlers: Record<string, Handler>) {
  const sent: Array<{ channel: string; msg: Message }> = [];
  let d!: Dispatcher;
  const output = new Output((t, c, p) => d.publish(t, c, p));
  d = new Dispatcher({
    signer,
    session: "kernel",
    output,
    handlers,
    aborted: async (_m, ctx) => ctx.reply("execute_reply", { status: "error", ename: "ExecutionAborted", evalue: "", traceback: [] }),
    send: async (channel, frames) => {
      sent.push({ channel, msg: deserialize(frames, signer) });
    },
  });
  return { d, sent, output };
}

const frames = (type: string, content: Record<string, unknown> = {}, s = signer) => serialize(request(type, content, "client"), s);
const summary = (sent: Array<{ channel: string; msg: Message }>) =>
  sent.map(({ channel, msg }) =>
    msg.header.msg_type === "status" ? `${channel}:${msg.content.execution_state}` : `${channel}:${msg.header.msg_type}`,
  );

it("brackets each request with busy and idle, output before the reply", async () => {
  const { d, sent, output } = setup({
    ping_request: async (_m, ctx) => {
      output.write("stdout", "hello\n");
      await ctx.reply("ping_reply", { status: "ok" });
    },
  });
  await d.dispatch("shell", frames("ping_request"));
  expect(summary(sent)).toEqual(["iopub:busy", "iopub:stream", "shell:ping_reply", "iopub:idle"]);
  const parentIds = new Set(sent.map(({ msg }) => (msg.parent_header as { msg_id: string }).msg_id));
  expect(parentIds.size).toBe(1);
});

it("drops a badly signed request without a word on any channel", async () => {
  let ran = false;
  const { d, sent } = setup({ ping_request: async () => void (ran = true) });
  await d.dispatch("shell", frames("ping_request", {}, new Signer("hmac-sha256", "wrong")));
  expect(ran).toBe(false);
  expect(sent).toEqual([]);
});

it("answers a request whose handler throws with an error reply", async () => {
  const { d, sent } = setup({
    complete_request: async () => {
      throw new Error("language service broke");
    },
  });
  await d.dispatch("shell", frames("complete_request"));
  expect(summary(sent)).toEqual(["iopub:busy", "shell:complete_reply", "iopub:idle"]);
  expect(sent[1].msg.content).toMatchObject({ status: "error", ename: "KernelError" });
  expect(String(sent[1].msg.content.evalue)).toMatch(/language service broke/);
});

it("ignores unknown message types but still reports busy and idle", async () => {
  const { d, sent } = setup({});
  await d.dispatch("shell", frames("no_such_request"));
  expect(summary(sent)).toEqual(["iopub:busy", "iopub:idle"]);
});

it("aborts the execute requests queued behind a failure, then runs new ones", async () => {
  const ran: string[] = [];
  const { d, sent } = setup({
    execute_request: async (m, ctx) => {
      ran.push(String(m.content.code));
      const fail = m.content.code === "fail";
      await ctx.reply("execute_reply", { status: fail ? "error" : "ok" });
      if (fail) ctx.abortQueued();
    },
    kernel_info_request: async (_m, ctx) => ctx.reply("kernel_info_reply", { status: "ok" }),
  });
  for (const code of ["fail", "a", "b"]) d.enqueueShell(frames("execute_request", { code }));
  d.enqueueShell(frames("kernel_info_request"));
  const loop = d.runShell();
  await until(() => sent.filter((s) => s.msg.header.msg_type.endsWith("_reply")).length === 4);
  d.enqueueShell(frames("execute_request", { code: "later" }));
  await until(() => ran.includes("later"));
  d.stop();
  await loop;
  expect(ran).toEqual(["fail", "later"]);
  const replies = sent.filter((s) => s.channel === "shell").map((s) => [s.msg.header.msg_type, s.msg.content.ename ?? s.msg.content.status]);
  expect(replies).toEqual([
    ["execute_reply", "error"],
    ["execute_reply", "ExecutionAborted"],
    ["execute_reply", "ExecutionAborted"],
    ["kernel_info_reply", "ok"],
    ["execute_reply", "ok"],
  ]);
});

/** Waits for a condition reached by the dispatcher's own promise chain (bounded by the test timeout). */
async function until(cond: () => boolean): Promise<void> {
  while (!cond()) await new Promise((r) => setImmediate(r));
}
