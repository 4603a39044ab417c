/**
 * Protocol handlers, one per request type, named after it (messaging spec 5.3). The execute
 * handler does counting, execute_input, results, the reply and abort-on-error; running the
 * TypeScript is the language hook's job (execution.ts).
 */
import { inspect } from "node:util";
import type { HandlerContext, Handler, HandlerTable } from "./dispatch.js";
import { filterNames, stringArgumentAt, type Completion } from "./completion-quick.js";
import { languageService } from "./completion-service.js";
import { isComplete, type Execution, type CellError } from "./execution.js";
import type { History } from "./history.js";
import { kernelInfo } from "./kernel-info.js";
import { errorText } from "./log.js";
import type { CellSession, MimeBundle } from "./session-loader.js";
import type { JsonObject, Message } from "./wire.js";

/** The language hook and the cell API session: what running a cell needs. */
export interface Engine {
  execution: Execution;
  session: CellSession;
}

export interface KernelParts {
  /**
   * The engine, built on the first call (seconds: the TypeScript program); later calls share it.
   * Requests that need it wait for it; kernel_info, history and shutdown do not.
   */
  engine(): Promise<Engine>;
  /** Schedules building the engine in the background, if not scheduled yet. */
  warm(): void;
  /** Closes the cell API session if it was ever loaded. */
  closeSession(): Promise<void>;
  history: History;
  /** Numbers a cell as it starts running (interrupts target only the running cell: interrupt-target.ts). */
  beginCell(): number;
  /** Told when cell `k` ends. */
  endCell(k: number): void;
  /** Closes sockets and the session, then ends the process. */
  exit(): Promise<void>;
}

interface ExecuteContent {
  code: string;
  silent: boolean;
  store_history: boolean;
  user_expressions: Record<string, unknown>;
  stop_on_error: boolean;
}

/** Mime bundle for a value the cell API does not render itself. */
export function plainBundle(value: unknown): MimeBundle {
  const text = typeof value === "string" ? inspect(value) : inspect(value, { depth: 4, colors: false });
  return { data: { "text/plain": text }, metadata: {} };
}

