/**
 * A whole class at once: every hand-in audited as `hush audit` audits one notebook, held to its
 * roster row (analyst, dataset, cap), and compared with the others for copies: the same signed
 * receipt (the same receipt hash, so the same signature) in two students' notebooks.
 *
 * A copy is told apart from its source only by the roster: the receipt names its analyst, and the
 * student whose roster analyst that is made it. That student gets a note (the receipt was found
 * elsewhere; whether it was shared is for the TA), the others a finding. Without a roster, or when
 * no roster row owns the receipt, every notebook holding it gets a finding worded the same way.
 */
import type { KeyObject } from "node:crypto";
import type { Rational } from "../../runtime/core/index.js";
import { isHushError } from "../../runtime/errors.js";
import { receiptHash, verifyReceipt } from "../../runtime/protocol/receipts.js";
import { shown } from "./chain.js";
import { type AuditReport, auditNotebook } from "./checks.js";
import type { Finding } from "./findings.js";
import { type HandIn, studentOf } from "./hand-ins.js";
import { type Notebook, findReleases, readNotebook } from "./notebook.js";
import type { RosterEntry } from "./roster.js";

export type ClassVerdict = "PASS" | "FAIL" | "UNREADABLE" | "MISSING";

export interface ClassRow {
  /** The roster student, or the notebook's name when there is no roster or it matches no row. */
  student: string;
  onRoster: boolean;
  notebook: string | null;
  /** The report of the notebook's own audit; null when there is no notebook or it cannot be read. */
  report: AuditReport | null;
  /** The cap the student is held to in epsilon (roster, else --cap), exact; null: the signed cap alone. */
  reviewCap: string | null;
  verdict: ClassVerdict;
  /** The audit's findings and notes, with the class's own (copies, roster) added. */
  findings: Finding[];
  notes: Finding[];
  /** Why the notebook could not be read (verdict UNREADABLE). */
  error: string | null;
}

export interface ClassAudit {
  rows: ClassRow[];
  strict: boolean;
  roster: boolean;
  /** 0 every row passes, 1 some row has findings or no notebook, 2 some notebook cannot be read. */
  exitCode: 0 | 1 | 2;
}

export interface ClassOptions {
  strict?: boolean;
  /** The epsilon cap for notebooks whose roster row gives none (or with no roster). */
  cap?: Rational;
}

/** Reads one notebook; unreadable input is a row of the table, not the end of the audit. */
export function loadHandIn(h: HandIn): { nb: Notebook | null; error: string | null } {
  try {
    return { nb: readNotebook(h.file), error: null };
  } catch (e: unknown) {
    if (isHushError(e) && e.kind === "bad-input") return { nb: null, error: e.message };
    throw e;
  }
}

interface Held {
  row: ClassRow;
  owner: RosterEntry | null;
  cells: Map<string, { cell: number; seq: number; analyst: string }>;
}

