/**
 * Reading figures ("24.5 ± 1.25", "12 [10, 15]") out of text as a person reads it. The kernel
 * writes every figure with runtime/protocol/format.ts in ASCII digits, an ASCII hyphen-minus and
 * plain spaces; a reader sees the same number in many other spellings (a Unicode minus, digits of
 * another numeral system, a superscript, a digit hidden by a zero-width character). So the text
 * is first folded to the kernel's spelling (figureText), and the characters that can make a person
 * read another number than the folded text says are reported (oddCharacters).
 */
import { RIGHT_TO_LEFT } from "../../runtime/protocol/words.js";

// A number as runtime/protocol/format.ts writes it ("12", "-0.5", "1,234.5", "1.25e-9": integer
// parts in groups of three after the first, docs/methods.md §23), and a figure with an error bar
// in either of its two forms: "v ± w" or "v [lo, hi]". An ungrouped "1234" is still read as one
// number (then it is not the kernel's spelling, and no signed figure matches it); a broken group
// ("1,5 ± 1", "12,34 ± 1") leaves digits and a comma before the figure, which then does not stand
// on its own.
const NUM = String.raw`-?(?:\d{1,3}(?:,\d{3})+|\d+)(?:\.\d+)?(?:e[+-]?\d+)?`;
const BAR = String.raw`${NUM} (?:± ${NUM}|\[${NUM}, ${NUM}\])`;
const ANY_FIGURE = new RegExp(BAR, "g");
const WHOLE_FIGURE = new RegExp(`^${BAR}$`);

/** Is `s` exactly one figure with an error bar? */
export function isFigure(s: string): boolean {
  return WHOLE_FIGURE.test(s);
}

// Every character drawn as a minus or a dash: Unicode's dash punctuation (U+2010..2015, U+2E3A,
// U+FE58, ...), the minus sign U+2212 and its look-alikes that are not in Pd (modifier minus
// U+02D7, heavy minus U+2796, super/subscript minus U+207B/U+208B, small and full-width
// hyphen-minus U+FE63/U+FF0D, hyphen bullet U+2043).
const DASH = /[\p{Pd}\u2212\u02d7\u2796\u207b\u208b\ufe63\uff0d\u2043]/gu;
const DASH_ONE = /[\p{Pd}\u2212\u02d7\u2796\u207b\u208b\ufe63\uff0d\u2043]/u;

/** The value of a decimal digit of any numeral system (\p{Nd}). Unicode encodes each system's
 * digits 0..9 as one contiguous run in ascending order (Unicode Standard, §4.6 "Numeric Value";
 * Unicode stability policy for Numeric_Type=Decimal), so the value is the distance from the run's
 * start, modulo 10 where runs of ten follow each other (the mathematical digits U+1D7CE..1D7FF). */
function digitValue(ch: string): string {
  const cp = ch.codePointAt(0)!;
  let start = cp;
  while (start > cp - 60 && /\p{Nd}/u.test(String.fromCodePoint(start - 1))) start--;
  return String((cp - start) % 10);
}

/**
 * Text in the kernel's spelling: compatibility forms folded (NFKC: full-width digits, ligatures,
 * no-break and thin spaces), every dash and minus made "-", every decimal digit made ASCII,
 * invisible format characters dropped (a person does not see them, so "1\u200b5" reads "15"),
 * and every other space a plain space. Runs of spaces stay (in text/plain two spaces set columns
 * apart, one can be a thousands separator), and so do line breaks and tabs (table cells).
 */
export function figureText(text: string): string {
  return text
    .normalize("NFKC")
    .replace(/\p{Cf}/gu, "")
    .replace(DASH, "-")
    .replace(/\p{Nd}/gu, (d) => (d >= "0" && d <= "9" ? d : digitValue(d)))
    .replace(/\r\n?|[\u2028\u2029\v\f]/g, "\n")
    .replace(/[^\S\n\t]/g, " ");
}

/** One figure found in folded text, and whether it stands on its own. */
export interface FoundFigure {
  text: string;
  index: number;
  /** False when a person would read the digits around it as part of the number ("1O5 ± 1", "1,5 ± 1", "5 ± 1·5"). */
  alone: boolean;
}

const DIGITISH = /[\p{L}\p{N}]/u;

