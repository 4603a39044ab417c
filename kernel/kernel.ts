/**
 * Assembles a running kernel: sockets, the output router, the cell API session, the TypeScript
 * execution hook, the handler table and the dispatcher.
 */
import { createRequire } from "node:module";
import { randomUUID } from "node:crypto";
import type { ConnectionInfo } from "./connection.js";
import { Dispatcher } from "./dispatch.js";
import { createExecution, describeThrown, type Execution } from "./execution.js";
import { createHandlers, plainBundle, type Engine } from "./handlers.js";
import { History } from "./history.js";
import { errorText, kernelLog } from "./log.js";
import { Output } from "./output.js";
import { loadSession, type CellHost, type CellSession, type MimeBundle } from "./session-loader.js";
import { beginCell, endCell, interruptRunningCell } from "./interrupt-target.js";
import { openSockets } from "./sockets.js";
import { Signer } from "./wire.js";

export interface DisplayOptions {
  displayId?: string;
  update?: boolean;
}

/** Declaration of the `display` global for the language service. */
const DISPLAY_DECLARATION = `
/** Shows a value below the cell (a release, a dataset handle, or any value as text). */
declare function display(value: unknown, opts?: { displayId?: string; update?: boolean }): void;
`;

/** Wait after the first kernel_info_reply before building the engine unasked (see `warm`). */
const WARM_DELAY_MS = 1500;

export interface RunningKernel {
  /** Resolves when the kernel has shut down. */
  closed: Promise<void>;
}

export async function startKernel(info: ConnectionInfo, opts: { rootDir?: string } = {}): Promise<RunningKernel> {
  const signer = new Signer(info.signature_scheme, info.key);
  const sessionId = randomUUID();
  const sockets = await openSockets(info);

  let dispatcher: Dispatcher | null = null;
  const output = new Output((msgType, content, parent) =>
    dispatcher ? dispatcher.publish(msgType, content, parent) : Promise.resolve(),
  );

  const displayContent = (bundle: MimeBundle, o: DisplayOptions): Record<string, unknown> => ({
    data: bundle.data,
    metadata: bundle.metadata,
    transient: o.displayId ? { display_id: o.displayId } : {},
  });
  const host: CellHost = {
    display(bundle, o = {}) {
      void output.publish(o.update ? "update_display_data" : "display_data", displayContent(bundle, o));
    },
  };
  const display = (value: unknown, o: DisplayOptions = {}): void => {
    void output.publishLater(o.update ? "update_display_data" : "display_data", async () => {
      try {
        const bundle = (await (await engine()).session.render(value)) ?? plainBundle(value);
        return displayContent(bundle, o);
      } catch (e: unknown) {
        output.write("stderr", `display failed: ${describeThrown(e).evalue}\n`);
        return null;
      }
    });
  };

  // The cell API session and the TypeScript program (seconds to build) come after the first
  // kernel_info_reply, so the client sees the kernel up sooner; requests that need them wait.
  let built: Promise<Engine> | null = null;
  let execution: Execution | null = null;
  const engine = (): Promise<Engine> =>
    (built ??= (async () => {
      const session: CellSession = await loadSession(host);
      routeTslabDisplay(output);
      const globals: Record<string, unknown> = { display };
      if (session.api) globals.hush = session.api;
      let declarations = DISPLAY_DECLARATION;
      try {
        declarations += session.typeDeclarations();
      } catch (e: unknown) {
        kernelLog(`no type declarations for \`hush\` (${errorText(e)}); completion on it is unavailable`);
      }
      execution = createExecution({ rootDir: opts.rootDir ?? process.cwd(), globals, declarations });
      return { session, execution };
    })());
  // Building blocks the main thread for seconds. A client that missed the idle of its first
  // kernel_info (its iopub subscription was not live yet) asks again about a second later
  // (KernelProcess.waitReady); starting the build after that keeps its second answer quick too.
  // A request that needs the engine earlier starts the build at once.
  let warmTimer: NodeJS.Timeout | null = null;
  const warm = (): void => {
    warmTimer ??= setTimeout(() => {
      engine().catch((e: unknown) => kernelLog(`could not prepare cells: ${errorText(e)}`));
    }, WARM_DELAY_MS);
  };
  const closeSession = async (): Promise<void> => {
    if (built) await (await built).session.close();
  };

  let resolveClosed!: () => void;
  const closed = new Promise<void>((r) => (resolveClosed = r));
  let exiting = false;
  const exit = async (): Promise<void> => {
    if (exiting) return;
    exiting = true;
    dispatcher?.stop();
    if (warmTimer) clearTimeout(warmTimer);
    await output.flush();
    output.releaseStdio();
    execution?.close();
    await sockets.close();
    resolveClosed();
  };

  const { table, aborted } = createHandlers({
    engine,
    warm,
    closeSession,
    history: new History(),
    beginCell,
    endCell,
    exit,
  });
  dispatcher = new Dispatcher({ signer, session: sessionId, send: sockets.send, output, handlers: table, aborted });
  const d = dispatcher;

  output.captureStdio();
  // The kernel's own interrupts never reach this listener (interrupt-target.ts); a SIGINT from
  // outside (Ctrl-C, `interrupt_mode: "signal"`) interrupts whichever cell runs when it is heard.
  process.on("SIGINT", () => execution?.interrupt(interruptRunningCell()));
  process.on("uncaughtException", (e) => output.write("stderr", `Uncaught ${describeThrown(e).traceback.join("\n")}\n`));
  process.on("unhandledRejection", (e) =>
    output.write("stderr", `Unhandled rejection ${describeThrown(e).traceback.join("\n")}\n`),
  );
  process.once("SIGTERM", () => {
    void closeSession()
      .catch(() => {})
      .then(exit);
  });

  sockets.onControl((frames, interrupted) => {
    // An interrupt_request the control thread aimed at a running cell: stop awaiting it, if it
    // still is the running one (execution.ts checks). The request is then answered as usual.
    if (interrupted !== 0) execution?.interrupt(interrupted);
    void d.dispatch("control", frames);
  });
  void (async () => {
    try {
      for await (const frames of sockets.shell) d.enqueueShell(frames);
    } catch (e: unknown) {
      if (!exiting) kernelLog(`shell socket: ${errorText(e)}`);
    }
  })();
  void d.runShell();
  await d.publish("status", { execution_state: "starting" }, null);
  return { closed };
}

/** Lets cells use tslab's own display helpers (`import * as tslab from "tslab"`). */
function routeTslabDisplay(output: Output): void {
  const require = createRequire(import.meta.url);
  const jupyter = require("tslab/dist/jupyter") as {
    lastWriteDisplayData: ((data: Record<string, unknown>, update: boolean) => void) | null;
  };
  jupyter.lastWriteDisplayData = (data, update) => {
    void output.publish(update ? "update_display_data" : "display_data", data);
  };
}
