/**
 * The curator's side of the wire: one raw request frame -> a validated Request envelope, and a
 * Response -> bytes. Every protocol refusal (oversized, not JSON, wrong version, unknown op) is made
 * here, before anything else reads the frame.
 */
import { ProtocolError } from "../errors.js";
import { MAX_FRAME_BYTES, PROTOCOL_VERSION, type Request, type Response } from "../protocol/messages.js";
import { parseRequest } from "../protocol/schema.js";

const OPS = new Set(["catalogue", "open", "ask", "preview", "spend", "ledger", "accounts"]);
/** Longest request id echoed back; a longer one is answered with the empty id. */
const MAX_ECHOED_ID = 200;

/**
 * Reads the request id as early as possible, so that a refusal can still be matched to its request
 * by the client: "" until the frame is a JSON object with a short string id.
 */
export interface FrameRead {
  id: string;
  /** Throws a ProtocolError (or the schema's BadInputError) for a frame that is not a valid request. */
  request(): Request;
}

export function readRequestFrame(frame: Buffer): FrameRead {
  let id = "";
  return {
    get id() {
      return id;
    },
    request(): Request {
      if (frame.length > MAX_FRAME_BYTES) {
        // Refused unread: an oversized frame is never parsed.
        throw new ProtocolError(`request frame of ${frame.length} bytes is over the limit of ${MAX_FRAME_BYTES} bytes`);
      }
      let raw: unknown;
      try {
        raw = JSON.parse(new TextDecoder("utf-8", { fatal: true }).decode(frame));
      } catch {
        throw new ProtocolError("request frame is not valid UTF-8 JSON");
      }
      if (typeof raw !== "object" || raw === null || Array.isArray(raw)) {
        throw new ProtocolError("request frame must be a JSON object");
      }
      const envelope = raw as Record<string, unknown>;
      if (typeof envelope.id === "string" && envelope.id.length <= MAX_ECHOED_ID) id = envelope.id;
      if (envelope.v !== PROTOCOL_VERSION) {
        throw new ProtocolError(
          `unsupported protocol version ${JSON.stringify(envelope.v ?? null)}; this curator speaks version ${PROTOCOL_VERSION}`,
        );
      }
      const body = envelope.body as Record<string, unknown> | null | undefined;
      const op = typeof body === "object" && body !== null ? body.op : undefined;
      if (typeof op !== "string" || !OPS.has(op)) {
        throw new ProtocolError(`unknown op ${JSON.stringify(op ?? null)}; expected one of ${[...OPS].join(", ")}`);
      }
      return parseRequest(raw);
    },
  };
}

export function encodeResponse(res: Response): Buffer {
  return Buffer.from(JSON.stringify(res), "utf8");
}
