/**
 * One error hierarchy for the whole project. Every message carries context (which field, which
 * column, which limit) but never a data value read from a sealed dataset.
 */
import type { SpendSummary } from "./protocol/messages.js";

export type HushErrorKind =
  | "bad-input" // a caller passed something malformed (plan, parameter, file)
  | "policy" // the steward's policy file is invalid
  | "over-cap" // the release would cross the privacy-loss cap
  | "unauthorized" // unknown analyst or bad token
  | "unknown-dataset"
  | "protocol" // a malformed or oversized frame, wrong protocol version
  | "unreachable" // the curator could not be reached
  | "busy" // the curator refused to start the work now (too many sign-ins waiting or failing); nothing was done
  | "internal";

export class HushError extends Error {
  readonly kind: HushErrorKind;
  constructor(kind: HushErrorKind, message: string, options?: { cause?: unknown }) {
    super(message, options);
    this.kind = kind;
    this.name = "HushError";
  }
}

export class BadInputError extends HushError {
  constructor(message: string, options?: { cause?: unknown }) {
    super("bad-input", message, options);
    this.name = "BadInputError";
  }
}

/**
 * A release that did not finish within the curator's time limit: refused, nothing spent. A
 * bad-input refusal (the plan asks for more work than the curator allows), so clients treat it as
 * a refusal that spent nothing.
 */
export class TimeLimitError extends BadInputError {
  constructor(message: string, options?: { cause?: unknown }) {
    super(message, options);
    this.name = "TimeLimitError";
  }
}

export class PolicyError extends HushError {
  constructor(message: string, options?: { cause?: unknown }) {
    super("policy", message, options);
    this.name = "PolicyError";
  }
}

export class OverCapError extends HushError {
  /** The account's spend when the release was refused, when the curator stated it. */
  readonly spend?: SpendSummary;
  constructor(message: string, options?: { cause?: unknown; spend?: SpendSummary }) {
    super("over-cap", message, options);
    this.name = "OverCapError";
    if (options?.spend !== undefined) this.spend = options.spend;
  }
}

export class UnauthorizedError extends HushError {
  constructor(message: string, options?: { cause?: unknown }) {
    super("unauthorized", message, options);
    this.name = "UnauthorizedError";
  }
}

export class UnknownDatasetError extends HushError {
  constructor(message: string, options?: { cause?: unknown }) {
    super("unknown-dataset", message, options);
    this.name = "UnknownDatasetError";
  }
}

export class ProtocolError extends HushError {
  constructor(message: string, options?: { cause?: unknown }) {
    super("protocol", message, options);
    this.name = "ProtocolError";
  }
}

export class UnreachableError extends HushError {
  constructor(message: string, options?: { cause?: unknown }) {
    super("unreachable", message, options);
    this.name = "UnreachableError";
  }
}

/** Refused before any work: try again later. Says nothing about whether the analyst name exists. */
export class BusyError extends HushError {
  constructor(message: string, options?: { cause?: unknown }) {
    super("busy", message, options);
    this.name = "BusyError";
  }
}

export function isHushError(e: unknown): e is HushError {
  return e instanceof HushError;
}
