/**
 * The one dispatch path for every request on shell and control (ipykernel kernelbase.py,
 * dispatch_shell): decode and verify → remember the parent → publish `busy` → run the handler
 * named after the message type → flush output → publish `idle`.
 *
 * Shell requests run one at a time in arrival order; control requests run as they arrive, even
 * while a shell request is running. After an execute fails with stop_on_error, execute requests
 * already waiting in the queue are answered as aborted without running (spec "Execute").
 */
import { ProtocolError } from "../runtime/errors.js";
import { errorText, kernelLog } from "./log.js";
import type { Output } from "./output.js";
import type { ReplyChannel } from "./sockets.js";
import { childOf, deserialize, newHeader, serialize, type JsonObject, type Message, type Signer } from "./wire.js";

export interface HandlerContext {
  channel: "shell" | "control";
  /** Sends `<msg_type>` on the request's channel, after all output the request produced. */
  reply(msgType: string, content: JsonObject, metadata?: JsonObject): Promise<void>;
  /** Publishes on iopub with this request as parent, in output order. */
  publish(msgType: string, content: JsonObject): Promise<void>;
  /** Publish nothing more for this request (silent execution); busy/idle still go out. */
  muteOutput(): void;
  /** Answer execute requests already queued as aborted (stop_on_error). */
  abortQueued(): void;
  /** Runs once `idle` for this request has been published (e.g. exit after shutdown). */
  afterIdle(fn: () => Promise<void> | void): void;
}

export type Handler = (msg: Message, ctx: HandlerContext) => Promise<void>;
export type HandlerTable = Readonly<Record<string, Handler>>;

export interface DispatcherOptions {
  signer: Signer;
  /** Session id of this kernel (header.session of everything it sends). */
  session: string;
  send(channel: ReplyChannel | "iopub", frames: Buffer[]): Promise<void>;
  output: Output;
  handlers: HandlerTable;
  /** Handler for an execute request skipped because an earlier one failed. */
  aborted: Handler;
}

export class Dispatcher {
  private readonly queue: Buffer[][] = [];
  private wake: (() => void) | null = null;
  private aborting = false;
  private stopped = false;

  constructor(private readonly opts: DispatcherOptions) {}

  /** Publishes on iopub with an explicit parent (or none). */
  publish(msgType: string, content: JsonObject, parent: Message | null): Promise<void> {
    const msg: Message<JsonObject> = parent
      ? childOf(parent, msgType, content, this.opts.session, { identities: [topic(msgType)] })
      : {
          identities: [topic(msgType)],
          header: newHeader(msgType, this.opts.session),
          parent_header: {},
          metadata: {},
          content,
          buffers: [],
        };
    return this.opts.send("iopub", serialize(msg, this.opts.signer));
  }

  /** Called for every shell message in arrival order. */
  enqueueShell(frames: Buffer[]): void {
    this.queue.push(frames);
    this.wake?.();
  }

  /** Processes queued shell requests one at a time until stop(). */
  async runShell(): Promise<void> {
    while (!this.stopped) {
      const frames = this.queue.shift();
      if (!frames) {
        this.aborting = false;
        await new Promise<void>((r) => (this.wake = r));
        this.wake = null;
        continue;
      }
      await this.dispatch("shell", frames);
    }
  }

  stop(): void {
    this.stopped = true;
    this.wake?.();
  }

  async dispatch(channel: "shell" | "control", frames: Buffer[]): Promise<void> {
    let msg: Message;
    try {
      msg = deserialize(frames, this.opts.signer);
    } catch (e: unknown) {
      // Never executed, never answered: a client with the wrong key learns nothing.
      kernelLog(`dropped a ${channel} message: ${e instanceof ProtocolError ? e.message : errorText(e)}`);
      return;
    }
    const type = msg.header.msg_type;
    const { output } = this.opts;
    // Stream output belongs to the running shell request; control requests only get busy/idle.
    if (channel === "shell") output.setParent(msg);
    const after: Array<() => Promise<void> | void> = [];
    await this.publish("status", { execution_state: "busy" }, msg);
    const handler =
      channel === "shell" && this.aborting && type === "execute_request" ? this.opts.aborted : this.opts.handlers[type];
    const ctx = this.context(channel, msg, after);
    try {
      if (handler) await handler(msg, ctx);
      else kernelLog(`ignored unknown message type ${type} on ${channel}`);
    } catch (e: unknown) {
      kernelLog(`handler for ${type} failed: ${e instanceof Error ? (e.stack ?? e.message) : String(e)}`);
      // A request whose handler failed still gets an answer, so no client waits forever.
      if (!ctx.replied && type.endsWith("_request")) {
        await ctx
          .reply(type.replace(/_request$/, "_reply"), {
            status: "error",
            ename: "KernelError",
            evalue: `the kernel could not answer ${type}: ${errorText(e)}`,
            traceback: [],
          })
          .catch(() => {});
      }
    }
    if (channel === "shell") await output.flush();
    await this.publish("status", { execution_state: "idle" }, msg);
    for (const fn of after) await fn();
  }

  private context(
    channel: "shell" | "control",
    msg: Message,
    after: Array<() => Promise<void> | void>,
  ): HandlerContext & { replied: boolean } {
    const { output, session, signer } = this.opts;
    const ctx = {
      channel,
      replied: false,
      reply: async (msgType: string, content: JsonObject, metadata?: JsonObject) => {
        ctx.replied = true;
        if (channel === "shell") await output.flush();
        const r = childOf(msg, msgType, content, session, { metadata: metadata ?? {} });
        await this.opts.send(channel, serialize(r, signer));
      },
      publish: (msgType: string, content: JsonObject) =>
        channel === "shell" ? output.publish(msgType, content) : this.publish(msgType, content, msg),
      muteOutput: () => {
        if (channel === "shell") output.mute();
      },
      abortQueued: () => {
        if (this.queue.length > 0) this.aborting = true;
      },
      afterIdle: (fn: () => Promise<void> | void) => {
        after.push(fn);
      },
    };
    return ctx;
  }
}

/** IOPub topic: ipykernel's "kernel.<id>.<type>" shape; clients subscribe to everything. */
function topic(msgType: string): Buffer {
  return Buffer.from(`kernel.hush.${msgType}`);
}

