/** The pure wire codec: framing, signing, verification. */
import { describe, expect, it } from "vitest";
import { ProtocolError } from "../../runtime/errors.js";
import { DELIMITER, deserialize, request, serialize, Signer, childOf } from "../../kernel/wire.js";

describe("Signer", () => {
  it("matches jupyter_client's Session.sign on the same frames", () => {
    // Check value computed with jupyter_client 7.4.9:
    //   Session(key=b'hush-test-key', signature_scheme='hmac-sha256').sign(
    //     [b'{"msg_id":"1","msg_type":"kernel_info_request"}', b'{}', b'{}', b'{}'])
    const s = new Signer("hmac-sha256", "hush-test-key");
    const parts = ['{"msg_id":"1","msg_type":"kernel_info_request"}', "{}", "{}", "{}"].map((p) => Buffer.from(p));
    expect(s.sign(parts)).toBe("5192c7d61d4ca8142d58e76b43e2c5e633e1c244bc23195952a4fbab04a51f26");
  });

  it("verifies only the exact signature, whatever its length", () => {
    const s = new Signer("hmac-sha256", "k");
    const parts = [Buffer.from("{}"), Buffer.from("{}"), Buffer.from("{}"), Buffer.from("{}")];
    const sig = s.sign(parts);
    expect(s.verify(Buffer.from(sig), parts)).toBe(true);
    expect(s.verify(Buffer.from(sig.slice(0, -1)), parts)).toBe(false);
    expect(s.verify(Buffer.from(sig.slice(0, -1) + (sig.endsWith("0") ? "1" : "0")), parts)).toBe(false);
    expect(s.verify(Buffer.from(""), parts)).toBe(false);
  });

  it("signs nothing with an empty key (spec: signing disabled)", () => {
    const s = new Signer("hmac-sha256", "");
    expect(s.sign([Buffer.from("{}")])).toBe("");
    expect(s.verify(Buffer.from("anything"), [])).toBe(true);
  });

  it("rejects an unknown signature scheme", () => {
    expect(() => new Signer("rot13", "k")).toThrow(ProtocolError);
    expect(() => new Signer("hmac-nosuchhash", "k")).toThrow(/signature_scheme/);
  });
});

describe("serialize / deserialize", () => {
  const signer = new Signer("hmac-sha256", "secret");

  it("round-trips identities, header, content and buffers", () => {
    const msg = request("execute_request", { code: "1 + 1" }, "sess");
    msg.identities = [Buffer.from("peer-1"), Buffer.from("peer-2")];
    msg.buffers = [Buffer.from([1, 2, 3])];
    const frames = serialize(msg, signer);
    expect(frames[2].equals(DELIMITER)).toBe(true);
    const back = deserialize(frames, signer);
    expect(back.identities.map(String)).toEqual(["peer-1", "peer-2"]);
    expect(back.header).toEqual(msg.header);
    expect(back.content).toEqual({ code: "1 + 1" });
    expect(back.buffers).toEqual([Buffer.from([1, 2, 3])]);
  });

  it("verifies over the received bytes, not re-serialized JSON", () => {
    const msg = request("kernel_info_request", {}, "s");
    const frames = serialize(msg, signer);
    // Same JSON value, different bytes: the signature no longer matches.
    frames[5] = Buffer.from("{ }"); // content frame (no identities: delimiter, signature, 4 JSON frames)
    expect(() => deserialize(frames, signer)).toThrow(/signature/);
  });

  it("rejects a missing delimiter, too few frames and non-object JSON", () => {
    const frames = serialize(request("x", {}, "s"), signer);
    expect(() => deserialize(frames.slice(1), signer)).toThrow(ProtocolError);
    expect(() => deserialize(frames.slice(0, 5), signer)).toThrow(/fewer than 5/);
    const parts = [Buffer.from("[]"), Buffer.from("{}"), Buffer.from("{}"), Buffer.from("{}")];
    expect(() => deserialize([DELIMITER, Buffer.from(signer.sign(parts)), ...parts], signer)).toThrow(/not a JSON object/);
  });

  it("answers with the request as parent and keeps its routing identities", () => {
    const req = request("kernel_info_request", {}, "client");
    req.identities = [Buffer.from("id")];
    const rep = childOf(req, "kernel_info_reply", { status: "ok" }, "kernel");
    expect(rep.parent_header).toEqual(req.header);
    expect(rep.identities).toEqual(req.identities);
    expect(rep.header).toMatchObject({ msg_type: "kernel_info_reply", session: "kernel", version: "5.3" });
  });
});
