/**
 * Every message the kernel sends, checked against the fields the Jupyter messaging protocol 5.3
 * requires (jupyter-client.readthedocs.io "Messaging in Jupyter"; the same idea as ipykernel's
 * tests/test_message_spec.py). One kernel runs a session that produces each reply and iopub type.
 */
import { afterAll, beforeAll, expect, it } from "vitest";
import type { KernelProcess } from "../../kernel/client/index.js";
import type { Message } from "../../kernel/wire.js";
import { startKernel } from "./helpers.js";

type Check = (c: Record<string, unknown>) => void;

const str = (v: unknown) => expect(typeof v).toBe("string");
const int = (v: unknown) => expect(Number.isInteger(v)).toBe(true);
const obj = (v: unknown) => expect(v !== null && typeof v === "object" && !Array.isArray(v)).toBe(true);
const arr = (v: unknown) => expect(Array.isArray(v)).toBe(true);
const has = (c: Record<string, unknown>, keys: string[]) => {
  for (const key of keys) expect(c, `field ${key}`).toHaveProperty(key);
};

/** Reply content with status "error" (spec "Request-Reply"). */
const errorReply: Check = (c) => {
  has(c, ["status", "ename", "evalue", "traceback"]);
  str(c.ename);
  str(c.evalue);
  arr(c.traceback);
};

const replies: Record<string, Check> = {
  kernel_info_reply: (c) => {
    has(c, ["status", "protocol_version", "implementation", "implementation_version", "language_info", "banner", "help_links"]);
    expect(c.status).toBe("ok");
    str(c.protocol_version);
    str(c.implementation);
    str(c.implementation_version);
    str(c.banner);
    arr(c.help_links);
    const li = c.language_info as Record<string, unknown>;
    has(li, ["name", "version", "mimetype", "file_extension"]);
  },
  execute_reply: (c) => {
    has(c, ["status", "execution_count"]);
    int(c.execution_count);
    if (c.status === "ok") {
      has(c, ["user_expressions"]);
      obj(c.user_expressions);
    } else errorReply(c);
  },
  complete_reply: (c) => {
    has(c, ["status", "matches", "cursor_start", "cursor_end", "metadata"]);
    arr(c.matches);
    int(c.cursor_start);
    int(c.cursor_end);
    obj(c.metadata);
  },
  inspect_reply: (c) => {
    has(c, ["status", "found", "data", "metadata"]);
    expect(typeof c.found).toBe("boolean");
    obj(c.data);
    obj(c.metadata);
  },
  is_complete_reply: (c) => {
    expect(["complete", "incomplete", "invalid", "unknown"]).toContain(c.status);
    if (c.status === "incomplete") str(c.indent);
  },
  history_reply: (c) => {
    has(c, ["status", "history"]);
    arr(c.history);
    for (const row of c.history as unknown[][]) {
      expect(row).toHaveLength(3);
      int(row[0]);
      int(row[1]);
    }
  },
  comm_info_reply: (c) => {
    has(c, ["status", "comms"]);
    obj(c.comms);
  },
  interrupt_reply: (c) => has(c, ["status"]),
  shutdown_reply: (c) => {
    has(c, ["status", "restart"]);
    expect(typeof c.restart).toBe("boolean");
  },
};

const iopub: Record<string, Check> = {
  status: (c) => expect(["busy", "idle", "starting"]).toContain(c.execution_state),
  execute_input: (c) => {
    str(c.code);
    int(c.execution_count);
  },
  stream: (c) => {
    expect(["stdout", "stderr"]).toContain(c.name);
    str(c.text);
  },
  display_data: (c) => {
    obj(c.data);
    obj(c.metadata);
  },
  update_display_data: (c) => {
    obj(c.data);
    obj(c.metadata);
    str((c.transient as Record<string, unknown>).display_id);
  },
  execute_result: (c) => {
    int(c.execution_count);
    obj(c.data);
    obj(c.metadata);
  },
  error: (c) => {
    str(c.ename);
    str(c.evalue);
    arr(c.traceback);
  },
};

function checkEnvelope(m: Message): void {
  has(m as unknown as Record<string, unknown>, ["header", "parent_header", "metadata", "content"]);
  for (const key of ["msg_id", "session", "username", "date", "msg_type", "version"]) {
    str((m.header as unknown as Record<string, unknown>)[key]);
  }
  expect(m.header.version).toBe("5.3");
  expect(Number.isNaN(Date.parse(m.header.date))).toBe(false);
  obj(m.metadata);
}

let k: KernelProcess;
const seen: Array<{ channel: string; msg: Message }> = [];
beforeAll(async () => {
  k = await startKernel();
  k.onMessage((channel, msg) => seen.push({ channel, msg }));
});
afterAll(() => k?.kill());

it("every reply and iopub message carries the fields the spec requires", async () => {
  await k.request("shell", "kernel_info_request", {});
  await k.execute("console.log('out'); console.error('err'); const specValue = 3; specValue", {
    userExpressions: { doubled: "specValue * 2" },
  });
  await k.execute("display('shown'); hush.progress('d1', 'a'); hush.progress('d1', 'b', true); hush.release('x')");
  await k.execute("throw new Error('spec error')");
  await k.request("shell", "complete_request", { code: "specV", cursor_pos: 5 });
  await k.request("shell", "inspect_request", { code: "specValue", cursor_pos: 3, detail_level: 0 });
  await k.request("shell", "is_complete_request", { code: "if (true) {" });
  await k.request("shell", "is_complete_request", { code: "1" });
  await k.request("shell", "history_request", { hist_access_type: "tail", n: 5, output: false, raw: true });
  await k.request("shell", "comm_info_request", {});
  await k.request("control", "interrupt_request", {});
  await k.request("control", "shutdown_request", { restart: false });

  const replyTypes = new Set<string>();
  const iopubTypes = new Set<string>();
  for (const { channel, msg } of seen) {
    checkEnvelope(msg);
    const type = msg.header.msg_type;
    if (channel === "iopub") {
      expect(iopub, `iopub type ${type}`).toHaveProperty(type);
      iopub[type](msg.content);
      iopubTypes.add(type);
    } else {
      expect(replies, `reply type ${type}`).toHaveProperty(type);
      expect((msg.parent_header as { msg_type: string }).msg_type).toBe(type.replace(/_reply$/, "_request"));
      const c = msg.content;
      if (c.status === "error" && type !== "execute_reply") errorReply(c);
      else replies[type](c);
      replyTypes.add(type);
    }
  }
  // The session above produced every reply and iopub type the kernel can send.
  expect([...replyTypes].sort()).toEqual(Object.keys(replies).sort());
  expect([...iopubTypes].sort()).toEqual(Object.keys(iopub).sort());
});
