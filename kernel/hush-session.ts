/**
 * The cell API session of one kernel: the `hush` object cells see, rendering of its objects as
 * mime bundles, and the running privacy-loss line after a cell that released something. The kernel
 * (kernel/session-loader.ts) loads this module at run time and uses only the members below.
 *
 * The curator connection is lazy: nothing connects (or starts) until a cell first uses `hush`.
 */
import type { ConnectDeps } from "../runtime/api/connection.js";
import { Connector } from "../runtime/api/connection.js";
import { resolveConfig } from "../runtime/api/config.js";
import type { ApiContext } from "../runtime/api/context.js";
import { ensureDeclarations } from "./api-declarations.js";
import { Hush } from "../runtime/api/hush.js";
import { SessionSpend } from "../runtime/api/session-spend.js";
import { Rational } from "../runtime/core/index.js";
import { SealedTable } from "../runtime/api/table.js";
import { lossBundle, noticeBundle, renderValue } from "./display/bundle.js";
import type { LossLine } from "./display/views.js";

export interface MimeBundle {
  data: Record<string, unknown>;
  metadata: Record<string, unknown>;
}

export interface CellHost {
  display(bundle: MimeBundle, opts?: { displayId?: string; update?: boolean }): void;
}

/** Longest wait for the catalogue when completing a dataset name. */
const CATALOGUE_WAIT_MS = 1000;

export class HushSession {
  /** Exposed as the global `hush` in cells. */
  readonly api: Hush;
  readonly #connector: Connector;
  readonly #spend = new SessionSpend();

  private constructor(host: CellHost, env: NodeJS.ProcessEnv, deps: Partial<ConnectDeps>) {
    this.#connector = new Connector(
      () => resolveConfig(env),
      (text) => host.display(noticeBundle(text)),
      deps,
    );
    const ctx: ApiContext = {
      port: async () => (await this.#connector.connection()).port,
      analyst: async () => (await this.#connector.connection()).analyst,
      spend: this.#spend,
    };
    this.api = new Hush(ctx);
  }

  /**
   * A session for one kernel. `deps` replaces how the curator is reached (tests pass a stand-in
   * client); by default the environment decides (see runtime/api/config.ts).
   */
  static create(host: CellHost, env: NodeJS.ProcessEnv = process.env, deps: Partial<ConnectDeps> = {}): HushSession {
    return new HushSession(host, env, deps);
  }

  /** The bundle for a cell result (release, handle, budget, preview, ledger, `hush`); null for anything else. */
  render(value: unknown): Promise<MimeBundle | null> {
    return renderValue(value);
  }

  /**
   * After a cell: if it released (or replayed) anything, the one privacy-loss line of the cell:
   * per account it touched, the analyst's total against the cap, this cell's part and what is left.
   */
  async afterCell(): Promise<MimeBundle | null> {
    const records = this.#spend.takeCell();
    if (records.length === 0) return null;
    const lines: LossLine[] = [];
    for (const dataset of [...new Set(records.map((r) => r.dataset))]) {
      const spend = this.#spend.latest(dataset);
      if (!spend) continue;
      const mine = records.filter((r) => r.dataset === dataset);
      lines.push({
        dataset,
        sessionSpent: this.#spend.sessionSpent(dataset),
        cellSpent: mine.reduce((sum, r) => sum.add(Rational.parse(r.cost)), Rational.ZERO).toString(),
        spend,
        released: mine.filter((r) => !r.replay).length,
        replayed: mine.filter((r) => r.replay).length,
      });
    }
    return lines.length ? lossBundle(lines) : null;
  }

  /**
   * Declarations of `hush` and its types, for the kernel's language service: generated from the
   * compiler's output of runtime/api (kernel/api-declarations.ts), made again here when a build by
   * `tsc` alone left them missing or made from other output.
   */
  typeDeclarations(): string {
    return ensureDeclarations();
  }

  /**
   * Names for completion in a string argument (kernel/completion-quick.ts): on `hush`, the datasets
   * (opened in this session, and the curator's catalogue once connected: completion never starts a
   * curator); on a dataset handle, its columns. Public schema only, never data.
   */
  async publicNames(receiver: unknown, method: string): Promise<string[] | null> {
    if (receiver instanceof SealedTable) return receiver.columns.map((c) => c.name);
    if (receiver !== this.api || !["open", "budget", "ledger"].includes(method)) return null;
    const names = new Set(this.#spend.datasets());
    const pending = this.#connector.established();
    if (pending) {
      let timer: NodeJS.Timeout | undefined;
      const late = new Promise<null>((r) => (timer = setTimeout(() => r(null), CATALOGUE_WAIT_MS)));
      try {
        const listed = await Promise.race([pending.then((c) => c.port.catalogue()), late]);
        for (const d of listed?.datasets ?? []) names.add(d.name);
      } catch {
        // No catalogue (connection failed or refused): the names opened here still complete.
      } finally {
        clearTimeout(timer);
      }
    }
    return [...names];
  }

  /** Closes the curator connection and stops an embedded curator. */
  close(): Promise<void> {
    return this.#connector.close();
  }
}
