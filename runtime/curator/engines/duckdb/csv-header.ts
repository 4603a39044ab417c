/**
 * CSV header reading for the DuckDB engine. The header is read here rather than by DuckDB's
 * sniffer, because the sniffer can take a ragged data line for the header and then misname every
 * column; DuckDB then reads every column as text under positional names (h0, h1, ...).
 */
import { closeSync, openSync, readSync } from "node:fs";

/** How a CSV file is read: its header names (from its first line) and the delimiter. */
export interface CsvLayout {
  header: string[];
  delim: string;
}

/** The header line may be at most this long (bytes). */
export const MAX_HEADER_BYTES = 1 << 20;

/**
 * Reads the first line of a CSV file in Node and splits it into names (RFC 4180 quoting; a UTF-8
 * BOM and a trailing CR are dropped). The delimiter is a comma, or a tab or semicolon when the
 * header line has no comma. Returns null when the first line is not a well-formed header (open
 * quote, too long).
 */
export function readCsvLayout(file: string): CsvLayout | null {
  const fd = openSync(file, "r");
  let bytes: Buffer;
  try {
    const buf = Buffer.alloc(MAX_HEADER_BYTES + 1);
    const n = readSync(fd, buf, 0, buf.length, 0);
    bytes = buf.subarray(0, n);
  } finally {
    closeSync(fd);
  }
  let text = bytes.toString("utf8");
  if (text.startsWith("\uFEFF")) text = text.slice(1);
  // End of the first line: the first newline outside quotes.
  let inQuote = false;
  let end = -1;
  for (let i = 0; i < text.length; i++) {
    const ch = text[i];
    if (ch === '"') inQuote = !inQuote;
    else if (ch === "\n" && !inQuote) {
      end = i;
      break;
    }
  }
  if (end < 0) {
    if (bytes.length > MAX_HEADER_BYTES || inQuote) return null;
    end = text.length;
  }
  const line = text.slice(0, end).replace(/\r$/, "");
  const delim = line.includes(",") || line.length === 0 ? "," : line.includes("\t") ? "\t" : line.includes(";") ? ";" : ",";
  const header: string[] = [];
  let field = "";
  let quoted = false;
  for (let i = 0; i < line.length; i++) {
    const ch = line[i];
    if (quoted) {
      if (ch === '"' && line[i + 1] === '"') {
        field += '"';
        i++;
      } else if (ch === '"') quoted = false;
      else field += ch;
    } else if (ch === '"') quoted = true;
    else if (ch === delim) {
      header.push(field);
      field = "";
    } else field += ch;
  }
  if (line.length > 0) header.push(field);
  return { header, delim };
}

/** Line-level CSV problems (DuckDB reject error types) as steward-facing reasons; never values. */
export function csvRejectReason(errorType: string): string {
  switch (errorType) {
    case "MISSING COLUMNS":
    case "TOO MANY COLUMNS":
      return "wrong number of fields";
    case "INVALID UNICODE":
      return "not valid UTF-8";
    case "UNQUOTED VALUE":
      return "malformed quoting";
    case "LINE SIZE OVER MAXIMUM":
      return "line too long";
    default:
      return "malformed line";
  }
}
