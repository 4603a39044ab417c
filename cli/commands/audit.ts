/** `hush audit NOTEBOOK --key PUBKEY [--cap EPS] [--analyst NAME] [--dataset NAME] [--json]`: exit 0 clean, 1 findings, 2 unreadable input. */
import { existsSync, readFileSync } from "node:fs";
import type { KeyObject } from "node:crypto";
import { Rational } from "../../runtime/core/index.js";
import { BadInputError } from "../../runtime/errors.js";
import { loadPublicKey } from "../../runtime/protocol/receipts.js";
import { type AuditReport, auditNotebook } from "../audit/checks.js";
import { readNotebook } from "../audit/notebook.js";
import { formatReport } from "../audit/report.js";

/** The key may be given as a file (PEM or base64) or inline as the base64 the curator prints. */
export function readKeyArg(arg: string): KeyObject {
  const looksInline = /^[A-Za-z0-9+/]{40,}={0,2}$/.test(arg.trim());
  if (!looksInline && !existsSync(arg)) throw new BadInputError(`curator key ${arg}: no such file, and not a base64 public key`);
  let text = arg;
  if (!looksInline) {
    try {
      text = readFileSync(arg, "utf8");
    } catch {
      throw new BadInputError(`curator key ${arg} cannot be read`);
    }
  }
  return loadPublicKey(text);
}

export function parseCapArg(cap: string | undefined): Rational | undefined {
  if (cap === undefined) return undefined;
  let r: Rational;
  try {
    r = Rational.parse(cap);
  } catch {
    throw new BadInputError(`--cap ${JSON.stringify(cap)} is not an exact number such as "1" or "0.5"`);
  }
  if (r.sign() <= 0) throw new BadInputError("--cap must be positive");
  return r;
}

export function runAudit(
  file: string,
  opts: { key: string; cap?: string; json?: boolean; analyst?: string; dataset?: string },
  out: (s: string) => void,
): AuditReport {
  const key = readKeyArg(opts.key);
  const cap = parseCapArg(opts.cap);
  const nb = readNotebook(file);
  const report = auditNotebook(nb, key, {
    ...(cap === undefined ? {} : { cap }),
    ...(opts.analyst === undefined ? {} : { analyst: opts.analyst }),
    ...(opts.dataset === undefined ? {} : { dataset: opts.dataset }),
  });
  out(opts.json === true ? `${JSON.stringify({ notebook: file, ...report }, null, 2)}\n` : formatReport(file, report));
  return report;
}
