/**
 * `hush audit NOTEBOOK --key PUBKEY [--cap EPS] [--analyst NAME] [--dataset NAME] [--strict] [--json]`,
 * and for a class `hush audit PATH... --key PUBKEY [--roster CSV] [--cap EPS] [--strict] [--json | --csv]`
 * (PATH a notebook or a folder of them): exit 0 clean, 1 findings, 2 unreadable input.
 */
import { existsSync, readFileSync, statSync } from "node:fs";
import type { KeyObject } from "node:crypto";
import { Rational } from "../../runtime/core/index.js";
import { BadInputError } from "../../runtime/errors.js";
import { loadPublicKey } from "../../runtime/protocol/receipts.js";
import { type AuditReport, auditNotebook } from "../audit/checks.js";
import { readNotebook } from "../audit/notebook.js";
import { auditClass, loadHandIn } from "../audit/class-audit.js";
import { formatClassCsv, formatClassJson, formatClassTable } from "../audit/class-report.js";
import { findHandIns } from "../audit/hand-ins.js";
import { formatReport } from "../audit/report.js";
import { readRoster } from "../audit/roster.js";

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

export interface AuditArgs {
  key: string;
  cap?: string;
  json?: boolean;
  csv?: boolean;
  analyst?: string;
  dataset?: string;
  strict?: boolean;
  roster?: string;
}

/** One notebook file and no roster: the detailed report. Anything else: the class table. */
export function isClassAudit(paths: readonly string[], opts: AuditArgs): boolean {
  if (paths.length !== 1 || opts.roster !== undefined || opts.csv === true) return true;
  try {
    return statSync(paths[0]).isDirectory();
  } catch {
    return false; // the single-notebook path reports the missing file
  }
}

/** Audits the notebooks and prints; returns the exit status (0 clean, 1 findings, 2 unreadable input). */
export function runAuditCommand(paths: readonly string[], opts: AuditArgs, out: (s: string) => void): 0 | 1 | 2 {
  if (!isClassAudit(paths, opts)) return runAudit(paths[0], opts, out).ok ? 0 : 1;
  if (opts.analyst !== undefined || opts.dataset !== undefined) {
    throw new BadInputError("--analyst and --dataset hold one notebook to one student; for a class give a --roster");
  }
  if (opts.json === true && opts.csv === true) throw new BadInputError("--json and --csv: choose one");
  const key = readKeyArg(opts.key);
  const cap = parseCapArg(opts.cap);
  const roster = opts.roster === undefined ? null : readRoster(opts.roster);
  const handIns = findHandIns(paths).map((h) => ({ ...h, ...loadHandIn(h) }));
  const audit = auditClass(handIns, roster, key, { strict: opts.strict === true, ...(cap === undefined ? {} : { cap }) });
  out(opts.csv === true ? formatClassCsv(audit) : opts.json === true ? formatClassJson(audit) : formatClassTable(audit));
  return audit.exitCode;
}

export function runAudit(file: string, opts: AuditArgs, out: (s: string) => void): AuditReport {
  const key = readKeyArg(opts.key);
  const cap = parseCapArg(opts.cap);
  const nb = readNotebook(file);
  const report = auditNotebook(nb, key, {
    strict: opts.strict === true,
    ...(cap === undefined ? {} : { cap }),
    ...(opts.analyst === undefined ? {} : { analyst: opts.analyst }),
    ...(opts.dataset === undefined ? {} : { dataset: opts.dataset }),
  });
  out(opts.json === true ? `${JSON.stringify({ notebook: file, ...report }, null, 2)}\n` : formatReport(file, report));
  return report;
}