export function createHandlers(parts: KernelParts): { table: HandlerTable; aborted: Handler } {
  const { history } = parts;
  let executionCount = 0;

  const render = async (session: CellSession, value: unknown): Promise<MimeBundle> =>
    (await session.render(value)) ?? plainBundle(value);

  const errorContent = (e: CellError): JsonObject => ({ ename: e.ename, evalue: e.evalue, traceback: e.traceback });

  async function evaluateExpressions({ execution, session }: Engine, exprs: Record<string, unknown>): Promise<JsonObject> {
    const out: JsonObject = {};
    for (const [name, expr] of Object.entries(exprs)) {
      if (typeof expr !== "string") {
        out[name] = { status: "error", ename: "BadInput", evalue: "expression must be a string", traceback: [] };
        continue;
      }
      const r = await execution.run(expr);
      if (r.status === "error") out[name] = { status: "error", ...errorContent(r) };
      else {
        const b = r.hasValue ? await render(session, r.value) : plainBundle(undefined);
        out[name] = { status: "ok", data: b.data, metadata: b.metadata };
      }
    }
    return out;
  }

  async function publishAfterCell(session: CellSession, ctx: HandlerContext): Promise<void> {
    let line: MimeBundle | null = null;
    try {
      line = await session.afterCell();
    } catch (e: unknown) {
      await ctx.publish("stream", { name: "stderr", text: `hush: could not read the privacy-loss summary: ${errorText(e)}\n` });
    }
    if (line) await ctx.publish("display_data", { data: line.data, metadata: line.metadata, transient: {} });
  }

  const table: Record<string, Handler> = {
    async kernel_info_request(_msg, ctx) {
      await ctx.reply("kernel_info_reply", kernelInfo());
      // Clients ask this first, to know the kernel is up; the TypeScript program is built after
      // the answer (shortly after, see kernel.ts), so the notebook shows the kernel ready sooner.
      ctx.afterIdle(() => {
        // The TypeScript language service starts building on its own thread right after the
        // first answer (completion-service.ts), so completion and inspection come from it seconds
        // sooner; a request that needs it before starts it too.
        languageService();
        parts.warm();
      });
    },

    async execute_request(msg, ctx) {
      const c = executeContent(msg);
      // Spec "Execute": silent code broadcasts nothing on iopub and has no execute_result.
      if (c.silent) ctx.muteOutput();
      const counted = !c.silent && c.store_history;
      if (counted) executionCount += 1;
      const count = executionCount;
      const engine = await parts.engine();
      const { execution, session } = engine;
      // Begun before execute_input, so an interrupt sent on seeing it finds the cell running.
      const cell = parts.beginCell();
      let outcome: Awaited<ReturnType<Execution["run"]>>;
      try {
        if (!c.silent) await ctx.publish("execute_input", { code: c.code, execution_count: count });
        outcome = await execution.run(c.code, counted ? count : null);
      } finally {
        parts.endCell(cell);
      }
      let resultText: string | null = null;
      if (outcome.status === "ok" && outcome.hasValue && !c.silent) {
        try {
          const bundle = await render(session, outcome.value);
          resultText = typeof bundle.data["text/plain"] === "string" ? bundle.data["text/plain"] : null;
          await ctx.publish("execute_result", { execution_count: count, data: bundle.data, metadata: bundle.metadata });
        } catch (e: unknown) {
          await ctx.publish("stream", { name: "stderr", text: `hush: could not display the result: ${errorText(e)}\n` });
        }
      }
      if (outcome.status === "error" && !c.silent) {
        // A refusal is drawn as an output of its own (kernel/display/refusal.ts), then reported as the error.
        if (outcome.display) await ctx.publish("display_data", { data: outcome.display.data, metadata: outcome.display.metadata, transient: {} });
        await ctx.publish("error", errorContent(outcome));
      }
      const userExpressions = outcome.status === "ok" ? await evaluateExpressions(engine, c.user_expressions) : {};
      if (!c.silent) await publishAfterCell(session, ctx);
      if (counted) history.add({ line: count, input: c.code, output: resultText });

      if (outcome.status === "ok") {
        await ctx.reply("execute_reply", {
          status: "ok",
          execution_count: count,
          user_expressions: userExpressions,
          payload: [],
        });
        return;
      }
      if (c.stop_on_error) ctx.abortQueued();
      await ctx.reply("execute_reply", { status: "error", execution_count: count, ...errorContent(outcome) }, {
        status: "error",
      });
    },

    async complete_request(msg, ctx) {
      const { code, cursor_pos } = textAndCursor(msg);
      const engine = await parts.engine();
      const r = (await namesInString(engine, code, cursor_pos)) ?? (await engine.execution.complete(code, cursor_pos));
      await ctx.reply("complete_reply", {
        status: "ok",
        matches: r.matches,
        cursor_start: toCodePoints(code, r.cursor_start),
        cursor_end: toCodePoints(code, r.cursor_end),
        // Which path answered: "names" (public schema), "types" (language service), "quick" (live
        // values, while the language service is still being built).
        metadata: { hush: { source: r.source } },
      });
    },

    async inspect_request(msg, ctx) {
      const { code, cursor_pos } = textAndCursor(msg);
      const { execution } = await parts.engine();
      const text = await execution.inspect(code, cursor_pos);
      await ctx.reply("inspect_reply", {
        status: "ok",
        found: text !== null,
        data: text === null ? {} : { "text/plain": text },
        metadata: {},
      });
    },

    async is_complete_request(msg, ctx) {
      const code = typeof msg.content.code === "string" ? msg.content.code : "";
      await ctx.reply("is_complete_reply", isComplete(code));
    },

    async history_request(msg, ctx) {
      await ctx.reply("history_reply", { status: "ok", history: history.query(msg.content) });
    },

    async comm_info_request(_msg, ctx) {
      await ctx.reply("comm_info_reply", { status: "ok", comms: {} });
    },

    // No comm targets exist: an opened comm is closed right away (what ipykernel does for an
    // unknown target); messages to comms are ignored.
    async comm_open(msg, ctx) {
      const id = typeof msg.content.comm_id === "string" ? msg.content.comm_id : "";
      await ctx.publish("comm_close", { comm_id: id, data: {} });
    },
    async comm_msg() {},
    async comm_close() {},

    async interrupt_request(_msg, ctx) {
      // The interrupt itself was aimed at the cell running when the control thread received the
      // request, before it reached this queue (interrupt-target.ts, kernel.ts); acting here could
      // hit a later cell instead.
      await ctx.reply("interrupt_reply", { status: "ok" });
    },

    // Spec "Kernel shutdown": the kernel answers, then exits; with restart=true the client (its
    // kernel manager) starts a fresh process.
    async shutdown_request(msg, ctx) {
      const restart = msg.content.restart === true;
      try {
        await parts.closeSession();
      } catch {
        // Exiting anyway: the curator connection ends with the process.
      }
      await ctx.reply("shutdown_reply", { status: "ok", restart });
      ctx.afterIdle(() => parts.exit());
    },

    async debug_request(msg, ctx) {
      await ctx.reply("debug_reply", {
        type: "response",
        request_seq: typeof msg.content.seq === "number" ? msg.content.seq : 0,
        success: false,
        command: typeof msg.content.command === "string" ? msg.content.command : "",
        message: "the hush kernel does not support debugging",
        body: {},
      });
    },
  };

  const aborted: Handler = async (_msg, ctx) => {
    await ctx.reply(
      "execute_reply",
      {
        status: "error",
        execution_count: executionCount,
        ename: "ExecutionAborted",
        evalue: "not run: an earlier cell failed and stop_on_error was set",
        traceback: [],
      },
      { status: "error" },
    );
  };

  return { table, aborted };
}

