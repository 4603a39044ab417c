/**
 * A small Jupyter client for our kernel: starts the process with a fresh connection file, talks
 * the wire protocol over DEALER/SUB/REQ sockets, and collects each execution's outputs as
 * nbformat 4 output dicts. Used by the protocol tests, the bench and `hush run`.
 */
import { spawn, type ChildProcess } from "node:child_process";
import { randomUUID } from "node:crypto";
import * as zmq from "zeromq";
import { endpoint, type ConnectionInfo } from "../connection.js";
import { UnreachableError } from "../../runtime/errors.js";
import { kernelMainScript } from "../kernelspec.js";
import { deserialize, request as newRequest, serialize, Signer, type JsonObject, type Message } from "../wire.js";
import { writeConnectionFile } from "./connection-file.js";
import { OUTPUT_MESSAGE_TYPES, OutputCollector, type NbOutput } from "./outputs.js";

export type { NbOutput } from "./outputs.js";

export interface StartOptions {
  /** Command that starts the kernel; "{connection_file}" is replaced. Default: our kernel. */
  argv?: string[];
  env?: Record<string, string>;
  cwd?: string;
  /** Loopback tcp (default) or ipc sockets in a temp dir. */
  transport?: "tcp" | "ipc";
  /** How long to wait for the first kernel_info_reply (default 120 s). */
  startTimeoutMs?: number;
}

export interface ExecuteOptions {
  silent?: boolean;
  storeHistory?: boolean;
  stopOnError?: boolean;
  userExpressions?: Record<string, string>;
  onOutput?: (msg: Message) => void;
}

export interface ExecuteResult {
  /** execute_reply content. */
  reply: JsonObject;
  outputs: NbOutput[];
}

/** A request's reply and every iopub message published with it as parent, through `idle`. */
export interface RoundTrip {
  reply: Message;
  iopub: Message[];
}

interface Pending {
  reply: Message | null;
  idle: boolean;
  iopub: Message[];
  onIopub?: (m: Message) => void;
  resolve(r: RoundTrip): void;
  reject(e: Error): void;
}

export class KernelProcess {
  private child: ChildProcess | null = null;
  private readonly pending = new Map<string, Pending>();
  private readonly listeners = new Set<(channel: "shell" | "control" | "iopub", m: Message) => void>();
  private readonly sendQueues = new Map<zmq.Dealer, Promise<void>>();
  private stderrTail = "";
  private closed = false;
  private exited: Promise<number | null> = Promise.resolve(null);

  private constructor(
    readonly info: ConnectionInfo,
    readonly connectionFile: string,
    private readonly opts: StartOptions,
    private readonly signer: Signer,
    readonly session: string,
    private readonly shell: zmq.Dealer,
    private readonly control: zmq.Dealer,
    private readonly iopub: zmq.Subscriber,
    private readonly hb: zmq.Request,
  ) {}

  static async start(opts: StartOptions = {}): Promise<KernelProcess> {
    const { path, info } = await writeConnectionFile({ transport: opts.transport });
    const signer = new Signer(info.signature_scheme, info.key);
    const shell = new zmq.Dealer();
    const control = new zmq.Dealer();
    const iopub = new zmq.Subscriber();
    const hb = new zmq.Request();
    for (const s of [shell, control, iopub, hb]) s.linger = 0;
    iopub.subscribe();
    shell.connect(endpoint(info, "shell"));
    control.connect(endpoint(info, "control"));
    iopub.connect(endpoint(info, "iopub"));
    hb.connect(endpoint(info, "hb"));
    const session = randomUUID();
    const k = new KernelProcess(info, path, opts, signer, session, shell, control, iopub, hb);
    k.receive(shell, "shell");
    k.receive(control, "control");
    k.receive(iopub, "iopub");
    try {
      await k.spawnAndWait();
    } catch (e: unknown) {
      k.kill();
      throw e;
    }
    return k;
  }

  /** Last few KB the kernel wrote to its stderr (for diagnostics). */
  stderr(): string {
    return this.stderrTail;
  }

  get pid(): number | undefined {
    return this.child?.pid;
  }

  /** Sees every correctly signed message from the kernel, answered or not. */
  onMessage(listener: (channel: "shell" | "control" | "iopub", m: Message) => void): () => void {
    this.listeners.add(listener);
    return () => this.listeners.delete(listener);
  }

  async execute(code: string, opts: ExecuteOptions = {}): Promise<ExecuteResult> {
    const collector = new OutputCollector();
    const rt = await this.roundTrip(
      "shell",
      "execute_request",
      {
        code,
        silent: opts.silent ?? false,
        store_history: opts.storeHistory ?? !(opts.silent ?? false),
        user_expressions: opts.userExpressions ?? {},
        allow_stdin: false,
        stop_on_error: opts.stopOnError ?? true,
      },
      (m) => {
        if (!OUTPUT_MESSAGE_TYPES.has(m.header.msg_type)) return;
        collector.add(m);
        opts.onOutput?.(m);
      },
    );
    return { reply: rt.reply.content, outputs: collector.outputs };
  }

  /** Sends a request and resolves with the reply content once the kernel is idle again. */
  async request(channel: "shell" | "control", msgType: string, content: object): Promise<JsonObject> {
    return (await this.roundTrip(channel, msgType, content)).reply.content;
  }

  /** Sends a request; resolves with the full reply and its iopub messages, through `idle`. */
  roundTrip(
    channel: "shell" | "control",
    msgType: string,
    content: object,
    onIopub?: (m: Message) => void,
  ): Promise<RoundTrip> {
    return this.sendMessage(channel, newRequest(msgType, content as JsonObject, this.session), onIopub);
  }

