/**
 * The class roster a teaching assistant gives `hush audit --roster`: a four-column CSV file
 *
 *   student,analyst,dataset,cap
 *   kit,kit,visits-course,1
 *   ash,ash,visits-course,
 *
 * No CSV library is installed, and this file is the TA's own and small, so the reader is strict
 * rather than general: the header line must be exactly those four names; each row has exactly four
 * comma-separated fields, trimmed; quotes are refused (no field needs a comma or a quote); student
 * and analyst are required, dataset and cap may be empty (not checked); cap is an exact positive
 * epsilon ("1", "0.5", "1/2"); a student or analyst may appear only once. Anything else is a
 * BadInputError naming the line, so a mistyped roster never audits against the wrong student.
 */
import { readFileSync, statSync } from "node:fs";
import { Rational } from "../../runtime/core/index.js";
import { BadInputError } from "../../runtime/errors.js";

export interface RosterEntry {
  student: string;
  analyst: string;
  dataset: string | null;
  /** The epsilon cap the student is held to, or null for the steward's cap alone. */
  cap: Rational | null;
  line: number;
}

const MAX_BYTES = 1 << 20;
const MAX_ROWS = 5000;
const MAX_FIELD = 200;
export const ROSTER_HEADER = ["student", "analyst", "dataset", "cap"] as const;

export function readRoster(file: string): RosterEntry[] {
  let text: string;
  try {
    if (statSync(file).size > MAX_BYTES) throw new BadInputError(`roster ${file} is larger than ${MAX_BYTES} bytes`);
    text = readFileSync(file, "utf8");
  } catch (e: unknown) {
    if (e instanceof BadInputError) throw e;
    const code = e !== null && typeof e === "object" && "code" in e ? String((e as { code: unknown }).code) : "error";
    throw new BadInputError(`roster ${file} cannot be read (${code})`);
  }
  return parseRoster(text, file);
}

export function parseRoster(text: string, file: string): RosterEntry[] {
  const bad = (line: number, why: string): BadInputError => new BadInputError(`roster ${file} line ${line}: ${why}`);
  const lines = text.replace(/^\uFEFF/, "").split("\n");
  const entries: RosterEntry[] = [];
  const students = new Set<string>();
  const analysts = new Set<string>();
  let header = false;
  lines.forEach((raw, i) => {
    const n = i + 1;
    const line = raw.endsWith("\r") ? raw.slice(0, -1) : raw;
    if (line.trim() === "") return;
    if (line.includes('"')) throw bad(n, "quotes are not supported (the roster's fields never need them)");
    // Control characters, bidi overrides and invisible characters would make a name print as another.
    if (/[\p{Cc}\p{Cf}\u2028\u2029]/u.test(line)) throw bad(n, "holds a control or invisible character");
    const fields = line.split(",").map((f) => f.trim());
    if (fields.length !== 4) throw bad(n, `has ${fields.length} fields, not 4 (student,analyst,dataset,cap)`);
    if (!header) {
      if (fields.some((f, j) => f.toLowerCase() !== ROSTER_HEADER[j])) throw bad(n, `the first line must be the header "${ROSTER_HEADER.join(",")}"`);
      header = true;
      return;
    }
    if (entries.length >= MAX_ROWS) throw bad(n, `more than ${MAX_ROWS} students`);
    const [student, analyst, dataset, cap] = fields;
    if (fields.some((f) => f.length > MAX_FIELD)) throw bad(n, `a field is longer than ${MAX_FIELD} characters`);
    if (student === "" || analyst === "") throw bad(n, "student and analyst are required");
    if (students.has(student)) throw bad(n, `student ${JSON.stringify(student)} is listed twice`);
    if (analysts.has(analyst)) throw bad(n, `analyst ${JSON.stringify(analyst)} is listed twice (each student signs in as their own analyst)`);
    students.add(student);
    analysts.add(analyst);
    let capValue: Rational | null = null;
    if (cap !== "") {
      try {
        capValue = Rational.parse(cap);
      } catch {
        throw bad(n, `cap ${JSON.stringify(cap)} is not an exact number such as "1" or "0.5"`);
      }
      if (capValue.sign() <= 0) throw bad(n, "cap must be positive");
    }
    entries.push({ student, analyst, dataset: dataset === "" ? null : dataset, cap: capValue, line: n });
  });
  if (!header) throw new BadInputError(`roster ${file} is empty: it needs the header "${ROSTER_HEADER.join(",")}"`);
  return entries;
}