/** Cell variables looked at for `hush.col("…` (each costs one check). */
const MAX_CELL_VALUES = 1000;

/**
 * Completion inside a string argument of a call on a name (`hush.open("vi`, `visits.mean("ag`):
 * dataset or column names from the cell API (public schema only); null when the cursor is not in
 * such a string or the API has no names for that call.
 */
async function namesInString(
  { execution, session }: Engine,
  code: string,
  cursor: number,
): Promise<(Completion & { source: "names" }) | null> {
  if (!session.publicNames) return null;
  const at = stringArgumentAt(code, cursor);
  if (at === null) return null;
  let names: string[] | null = null;
  try {
    // The receiver, else the nearest value along its path that has names: `visits.preview.mean("…`
    // (preview is a getter, which completion never runs) completes with the columns of `visits`.
    for (let n = at.receiver.length; n > 0 && names === null; n--) {
      const value = execution.lookup(at.receiver.slice(0, n));
      if (value !== undefined) names = await session.publicNames(value, at.method);
    }
    // `hush.col("…`: a column of any dataset handle the cells hold.
    if (names === null && at.receiver.length === 1 && at.receiver[0] === "hush" && at.method === "col") {
      const all = new Set<string>();
      for (const v of execution.cellValues(MAX_CELL_VALUES)) for (const n of (await session.publicNames(v, "col")) ?? []) all.add(n);
      names = [...all];
    }
  } catch {
    return null;
  }
  if (names === null) return null;
  return { matches: filterNames(names, at.prefix), cursor_start: at.start, cursor_end: cursor, source: "names" };
}

function executeContent(msg: Message): ExecuteContent {
  const c = msg.content;
  const silent = c.silent === true;
  return {
    code: typeof c.code === "string" ? c.code : "",
    silent,
    store_history: silent ? false : c.store_history !== false,
    user_expressions:
      c.user_expressions && typeof c.user_expressions === "object" ? (c.user_expressions as Record<string, unknown>) : {},
    stop_on_error: c.stop_on_error !== false,
  };
}

/**
 * Code and cursor, with the cursor converted to a UTF-16 index: the spec counts cursor_pos in
 * unicode code points (5.2+), JavaScript strings in UTF-16 code units.
 */
function textAndCursor(msg: Message): { code: string; cursor_pos: number } {
  const code = typeof msg.content.code === "string" ? msg.content.code : "";
  const pos = msg.content.cursor_pos;
  if (typeof pos !== "number" || !Number.isInteger(pos) || pos < 0) return { code, cursor_pos: code.length };
  let units = 0;
  let points = 0;
  for (const ch of code) {
    if (points === pos) break;
    units += ch.length;
    points += 1;
  }
  return { code, cursor_pos: units };
}

/** UTF-16 index → code point index. */
function toCodePoints(code: string, units: number): number {
  return [...code.slice(0, Math.max(0, units))].length;
}
