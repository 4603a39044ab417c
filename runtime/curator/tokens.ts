/**
 * Analyst tokens. The policy file stores only a salted scrypt hash of each token, so a leaked
 * policy does not leak the tokens. Format: "scrypt$N$r$p$<salt b64>$<hash b64>".
 */
import { randomBytes, scrypt, scryptSync, timingSafeEqual, type ScryptOptions } from "node:crypto";

/** Cost parameters for new hashes (RFC 7914 recommends N = 2^14, r = 8, p = 1 for interactive use). */
const N = 16384;
const R = 8;
const P = 1;
const KEY_LEN = 32;
const SALT_LEN = 16;
/** Refuse stored parameters that would make one check take too long or too much memory. */
const MAX_N = 1 << 20;

const B64 = /^[A-Za-z0-9+/]+={0,2}$/;

export function hashToken(token: string): string {
  const salt = randomBytes(SALT_LEN);
  const hash = scryptSync(token, salt, KEY_LEN, { N, r: R, p: P, maxmem: 256 * N * R });
  return `scrypt$${N}$${R}$${P}$${salt.toString("base64")}$${hash.toString("base64")}`;
}

/** Parses a stored hash; null when it is malformed. Used by the policy loader to check the format. */
export function parseTokenHash(stored: string): { n: number; r: number; p: number; salt: Buffer; hash: Buffer } | null {
  const parts = stored.split("$");
  if (parts.length !== 6 || parts[0] !== "scrypt") return null;
  const [n, r, p] = parts.slice(1, 4).map((s) => (/^\d{1,8}$/.test(s) ? Number(s) : NaN));
  if (!Number.isInteger(n) || !Number.isInteger(r) || !Number.isInteger(p)) return null;
  // N must be a power of two above 1 (scrypt's requirement).
  if (n < 2 || n > MAX_N || (n & (n - 1)) !== 0 || r < 1 || r > 32 || p < 1 || p > 16) return null;
  if (!B64.test(parts[4]) || !B64.test(parts[5])) return null;
  const salt = Buffer.from(parts[4], "base64");
  const hash = Buffer.from(parts[5], "base64");
  if (salt.length < 8 || hash.length < 16 || hash.length > 128) return null;
  return { n, r, p, salt, hash };
}

/** node:crypto's scrypt with a callback runs on libuv's thread pool, not on the caller's thread. */
function scryptOffThread(token: string, salt: Buffer, keyLen: number, options: ScryptOptions): Promise<Buffer> {
  return new Promise((resolve, reject) => {
    scrypt(token, salt, keyLen, options, (err, key) => (err === null ? resolve(key) : reject(err)));
  });
}

/**
 * True when `token` matches the stored hash; false on a malformed hash. The scrypt work runs off
 * the event loop (the curator's message loop keeps answering meanwhile); the comparison is
 * constant-time.
 */
export async function verifyToken(stored: string, token: string): Promise<boolean> {
  const parsed = parseTokenHash(stored);
  if (parsed === null) return false;
  let candidate: Buffer;
  try {
    candidate = await scryptOffThread(token, parsed.salt, parsed.hash.length, {
      N: parsed.n,
      r: parsed.r,
      p: parsed.p,
      maxmem: 256 * parsed.n * parsed.r + 1024 * 1024,
    });
  } catch (e: unknown) {
    // Only scrypt's own refusals (parameters over maxmem) mean "no match"; anything else is a fault.
    if (e instanceof RangeError || (e instanceof Error && (e as { code?: string }).code?.startsWith("ERR_CRYPTO") === true)) return false;
    throw e;
  }
  return timingSafeEqual(candidate, parsed.hash);
}
