/**
 * Turns a curator error reply back into the matching HushError subclass, so a cell sees the same
 * error class whether the problem was found locally or by the curator.
 */
import {
  BadInputError,
  BusyError,
  HushError,
  OverCapError,
  PolicyError,
  ProtocolError,
  UnauthorizedError,
  UnknownDatasetError,
  UnreachableError,
  type HushErrorKind,
} from "../errors.js";
import type { SpendSummary } from "../protocol/messages.js";
import { ERROR_KINDS } from "../protocol/reply-schema.js";

// The kinds the protocol defines, listed once (reply-schema.ts, checked against HushErrorKind).
const KNOWN: ReadonlySet<string> = new Set<string>(ERROR_KINDS);

export function errorFromWire(error: { kind: string; message: string; spend?: SpendSummary }): HushError {
  const message = typeof error.message === "string" ? error.message : "error without a message";
  const kind = KNOWN.has(error.kind) ? (error.kind as HushErrorKind) : "internal";
  switch (kind) {
    case "bad-input":
      return new BadInputError(message);
    case "policy":
      return new PolicyError(message);
    case "over-cap":
      // An over-cap refusal carries the spend summary at the time of refusal.
      return new OverCapError(message, { spend: error.spend });
    case "unauthorized":
      return new UnauthorizedError(message);
    case "unknown-dataset":
      return new UnknownDatasetError(message);
    case "protocol":
      return new ProtocolError(message);
    case "unreachable":
      return new UnreachableError(message);
    case "busy":
      return new BusyError(message);
    case "internal":
      return new HushError("internal", message);
  }
}