// A figure stands on its own when a separator a person cannot read as part of a number is on
// either side: the start or end of the text, a line break or tab, an opening or closing bracket,
// or a space that is not a thousands separator between digits ("1 005 ± 1" reads as 1005).
// Letters count as digits here, since "l", "O" and "З" can be drawn in place of 1, 0 and 3.
function aloneBefore(t: string, i: number): boolean {
  if (i === 0) return true;
  const c = t[i - 1];
  if (c === "\n" || c === "\t" || c === "(") return true;
  if (c === " ") return i < 2 || !/[\p{N}.,]/u.test(t[i - 2]);
  return false;
}

function aloneAfter(t: string, j: number): boolean {
  if (j >= t.length) return true;
  const c = t[j];
  if (c === "\n" || c === "\t") return true;
  const next = t[j + 1];
  if (c === " ") return next === undefined || !/\p{N}/u.test(next);
  // Closing punctuation ends a figure, unless a digit or letter follows it ("5 ± 1.5", "5 ± 1,5").
  if (/[).,;:]/.test(c)) return next === undefined || !DIGITISH.test(next);
  return false;
}

/**
 * Runs of number characters at least this long are longer than any number the kernel writes (30
 * digits at most in each part, with grouping commas: docs/methods.md §23). The figure pattern is
 * not run over them: a regular expression tries a match at every position of such a run and, for
 * each, scans to its end, so a notebook holding a run of a million digits would take the audit
 * hours (a class audit would never finish). They are read as numbers that run into their
 * neighbours instead (below), which is what they would be to a reader beside an error bar.
 */
export const LONGEST_NUMBER_RUN = 100;
const NUMBER_RUN = new RegExp(String.raw`[\d,.e+\-]{${LONGEST_NUMBER_RUN},}`, "g");