export function auditClass(
  handIns: readonly (HandIn & { nb: Notebook | null; error: string | null })[],
  roster: readonly RosterEntry[] | null,
  key: KeyObject,
  opts: ClassOptions = {},
): ClassAudit {
  const strict = opts.strict === true;
  const held: Held[] = [];
  const handedIn = new Set<RosterEntry>();
  for (const h of handIns) {
    const owner = roster === null ? null : studentOf(h.file, roster);
    if (owner !== null) handedIn.add(owner);
    const cap = owner?.cap ?? opts.cap;
    const row: ClassRow = {
      student: owner?.student ?? h.label,
      onRoster: owner !== null,
      notebook: h.file,
      report: null,
      reviewCap: cap === undefined ? null : shown(cap),
      verdict: "UNREADABLE",
      findings: [],
      notes: [],
      error: h.error,
    };
    const cells = new Map<string, { cell: number; seq: number; analyst: string }>();
    if (h.nb !== null) {
      const report = auditNotebook(h.nb, key, {
        strict,
        ...(cap === undefined ? {} : { cap }),
        ...(owner === null ? {} : { analyst: owner.analyst }),
        ...(owner?.dataset == null ? {} : { dataset: owner.dataset }),
      });
      row.report = report;
      row.findings.push(...report.findings);
      row.notes.push(...report.notes);
      if (roster !== null && owner === null) {
        row.findings.push({
          cell: null,
          kind: "roster",
          message: `no roster student matches this notebook's name (${JSON.stringify(h.label)}): name it after the student (STUDENT.ipynb, STUDENT/…, or STUDENT_….ipynb)`,
        });
      }
      // Only receipts that verify can show a copy: a forged one is already a finding, and a
      // copied signature is the same bytes either way.
      for (const rel of findReleases(h.nb).releases) {
        const r = rel.meta.receipt;
        if (!verifyReceipt(r, key).ok) continue;
        const hash = receiptHash(r);
        if (!cells.has(hash)) cells.set(hash, { cell: rel.cell, seq: r.seq, analyst: r.analyst });
      }
    }
    held.push({ row, owner, cells });
  }

  // ---- the same receipt in two students' notebooks ----------------------------------------
  const byHash = new Map<string, Held[]>();
  for (const h of held) for (const hash of h.cells.keys()) byHash.set(hash, [...(byHash.get(hash) ?? []), h]);
  for (const [hash, holders] of byHash) {
    const students = new Set(holders.map((h) => h.row.student));
    if (students.size < 2) continue; // one student's own notebooks (a draft and a final) may share receipts
    for (const h of holders) {
      const mine = h.cells.get(hash)!;
      const others = holders.filter((o) => o.row.student !== h.row.student).map((o) => `${o.row.student} (${o.row.notebook ?? ""})`);
      const author = roster === null ? undefined : roster.find((e) => e.analyst === mine.analyst);
      const authored = author !== undefined && h.owner === author;
      const f: Finding = {
        cell: mine.cell,
        kind: "copied",
        message: authored
          ? `cell ${mine.cell}: this student's own receipt seq ${mine.seq} (analyst "${mine.analyst}") also appears in the notebook of ${others.join(", ")}, which holds a copy of it`
          : author !== undefined
            ? `cell ${mine.cell}: receipt seq ${mine.seq} belongs to analyst "${mine.analyst}", the roster's ${author.student}; the same signed receipt is in the notebook of ${others.join(", ")}: this notebook holds a copy of another student's release`
            : roster === null
              ? `cell ${mine.cell}: receipt seq ${mine.seq} (analyst "${mine.analyst}") also appears in ${others.join(", ")}: two hand-ins hold one signed release, so one holds a copy of the other unless both are the same student's (a roster tells whose analyst signed it)`
              : `cell ${mine.cell}: receipt seq ${mine.seq} (analyst "${mine.analyst}", on no roster line) also appears in the notebook of ${others.join(", ")}: one signed release is in two students' notebooks`,
      };
      // The author did nothing to their own notebook: a note for the TA, unless --strict.
      if (authored && !strict) h.row.notes.push(f);
      else h.row.findings.push(f);
    }
  }

  const rows = held.map((h) => h.row);
  for (const e of roster ?? []) {
    if (handedIn.has(e)) continue;
    rows.push({
      student: e.student,
      onRoster: true,
      notebook: null,
      report: null,
      reviewCap: e.cap !== null ? shown(e.cap) : opts.cap !== undefined ? shown(opts.cap) : null,
      verdict: "MISSING",
      findings: [{ cell: null, kind: "roster", message: `no notebook found for roster student ${JSON.stringify(e.student)} (line ${e.line})` }],
      notes: [],
      error: null,
    });
  }
  for (const row of rows) {
    const byCell = (a: Finding, b: Finding): number => (a.cell ?? Infinity) - (b.cell ?? Infinity);
    row.findings.sort(byCell);
    row.notes.sort(byCell);
    if (row.verdict !== "MISSING" && row.report !== null) row.verdict = row.findings.length === 0 ? "PASS" : "FAIL";
  }
  const exitCode = rows.some((r) => r.verdict === "UNREADABLE") ? 2 : rows.some((r) => r.verdict !== "PASS") ? 1 : 0;
  return { rows, strict, roster: roster !== null, exitCode };
}
