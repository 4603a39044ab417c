/**
 * The Jupyter wire codec (messaging protocol 5.3, "The Wire Protocol" section): framing on the
 * `<IDS|MSG>` delimiter, HMAC signing over the four JSON frames, serialize/deserialize. Pure: no
 * sockets, no clocks other than the header date, no globals.
 *
 * Frame layout: [identities..., "<IDS|MSG>", signature, header, parent_header, metadata, content,
 * buffers...]. The signature is the hex HMAC of header + parent_header + metadata + content, in
 * that order, computed over the exact bytes received (never over re-serialized JSON), and compared
 * in constant time.
 */
import { createHmac, getHashes, randomUUID, timingSafeEqual } from "node:crypto";
import { ProtocolError } from "../runtime/errors.js";

export const DELIMITER = Buffer.from("<IDS|MSG>");
export const PROTOCOL_VERSION = "5.3";

export interface Header {
  msg_id: string;
  session: string;
  username: string;
  date: string;
  msg_type: string;
  version: string;
}

export type JsonObject = Record<string, unknown>;

export interface Message<C = JsonObject> {
  /** ZeroMQ routing prefix (ROUTER sockets) or topic (PUB). */
  identities: Buffer[];
  header: Header;
  /** The header of the request this message answers; `{}` when there is none. */
  parent_header: Header | Record<string, never>;
  metadata: JsonObject;
  content: C;
  buffers: Buffer[];
}

/** Signs and verifies with the connection file's key; an empty key disables signing (spec). */
export class Signer {
  private readonly algorithm: string | null;

  constructor(
    scheme: string,
    private readonly key: string,
  ) {
    if (key === "") {
      this.algorithm = null;
      return;
    }
    const m = /^hmac-([a-z0-9-]+)$/.exec(scheme);
    if (!m || !getHashes().includes(m[1])) {
      throw new ProtocolError(`unsupported signature_scheme "${scheme}" (expected hmac-sha256)`);
    }
    this.algorithm = m[1];
  }

  sign(parts: readonly Buffer[]): string {
    if (this.algorithm === null) return "";
    const h = createHmac(this.algorithm, this.key);
    for (const p of parts) h.update(p);
    return h.digest("hex");
  }

  /** Constant-time check of a received signature frame against the received JSON frames. */
  verify(signature: Buffer, parts: readonly Buffer[]): boolean {
    if (this.algorithm === null) return true;
    const expected = Buffer.from(this.sign(parts), "ascii");
    if (signature.length !== expected.length) return false;
    return timingSafeEqual(signature, expected);
  }
}

/** Splits raw frames and checks the signature. Throws ProtocolError on bad framing or signature. */
export function deserialize(frames: readonly Buffer[], signer: Signer): Message {
  const at = frames.findIndex((f) => f.equals(DELIMITER));
  if (at < 0) throw new ProtocolError("message has no <IDS|MSG> delimiter");
  if (frames.length < at + 6) throw new ProtocolError("message has fewer than 5 frames after the delimiter");
  const signature = frames[at + 1];
  const parts = frames.slice(at + 2, at + 6);
  if (!signer.verify(signature, parts)) throw new ProtocolError("message signature does not match");
  const [header, parent, metadata, content] = parts.map((p, i) => parseObject(p, FRAME_NAMES[i]));
  if (typeof header.msg_type !== "string" || typeof header.msg_id !== "string") {
    throw new ProtocolError("message header lacks msg_type or msg_id");
  }
  return {
    identities: frames.slice(0, at),
    header: header as unknown as Header,
    parent_header: parent as Message["parent_header"],
    metadata,
    content,
    buffers: frames.slice(at + 6),
  };
}

export function serialize(msg: Message<unknown>, signer: Signer): Buffer[] {
  const parts = [msg.header, msg.parent_header, msg.metadata, msg.content].map((o) =>
    Buffer.from(JSON.stringify(o), "utf8"),
  );
  return [...msg.identities, DELIMITER, Buffer.from(signer.sign(parts), "ascii"), ...parts, ...msg.buffers];
}

export function newHeader(msgType: string, session: string, username = "hush"): Header {
  return {
    msg_id: randomUUID(),
    session,
    username,
    date: new Date().toISOString(),
    msg_type: msgType,
    version: PROTOCOL_VERSION,
  };
}

/** A message that answers (or is published on behalf of) `parent`; keeps the routing identities. */
export function childOf<C>(
  parent: Message<unknown>,
  msgType: string,
  content: C,
  session: string,
  opts: { identities?: Buffer[]; metadata?: JsonObject } = {},
): Message<C> {
  return {
    identities: opts.identities ?? parent.identities,
    header: newHeader(msgType, session, parent.header.username),
    parent_header: parent.header,
    metadata: opts.metadata ?? {},
    content,
    buffers: [],
  };
}

/** A client request (no parent). */
export function request<C>(msgType: string, content: C, session: string): Message<C> {
  return { identities: [], header: newHeader(msgType, session), parent_header: {}, metadata: {}, content, buffers: [] };
}

const FRAME_NAMES = ["header", "parent_header", "metadata", "content"];

function parseObject(frame: Buffer, name: string): JsonObject {
  let v: unknown;
  try {
    v = JSON.parse(frame.toString("utf8"));
  } catch (e: unknown) {
    throw new ProtocolError(`message ${name} frame is not JSON`, { cause: e });
  }
  if (v === null || typeof v !== "object" || Array.isArray(v)) {
    throw new ProtocolError(`message ${name} frame is not a JSON object`);
  }
  return v as JsonObject;
}