/** Every figure with an error bar in folded `text`, left to right, without overlaps. */
export function figuresIn(text: string): FoundFigure[] {
  // Long runs masked with the same number of characters that no figure holds, so positions stay.
  const long = [...text.matchAll(NUMBER_RUN)];
  const masked = long.length === 0 ? text : text.replace(NUMBER_RUN, (run) => "#".repeat(run.length));
  const found: FoundFigure[] = [...masked.matchAll(ANY_FIGURE)].map((m) => {
    const index = m.index ?? 0;
    return { text: m[0], index, alone: aloneBefore(text, index) && aloneAfter(text, index + m[0].length) };
  });
  // A long run beside an error bar ("1111…1 ± 5", "5 ± 1111…1", "5 [1111…1, 9]") is a figure that
  // does not stand on its own: reported as such, shortened.
  for (const m of long) {
    const at = m.index ?? 0;
    const end = at + m[0].length;
    const before = text.slice(Math.max(0, at - 3), at);
    const after = text.slice(end, end + 3);
    if (/(± |\[|, )$/.test(before) || /^( ± | \[|, |\])/.test(after)) {
      found.push({ text: `${m[0].slice(0, 12)}…${m[0].slice(-12)}`, index: at, alone: false });
    }
  }
  return long.length === 0 ? found : found.sort((a, b) => a.index - b.index);
}

/** Where `figure` stands on its own in folded `text` at or after `from`, or -1. */
export function figureAt(text: string, figure: string, from: number): number {
  for (let at = text.indexOf(figure, from); at >= 0; at = text.indexOf(figure, at + 1)) {
    if (aloneBefore(text, at) && aloneAfter(text, at + figure.length)) return at;
  }
  return -1;
}

/** A character a person may read as part of a number the folded text does not hold, with where it stands. */
export interface OddCharacter {
  codePoint: string;
  what: string;
  context: string;
}

function hex(ch: string): string {
  return `U+${ch.codePointAt(0)!.toString(16).toUpperCase().padStart(4, "0")}`;
}

const FIGURE_CHARS = /[0-9+\-.,±[\]]/;

/** Why a character can change how a figure reads, or null when it cannot. */
function oddness(ch: string, before: string, after: string): string | null {
  // A frontend draws what follows a lone carriage return over the start of its line ("5 ± 1\r9" shows "9 ± 1").
  if (ch === "\r") return after === "\n" ? null : "a carriage return (what follows it is drawn over the start of the line)";
  if (ch === "\t" || ch === "\n") return null;
  if (/\p{Cc}/u.test(ch)) return "a control character (terminal escapes can hide or recolour text)";
  if (/\p{Cf}/u.test(ch)) return "an invisible format character (zero-width, soft hyphen or direction control)";
  if (/[\p{Co}\p{Cn}\p{Cs}]/u.test(ch)) return "a private-use or unassigned character (a font can draw it as anything)";
  if (/\p{M}/u.test(ch)) return /\p{L}/u.test(before) ? null : "a combining mark on a character that is not a letter";
  if (ch.charCodeAt(0) < 0x80) return null;
  const compat = ch.normalize("NFKC");
  if (compat !== ch && FIGURE_CHARS.test(compat)) return `a character drawn as "${compat}" in another form (superscript, fraction, full-width or similar)`;
  if (/\p{Nd}/u.test(ch)) return "a digit of another numeral system";
  if (DASH_ONE.test(ch) && (/\p{N}/u.test(before) || /[\p{N}.]/u.test(after))) return "a dash or minus sign next to a digit";
  if (/\p{N}/u.test(before) && /\p{N}/u.test(after)) return "a mark between two digits (it can be read as a decimal point or separator)";
  if (/\p{No}/u.test(ch)) return "a number sign of another form";
  return null;
}

/** Enough to say what was found; a view full of them is not described character by character. */
const MOST_ODD = 100;

/**
 * The characters in `text` (decoded, not folded) that can make a person read a figure the folded
 * text does not hold. The kernel writes none of them around a figure; group keys are the data's
 * own words, so the caller removes them first.
 */
export function oddCharacters(text: string): OddCharacter[] {
  const chars = [...text];
  const odd: OddCharacter[] = [];
  let base = "";
  chars.forEach((ch, i) => {
    if (odd.length >= MOST_ODD) return;
    const isMark = /\p{M}/u.test(ch);
    const why = oddness(ch, isMark ? base : (chars[i - 1] ?? ""), chars[i + 1] ?? "");
    if (!isMark) base = ch;
    if (why === null) return;
    const context = quoted(chars.slice(Math.max(0, i - 8), i + 9).join(""));
    odd.push({ codePoint: hex(ch), what: why, context });
  });
  return odd;
}

// Letters of the right-to-left scripts (protocol/words.ts, shared with the kernel).
const RTL = RIGHT_TO_LEFT;

/**
 * Paragraphs (split at `breaks`) that hold a figure and a right-to-left letter. The Unicode
 * bidirectional algorithm (UAX #9, rules W2, N1, I1, L2) draws "א 10 ± 5" in a left-to-right line
 * as "5 ± 10 א": the value and the error bar change places, while the text still reads "10 ± 5".
 */
export function rightToLeftBesideFigure(text: string, breaks: RegExp): OddCharacter[] {
  const odd: OddCharacter[] = [];
  for (const para of text.split(breaks)) {
    const letter = RTL.exec(para);
    if (letter === null || figuresIn(figureText(para)).length === 0) continue;
    odd.push({ codePoint: hex(letter[0]), what: "a right-to-left letter beside a figure (the figure can be drawn in another order)", context: quoted(para, 40) });
  }
  return odd;
}

/**
 * Notebook text made safe to quote in a finding: every control, format, private-use or combining
 * character written as <U+XXXX> (a terminal escape in a quoted snippet would act on the reviewer's
 * terminal), cut to `most` characters.
 */
export function quoted(s: string, most = 60): string {
  const chars = [...s];
  const cut = chars.length > most ? [...chars.slice(0, most), "…"] : chars;
  return cut
    .join("")
    .replace(/[\t\n\r]+/g, " ")
    .replace(/[\p{C}\p{M}]/gu, (c) => `<${hex(c)}>`);
}

/** One sentence for a list of odd characters: what was found and where, the first few of them. */
export function oddCharactersText(odd: OddCharacter[]): string {
  const shown = odd.slice(0, 3).map((o) => `${o.codePoint}, ${o.what}, in "${o.context.trim()}"`);
  const more = odd.length > 3 ? `; and ${odd.length >= MOST_ODD ? "many" : odd.length - 3} more` : "";
  return `${shown.join("; ")}${more}`;
}
