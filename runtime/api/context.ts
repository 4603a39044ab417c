/**
 * What the cell API objects share: a way to reach the curator (lazily: the first query connects or
 * starts the embedded curator) and this kernel session's spend record. Also the single place that
 * turns a refusal into an error that states the remaining budget.
 */
import { BadInputError, BusyError, HushError, OverCapError, PolicyError, ProtocolError, UnauthorizedError, UnknownDatasetError, UnreachableError } from "../errors.js";
import type { CuratorClient } from "../client/client.js";
import type { SessionSpend } from "./session-spend.js";
import { remainingText } from "./text.js";

/**
 * The curator operations the API uses (CuratorClient satisfies it; tests may pass a stand-in).
 * `accounts` is optional: without it the budget overview asks `spend` per catalogued dataset.
 */
export type CuratorPort = Pick<CuratorClient, "catalogue" | "open" | "ask" | "preview" | "spend" | "ledger" | "close"> & Partial<Pick<CuratorClient, "accounts" | "ledgerPage">>;

export interface ApiContext {
  /** The curator connection, made on first use. */
  port(): Promise<CuratorPort>;
  /** The analyst this session acts for, once connected. */
  analyst(): Promise<string>;
  readonly spend: SessionSpend;
}

function sameKind(e: HushError, message: string): HushError {
  const options = { cause: e };
  switch (e.kind) {
    case "bad-input":
      return new BadInputError(message, options);
    case "policy":
      return new PolicyError(message, options);
    case "over-cap":
      // The refusal's spend summary travels with the reworded error.
      return new OverCapError(message, { ...options, spend: e instanceof OverCapError ? e.spend : undefined });
    case "unauthorized":
      return new UnauthorizedError(message, options);
    case "unknown-dataset":
      return new UnknownDatasetError(message, options);
    case "protocol":
      return new ProtocolError(message, options);
    case "unreachable":
      return new UnreachableError(message, options);
    case "busy":
      return new BusyError(message, options);
    case "internal":
      return new HushError("internal", message, options);
  }
}

/**
 * The same error with a sentence on the budget appended: a refused query spends nothing, and the
 * analyst sees what remains. Non-hush errors pass through unchanged.
 */
export function withBudgetNote(e: unknown, ctx: ApiContext, dataset: string): unknown {
  if (!(e instanceof HushError)) return e;
  // A refusal's spend summary, when the curator sent one (over-cap errors carry it).
  const s = e instanceof OverCapError ? e.spend : undefined;
  if (s) ctx.spend.noteSpend(s);
  const known = s ?? ctx.spend.latest(dataset);
  // Only refusals are known to have spent nothing; other failures are reported as they came.
  if (e.kind !== "bad-input" && e.kind !== "over-cap" && e.kind !== "unknown-dataset") return e;
  // The curator's own refusal may already say that nothing was spent; say it once.
  const said = /nothing was spent/i.test(e.message);
  const remains = known ? remainingText(known) : null;
  const note = said ? (remains ? `${remains}.` : "") : remains ? `Nothing was spent; ${remains}.` : "Nothing was spent.";
  if (note === "") return e;
  return sameKind(e, `${e.message}\n${note}`);
}
