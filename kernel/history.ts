/**
 * The session's input history for history_request (messaging spec "History"): tail, range and
 * search over the cells run with store_history. Only the current session is kept; it is numbered 1
 * and also answers to session 0 and negative offsets pointing at it.
 */
export interface HistoryEntry {
  line: number;
  input: string;
  /** text/plain of the cell's result, if it had one. */
  output: string | null;
}

export type HistoryRow = [number, number, string] | [number, number, [string, string | null]];

export interface HistoryQuery {
  hist_access_type?: string;
  output?: boolean;
  session?: number;
  start?: number;
  stop?: number | null;
  n?: number | null;
  pattern?: string;
  unique?: boolean;
}

export const SESSION_NUMBER = 1;

export class History {
  private readonly entries: HistoryEntry[] = [];

  add(entry: HistoryEntry): void {
    this.entries.push(entry);
  }

  query(q: HistoryQuery): HistoryRow[] {
    const rows = this.select(q);
    return rows.map((e) =>
      q.output ? [SESSION_NUMBER, e.line, [e.input, e.output]] : [SESSION_NUMBER, e.line, e.input],
    );
  }

  private select(q: HistoryQuery): HistoryEntry[] {
    const n = typeof q.n === "number" && q.n >= 0 ? q.n : null;
    switch (q.hist_access_type) {
      case "tail":
        return n === null ? [...this.entries] : n === 0 ? [] : this.entries.slice(-n);
      case "range": {
        const s = q.session ?? 0;
        if (s > 0 && s !== SESSION_NUMBER) return [];
        const start = q.start ?? 0;
        const stop = typeof q.stop === "number" ? q.stop : Infinity;
        return this.entries.filter((e) => e.line >= start && e.line < stop);
      }
      case "search": {
        const re = globToRegExp(q.pattern ?? "*");
        let hits = this.entries.filter((e) => re.test(e.input));
        if (q.unique) {
          // Keep the latest occurrence of each input, in order of that occurrence.
          const last = new Map<string, HistoryEntry>();
          for (const e of hits) {
            last.delete(e.input);
            last.set(e.input, e);
          }
          hits = [...last.values()];
        }
        return n === null || n === 0 ? hits : hits.slice(-n);
      }
      default:
        return [];
    }
  }
}

/** Glob as in IPython's history search (sqlite GLOB): `*` any run, `?` one character. */
export function globToRegExp(glob: string): RegExp {
  let src = "";
  for (const ch of glob) {
    if (ch === "*") src += "[\\s\\S]*";
    else if (ch === "?") src += "[\\s\\S]";
    else src += ch.replace(/[.+^${}()|[\]\\]/g, "\\$&");
  }
  return new RegExp(`^${src}$`);
}
