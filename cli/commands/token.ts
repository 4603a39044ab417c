/**
 * `hush token [--analyst NAME]`: prints a token once, for the analyst, and the line with its hash for
 * the steward's policy. A token piped in on stdin is hashed instead of making a new one.
 */
import { randomBytes } from "node:crypto";
import { hashToken } from "../../runtime/curator/tokens.js";
import { BadInputError } from "../../runtime/errors.js";

async function readPiped(): Promise<string> {
  if (process.stdin.isTTY === true) return "";
  const chunks: Buffer[] = [];
  for await (const c of process.stdin) chunks.push(typeof c === "string" ? Buffer.from(c) : (c as Buffer));
  return Buffer.concat(chunks).toString("utf8").trim();
}

export async function runToken(o: { analyst: string }, out: (s: string) => void): Promise<void> {
  if (!/^[A-Za-z][A-Za-z0-9_-]{0,63}$/.test(o.analyst)) {
    throw new BadInputError("--analyst: names use letters, digits, - and _ (at most 64, starting with a letter)");
  }
  const piped = await readPiped();
  if (piped.includes("\n")) throw new BadInputError("the token on stdin must be one line");
  // 32 random bytes: 256 bits, far beyond guessing; base64url keeps it shell- and YAML-safe.
  const token = piped === "" ? randomBytes(32).toString("base64url") : piped;
  out(`token (give it to the analyst privately; it is not shown again): ${token}\n`);
  out(`policy line (under analysts:):\n  ${o.analyst}: { token: "${hashToken(token)}" }\n`);
}
