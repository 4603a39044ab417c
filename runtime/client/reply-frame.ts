/**
 * Reading one reply frame from the curator: size, UTF-8, JSON, protocol version, then the strict
 * reply schema. Pure (no socket), so each malformed kind is easy to name and test. The result says
 * which request the reply names, when that can be read, so the client can fail that request at
 * once instead of letting it wait for its timeout.
 */
import { ProtocolError } from "../errors.js";
import { PROTOCOL_VERSION, type Response } from "../protocol/messages.js";
import { describeReplyIssues, responseSchema } from "../protocol/reply-schema.js";
import { PLAN_LIMITS } from "../protocol/limits.js";

/** What was wrong with a reply, for callers and tests that branch on it. */
export type ReplyProblem =
  | "too-large" // over the reply size limit; refused unread
  | "frames" // not exactly one frame
  | "not-utf8"
  | "not-json"
  | "too-deep" // nested past MAX_REPLY_DEPTH; refused before JSON.parse
  | "not-object" // JSON, but not an object
  | "version" // another protocol version
  | "shape" // fails the reply schema
  | "wrong-op" // a well-formed reply for another op than the request's
  | "no-id"; // well-formed, but names no request

/** A reply from the curator that the client cannot use. Never quotes a value from the reply. */
export class MalformedReplyError extends ProtocolError {
  readonly problem: ReplyProblem;
  constructor(problem: ReplyProblem, message: string) {
    super(message);
    this.problem = problem;
    this.name = "MalformedReplyError";
  }
}

export type ReadReply =
  | { ok: true; reply: Response }
  /** `id` is the request the frame names, or null when it names none that can be read. */
  | { ok: false; id: string | null; error: MalformedReplyError };

/** Bytes at the start of a frame searched for its id when the frame cannot be parsed. */
const PEEK_BYTES = 512;
/** Request ids are UUIDs (client.ts); anything else cannot name a pending request. */
const PEEK_ID = /"id"\s*:\s*"([0-9a-f-]{36})"/;

/**
 * The id of a frame that cannot be parsed whole (too large, not UTF-8, not JSON), read from its
 * first bytes only. The curator writes `{"v":1,"id":"...",` first, so a truncated or damaged reply
 * still names its request. A wrong guess is harmless: the id must match a pending request's random
 * UUID before anything is done with it.
 */
function peekId(frame: Buffer): string | null {
  const m = PEEK_ID.exec(frame.subarray(0, PEEK_BYTES).toString("latin1"));
  return m === null ? null : m[1];
}

function bad(problem: ReplyProblem, id: string | null, message: string): ReadReply {
  return { ok: false, id, error: new MalformedReplyError(problem, `malformed reply from the curator: ${message}`) };
}

const utf8 = new TextDecoder("utf-8", { fatal: true });

/**
 * Deepest nesting of arrays and objects a reply may have. The deepest real reply is a ledger entry
 * holding a plan whose filter nests PLAN_LIMITS.maxDepth conditions, at most two JSON levels each
 * ({ op: "and", of: [...] }); 40 more cover the envelope around it (about eight levels) and the
 * lists inside a condition, with room to spare: 64 with today's maxDepth of 12. Refused before
 * JSON.parse because V8 parses deep nesting slowly (measured on the shared build machine, Node 20:
 * 2.5-4.4 s for a 2 MB frame a million levels deep, 10-15 s for 8 MB), which would stall the kernel.
 */
export const MAX_REPLY_DEPTH = 2 * PLAN_LIMITS.maxDepth + 40;

const QUOTE = 0x22;
const BACKSLASH = 0x5c;
const OPEN_BRACKET = 0x5b;
const OPEN_BRACE = 0x7b;
const CLOSE_BRACKET = 0x5d;
const CLOSE_BRACE = 0x7d;

/**
 * True when brackets and braces outside strings nest deeper than `max`. One pass over the bytes;
 * safe on UTF-8 because no byte of a multi-byte character is ASCII.
 */
function nestsDeeperThan(frame: Buffer, max: number): boolean {
  let depth = 0;
  let inString = false;
  for (let i = 0; i < frame.length; i++) {
    const b = frame[i];
    if (inString) {
      if (b === BACKSLASH) i++;
      else if (b === QUOTE) inString = false;
    } else if (b === QUOTE) inString = true;
    else if (b === OPEN_BRACKET || b === OPEN_BRACE) {
      if (++depth > max) return true;
    } else if (b === CLOSE_BRACKET || b === CLOSE_BRACE) depth--;
  }
  return false;
}

/** Reads the frames of one reply, refusing more than `limit` bytes unread. */
export function readReply(frames: readonly Buffer[], limit: number): ReadReply {
  const frame = frames[frames.length - 1];
  if (frame === undefined) return bad("frames", null, "an empty message");
  if (frame.length > limit) {
    return bad("too-large", peekId(frame), `a frame of ${frame.length} bytes is over the limit of ${limit} bytes`);
  }
  if (frames.length !== 1) return bad("frames", peekId(frame), `${frames.length} frames where one was expected`);
  if (nestsDeeperThan(frame, MAX_REPLY_DEPTH)) {
    return bad("too-deep", peekId(frame), `the frame nests deeper than ${MAX_REPLY_DEPTH} levels`);
  }
  let text: string;
  try {
    text = utf8.decode(frame);
  } catch {
    return bad("not-utf8", peekId(frame), "the frame is not valid UTF-8");
  }
  let raw: unknown;
  try {
    raw = JSON.parse(text);
  } catch {
    return bad("not-json", peekId(frame), "the frame is not valid JSON");
  }
  if (typeof raw !== "object" || raw === null || Array.isArray(raw)) {
    return bad("not-object", null, "the frame is not a JSON object");
  }
  const envelope = raw as Record<string, unknown>;
  const id = typeof envelope.id === "string" && envelope.id !== "" ? envelope.id : null;
  if (envelope.v !== PROTOCOL_VERSION) {
    return bad("version", id, `it does not speak protocol version ${PROTOCOL_VERSION}, the version of this client`);
  }
  const r = responseSchema.safeParse(raw);
  if (!r.success) return bad("shape", id, describeReplyIssues(r.error));
  return { ok: true, reply: r.data };
}
