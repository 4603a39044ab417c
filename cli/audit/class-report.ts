/**
 * The class audit for people (one table, then each student's findings), for grade books (CSV,
 * one row per student) and for scripts (JSON). Amounts are exact: decimals when they have a finite
 * one, else fractions ("1/3"), as the receipts state them.
 */
import { exact, shown } from "./chain.js";
import type { ClassAudit, ClassRow } from "./class-audit.js";

/** A receipt amount, exact, as a reader writes it ("7/20" as 0.35); a forged non-number is kept as it stands (a finding says why). */
function amount(x: string | null | undefined): string {
  if (x === null || x === undefined) return "";
  const r = exact(x);
  return r === null ? x.slice(0, 40) : shown(r);
}

const sym = (unit: string | null): string => (unit === "rho" ? "ρ" : "ε");

/** Names from file names and notebooks are the students' own text: no control or format characters reach the TA's terminal. */
function clean(s: string): string {
  return s.replace(/[\p{Cc}\p{Cf}\u2028\u2029]/gu, "?");
}

export interface ClassCells {
  student: string;
  notebook: string;
  analyst: string;
  unit: string;
  spend: string;
  /** zCDP: the spend as epsilon at the receipts' delta. */
  spendEpsilon: string;
  cap: string;
  capUnit: string;
  releases: string;
  supersededReleases: string;
  supersededSpend: string;
  verdict: string;
  findings: string;
  notes: string;
}

/** One row's fields as text, exact amounts, empty where there is nothing to state. */
export function rowCells(row: ClassRow): ClassCells {
  const r = row.report;
  const cap = row.reviewCap ?? (r?.cap == null ? null : amount(r.cap));
  return {
    student: row.student,
    notebook: row.notebook ?? "",
    analyst: r?.analyst ?? "",
    unit: r?.unit ?? "",
    spend: amount(r?.total),
    spendEpsilon: r?.unit === "rho" ? (r.totalEpsilon ?? "") : amount(r?.total),
    cap: cap ?? "",
    capUnit: cap === null ? "" : row.reviewCap !== null ? "epsilon" : (r?.unit ?? ""),
    releases: r === null ? "" : String(r.receipts),
    supersededReleases: r === null ? "" : String(r.superseded.releases),
    supersededSpend: r === null ? "" : (r.superseded.spend ?? "unknown"),
    verdict: row.verdict,
    findings: String(row.findings.length),
    notes: String(row.notes.length),
  };
}

export function formatClassTable(audit: ClassAudit): string {
  const head = ["student", "spend", "cap", "releases", "superseded", "verdict", "findings"];
  const body = audit.rows.map((row) => {
    const c = rowCells(row);
    const spend = c.spend === "" ? "-" : `${sym(c.unit)} ${c.spend}${c.unit === "rho" && c.spendEpsilon !== "" ? ` (ε ${c.spendEpsilon})` : ""}`;
    const cap = c.cap === "" ? "-" : `${c.capUnit === "rho" ? "ρ" : "ε"} ${c.cap}`;
    const sup = row.report === null ? "-" : c.supersededReleases === "0" ? "0" : `${c.supersededReleases} (${sym(c.unit)} ${c.supersededSpend})`;
    return [clean(c.student), spend, cap, c.releases === "" ? "-" : c.releases, sup, c.verdict, c.findings].map((x) => x.slice(0, 60));
  });
  const widths = head.map((h, i) => Math.max(h.length, ...body.map((b) => [...b[i]].length)));
  const line = (cols: string[]): string => cols.map((x, i) => x + " ".repeat(widths[i] - [...x].length)).join("  ").trimEnd();
  const out = [line(head), line(widths.map((w) => "-".repeat(w))), ...body.map(line)];
  const detail: string[] = [];
  for (const row of audit.rows) {
    if (row.findings.length === 0 && row.notes.length === 0 && row.error === null) continue;
    detail.push(`${clean(row.student)}${row.notebook === null ? "" : ` (${clean(row.notebook)})`}:`);
    if (row.error !== null) detail.push(`  - [unreadable] ${clean(row.error)}`);
    for (const f of row.findings) detail.push(`  - [${f.kind}] ${clean(f.message)}`);
    for (const f of row.notes) detail.push(`  - note [${f.kind}] ${clean(f.message)}`);
  }
  if (detail.length > 0) out.push("", ...detail);
  const count = (v: string): number => audit.rows.filter((r) => r.verdict === v).length;
  out.push(
    "",
    `class verdict: ${audit.exitCode === 0 ? "PASS" : "FAIL"} (${count("PASS")} pass, ${count("FAIL")} fail, ${count("MISSING")} missing, ${count("UNREADABLE")} unreadable${audit.strict ? "; strict" : ""})`,
  );
  return `${out.join("\n")}\n`;
}

/**
 * RFC 4180 quoting; a field a spreadsheet would run as a formula (= + - @, tab, carriage return
 * first, "-2+3" included) gets a leading apostrophe, since notebook names come from students.
 */
function csvField(s: string): string {
  const safe = /^[=+\-@\t\r]/.test(s) ? `'${s}` : s; // no amount this table writes is negative
  return /[",\n\r]/.test(safe) ? `"${safe.replace(/"/g, '""')}"` : safe;
}

export const CSV_COLUMNS: (keyof ClassCells)[] = [
  "student",
  "notebook",
  "analyst",
  "unit",
  "spend",
  "spendEpsilon",
  "cap",
  "capUnit",
  "releases",
  "supersededReleases",
  "supersededSpend",
  "verdict",
  "findings",
  "notes",
];
const CSV_NAMES: Record<keyof ClassCells, string> = {
  student: "student",
  notebook: "notebook",
  analyst: "analyst",
  unit: "unit",
  spend: "spend",
  spendEpsilon: "spend_epsilon",
  cap: "cap",
  capUnit: "cap_unit",
  releases: "releases",
  supersededReleases: "superseded_releases",
  supersededSpend: "superseded_spend",
  verdict: "verdict",
  findings: "findings",
  notes: "notes",
};

export function formatClassCsv(audit: ClassAudit): string {
  const lines = [CSV_COLUMNS.map((c) => CSV_NAMES[c]).join(",")];
  for (const row of audit.rows) {
    const c = rowCells(row);
    lines.push(CSV_COLUMNS.map((k) => csvField(c[k])).join(","));
  }
  return `${lines.join("\r\n")}\r\n`;
}

export function formatClassJson(audit: ClassAudit): string {
  const students = audit.rows.map((row) => ({
    student: row.student,
    onRoster: row.onRoster,
    notebook: row.notebook,
    verdict: row.verdict,
    reviewCap: row.reviewCap,
    error: row.error,
    findings: row.findings,
    notes: row.notes,
    report: row.report,
  }));
  return `${JSON.stringify({ ok: audit.exitCode === 0, strict: audit.strict, roster: audit.roster, students }, null, 2)}\n`;
}
