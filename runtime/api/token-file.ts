/**
 * Reads an analyst's token from a file that only its owner can read (the kernelspec written by
 * `hush install --analyst ... --token-file FILE` names the file; the token itself is never in
 * kernel.json or in a notebook).
 *
 * Refused, with a message that says how to fix it and never shows the token:
 *   - a file that group or others may read, write or run (mode & 0o077), as OpenSSH refuses a
 *     private key that is "too open"; the fix is `chmod 600 FILE`;
 *   - a file owned by another user (someone else could change it under us);
 *   - anything but a regular file (a FIFO would block the kernel; a directory is a slip);
 *   - more than MAX_TOKEN_FILE_BYTES, empty, several lines, or characters outside printable ASCII.
 *
 * The permission check uses fstat on the opened descriptor, so the file checked is the file read.
 */
import { closeSync, constants, fstatSync, openSync, readSync } from "node:fs";
import { BadInputError } from "../errors.js";

/** Tokens from `hush token` are far shorter; a bound keeps a wrong path (a log, an image) cheap. */
export const MAX_TOKEN_FILE_BYTES = 4096;

/** Printable ASCII without spaces: what `hush token` prints, and what survives copy and paste. */
const TOKEN_CHARS = /^[\x21-\x7e]+$/;

export function readTokenFile(file: string): string {
  let fd: number;
  try {
    // O_NONBLOCK: opening a FIFO for reading would otherwise wait for a writer forever.
    fd = openSync(file, constants.O_RDONLY | constants.O_NONBLOCK);
  } catch (e: unknown) {
    const code = e instanceof Error && "code" in e ? String((e as NodeJS.ErrnoException).code) : "";
    const why = code === "ENOENT" ? "does not exist" : code === "EACCES" ? "cannot be opened (permission denied)" : "cannot be opened";
    throw new BadInputError(`the token file ${file} ${why}`, { cause: e });
  }
  try {
    const st = fstatSync(fd);
    if (!st.isFile()) throw new BadInputError(`the token file ${file} is not a regular file`);
    // Windows has no POSIX modes or uids (Node reports made-up ones); there the check is moot.
    if (process.platform !== "win32") {
      if ((st.mode & 0o077) !== 0) {
        const mode = (st.mode & 0o777).toString(8).padStart(3, "0");
        throw new BadInputError(
          `the token file ${file} can be read or changed by other users (mode ${mode}); a token must be private to you: run  chmod 600 ${file}`,
        );
      }
      const uid = process.getuid?.();
      if (uid !== undefined && st.uid !== uid) {
        throw new BadInputError(`the token file ${file} belongs to another user (uid ${st.uid}); keep your own copy, readable only by you`);
      }
    }
    if (st.size > MAX_TOKEN_FILE_BYTES) {
      throw new BadInputError(`the token file ${file} is ${st.size} bytes; a token file holds one token of at most ${MAX_TOKEN_FILE_BYTES} bytes`);
    }
    // Read one byte past the bound in case the file grew after fstat.
    const buf = Buffer.alloc(MAX_TOKEN_FILE_BYTES + 1);
    let got = 0;
    for (;;) {
      const n = readSync(fd, buf, got, buf.length - got, null);
      if (n === 0) break;
      got += n;
      if (got === buf.length) {
        throw new BadInputError(`the token file ${file} holds more than ${MAX_TOKEN_FILE_BYTES} bytes; a token file holds one token`);
      }
    }
    return parseToken(file, buf.subarray(0, got).toString("latin1"));
  } finally {
    closeSync(fd);
  }
}

/** One token on one line; a final newline (LF or CRLF) and surrounding blanks are allowed. */
function parseToken(file: string, text: string): string {
  const lines = text.split(/\r?\n/).map((l) => l.trim()).filter((l) => l !== "");
  if (lines.length === 0) throw new BadInputError(`the token file ${file} is empty; put your token in it, on one line`);
  if (lines.length > 1) throw new BadInputError(`the token file ${file} has ${lines.length} non-empty lines; it must hold only your token, on one line`);
  if (!TOKEN_CHARS.test(lines[0])) {
    throw new BadInputError(`the token file ${file} holds characters a token does not have (only printable ASCII, no spaces)`);
  }
  return lines[0];
}