  /** Sends an already built message (tests use this to send tampered frames via `sendRaw`). */
  sendMessage(channel: "shell" | "control", msg: Message, onIopub?: (m: Message) => void): Promise<RoundTrip> {
    if (this.closed) return Promise.reject(new UnreachableError("the kernel client is closed"));
    return new Promise<RoundTrip>((resolve, reject) => {
      this.pending.set(msg.header.msg_id, { reply: null, idle: false, iopub: [], onIopub, resolve, reject });
      this.sendRaw(channel, serialize(msg, this.signer)).catch(reject);
    });
  }

  /** Sends frames as they are (no signing). */
  sendRaw(channel: "shell" | "control", frames: Buffer[]): Promise<void> {
    const sock = channel === "shell" ? this.shell : this.control;
    const prev = this.sendQueues.get(sock) ?? Promise.resolve();
    const next = prev.then(() => sock.send(frames));
    this.sendQueues.set(
      sock,
      next.catch(() => {}),
    );
    return next;
  }

  /** One heartbeat round trip: resolves with the echoed bytes. */
  async heartbeat(payload = Buffer.from("ping")): Promise<Buffer> {
    await this.hb.send(payload);
    const [echo] = await this.hb.receive();
    return echo;
  }

  async interrupt(): Promise<void> {
    await this.request("control", "interrupt_request", {});
  }

  /**
   * shutdown_request on control, then wait for the process to exit. With restart=true a fresh
   * kernel process is started on the same connection file (what a kernel manager does).
   */
  async shutdown(restart = false): Promise<void> {
    const exited = this.exited;
    await this.request("control", "shutdown_request", { restart });
    await exited;
    if (restart) {
      await this.spawnAndWait();
      return;
    }
    this.closeSockets();
  }

  kill(): void {
    this.child?.kill("SIGKILL");
    this.closeSockets();
  }

  private closeSockets(): void {
    if (this.closed) return;
    this.closed = true;
    for (const s of [this.shell, this.control, this.iopub, this.hb]) s.close();
    for (const p of this.pending.values()) p.reject(new UnreachableError("the kernel client was closed"));
    this.pending.clear();
  }

  private async spawnAndWait(): Promise<void> {
    const argv = (this.opts.argv ?? [process.execPath, kernelMainScript(), "--connection-file", "{connection_file}"]).map(
      (a) => a.replace("{connection_file}", this.connectionFile),
    );
    const child = spawn(argv[0], argv.slice(1), {
      cwd: this.opts.cwd,
      env: { ...process.env, ...this.opts.env },
      stdio: ["ignore", "ignore", "pipe"],
    });
    this.child = child;
    child.stderr?.on("data", (chunk: Buffer) => {
      this.stderrTail = (this.stderrTail + chunk.toString("utf8")).slice(-8192);
      if (process.env.HUSH_KERNEL_DEBUG) process.stderr.write(chunk);
    });
    this.exited = new Promise((resolve) => {
      child.once("exit", (code) => {
        if (this.child === child) {
          for (const p of this.pending.values()) {
            p.reject(new UnreachableError(`the kernel exited (code ${code}) before answering\n${this.stderrTail}`));
          }
          this.pending.clear();
        }
        resolve(code);
      });
    });
    await this.waitReady(this.opts.startTimeoutMs ?? 120_000);
  }

  /**
   * kernel_info_request until a reply AND its iopub `idle` arrive: the reply proves the shell is
   * served, the idle proves our iopub subscription is live (jupyter_client wait_for_ready).
   */
  private async waitReady(timeoutMs: number): Promise<void> {
    const deadline = Date.now() + timeoutMs;
    let attempt: { id: string; done: Promise<RoundTrip> } | null = null;
    while (Date.now() < deadline) {
      if (!this.child || this.child.exitCode !== null) break;
      if (!attempt) {
        const msg = newRequest("kernel_info_request", {}, this.session);
        attempt = { id: msg.header.msg_id, done: this.sendMessage("shell", msg) };
      }
      const r = await Promise.race([attempt.done.then(() => "ok" as const), delay(1000).then(() => "wait" as const)]);
      if (r === "ok") return;
      const p = this.pending.get(attempt.id);
      if (p?.reply && !p.idle) {
        // Answered, but its idle was published before our subscription took effect: ask again.
        this.pending.delete(attempt.id);
        attempt = null;
      }
    }
    throw new UnreachableError(`the kernel did not answer kernel_info_request in time\n${this.stderrTail}`);
  }

  private receive(sock: zmq.Dealer | zmq.Subscriber, channel: "shell" | "control" | "iopub"): void {
    void (async () => {
      try {
        for await (const frames of sock) this.handle(frames, channel);
      } catch (e: unknown) {
        if (!this.closed) throw e;
      }
    })();
  }

  private handle(frames: Buffer[], channel: "shell" | "control" | "iopub"): void {
    let msg: Message;
    try {
      msg = deserialize(frames, this.signer);
    } catch (e: unknown) {
      process.emitWarning(`hush client: dropped a kernel message: ${e instanceof Error ? e.message : String(e)}`);
      return;
    }
    const parentId = (msg.parent_header as { msg_id?: string }).msg_id;
    const p = parentId ? this.pending.get(parentId) : undefined;
    for (const l of this.listeners) l(channel, msg);
    if (channel === "iopub") {
      if (!p) return;
      p.iopub.push(msg);
      p.onIopub?.(msg);
      if (msg.header.msg_type === "status" && msg.content.execution_state === "idle") p.idle = true;
    } else {
      if (!p) return;
      p.reply = msg;
    }
    if (p.reply && p.idle && parentId) {
      this.pending.delete(parentId);
      p.resolve({ reply: p.reply, iopub: p.iopub });
    }
  }
}

function delay(ms: number): Promise<void> {
  return new Promise((r) => setTimeout(r, ms).unref());
}
