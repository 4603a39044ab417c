/**
 * HTML views of the cell API objects. Every released number is written with the shared formatter
 * (runtime/protocol/format.ts via runtime/api/text.ts), so the notebook audit finds in the HTML the
 * same text it finds in text/plain.
 */
import type { Answer } from "../../runtime/api/answer.js";
import type { BudgetReport, LedgerView } from "../../runtime/api/budget.js";
import { type CostQuote, type ExpectedError, listedParts, restText } from "../../runtime/api/quote.js";
import type { QueryRecord } from "../../runtime/api/session-spend.js";
import { columnText, type SealedTable } from "../../runtime/api/table.js";
import { costStatement, epsilonAtDelta, foldedNotes, methodLine, percent, planText, plural, q, rowLabel, shownParts, spendAmounts, spendText, uniformStat, unitSymbol } from "../../runtime/api/text.js";
import { formatHalfWidth } from "../../runtime/protocol/format.js";
import type { ReleaseRow, SpendSummary } from "../../runtime/protocol/messages.js";
import { Rational } from "../../runtime/core/index.js";
import { type BoxKind, MUTED, badge, box, budgetBar, capParts, esc, leftText, notesList, table, textBar } from "./html.js";
import { modelBody } from "./regression.js";

const NOISE_ONLY =
  "The error bars cover the privacy noise only: not clamping to the declared range, grid rounding, rows dropped by the per-unit bound, or sampling error.";

/** One figure with the browser test's hooks: `hush-value` on the value, `hush-errorbar` on its bar. */
function figureHtml(row: ReleaseRow): string {
  const f = shownParts(row);
  return `<span class="hush-value">${esc(f.value)}</span>${f.bar === null ? "" : ` <span class="hush-errorbar">${esc(f.bar)}</span>`}`;
}

/**
 * Folded away: the exact statement of the method, the noise-only caution (only when there is an
 * interval), the notes, and the receipt. A disclosure element, so it needs no script.
 */
function detailsHtml(a: Answer): string {
  const r = a.release;
  const notes = foldedNotes(r.notes);
  const hasBar = r.rows.some((x) => x.low !== null && x.high !== null);
  const summary = `details${notes.length ? ` and ${plural(notes.length, "note")}` : ""}`;
  const receipt = `receipt #${r.receipt.seq} for ${r.receipt.analyst} · signed by key ${r.receipt.keyId} · plan ${r.digest.slice(0, 12)}`;
  return (
    `<details class="hush-notes" style="margin-top:2px;font-size:12px"><summary style="${MUTED}">${esc(summary)}</summary>` +
    `<div style="${MUTED}">method: ${esc(r.intervalMethod)}</div>` +
    (hasBar ? `<div style="${MUTED}">${esc(NOISE_ONLY)}</div>` : "") +
    notesList(notes) +
    `<div style="font-size:11px;${MUTED}">${esc(receipt)}</div>` +
    `</details>`
  );
}

/**
 * A release: what was asked, the figure(s) rounded to what the error bar supports, one plain line
 * on the error bars, the chart, the cost, and the rest folded away. The running privacy loss is
 * shown once under the cell (lossHtml), not here.
 */
export function answerHtml(a: Answer, chartImg: string | null): string {
  const r = a.release;
  const head = `<div><b>${esc(a.what)}</b> <span style="${MUTED}">on ${esc(r.dataset)}</span>${r.replay ? badge("replayed, no new cost", "#2e7d32") : ""}</div>`;
  let body: string;
  const model = modelBody(a); // regression and correlation (regression.ts)
  if (model !== null) {
    body = model;
  } else if (a.isScalar) {
    body = `<div style="font-size:18px;margin:2px 0">${figureHtml(r.rows[0])}</div>`;
  } else {
    const uniform = uniformStat(r.rows);
    const keyed = uniform && r.groupColumns.length > 0;
    const first = r.rows[0];
    const statHead = uniform && first ? (first.column === null ? first.stat : `${first.stat} ${first.column}`) : "estimate";
    const headCells = [...(keyed ? r.groupColumns.map(esc) : ["statistic"]), `${esc(statHead)} (${esc(percent(r.confidence))})`];
    const rows = r.rows.map((row) => [...(keyed ? row.key.map((k) => esc(k ?? "(missing)")) : [esc(rowLabel(row, true))]), figureHtml(row)]);
    body = table(headCells, rows, new Set([headCells.length - 1]));
  }
  const cost = costStatement(r);
  return box(
    head +
      body +
      `<div style="font-size:12px;${MUTED}">${esc(methodLine(r))}</div>` +
      (chartImg === null ? "" : `<div class="hush-chart" style="margin:6px 0">${chartImg}</div>`) +
      `<div style="margin-top:2px">${esc(cost)}</div>` +
      detailsHtml(a),
    "release",
  );
}

/** The cap with this kernel session's part marked. */
function sessionBar(spend: SpendSummary, sessionSpent: string): string {
  const a = spendAmounts(spend);
  return budgetBar({ total: a.total, recent: sessionSpent, cap: a.cap, symbol: a.symbol, recentLabel: "this session", beforeLabel: "earlier sessions" });
}

export function quoteHtml(c: CostQuote): string {
  const p = c.preview;
  const status = p.replay
    ? badge("already released — running it again costs nothing", "#2e7d32")
    : p.affordable
      ? badge("fits under the cap", "#2e7d32")
      : badge("does not fit under the cap", "#c62828");
  const errs = c.expectedErrors;
  const row = (e: ExpectedError) => [esc(e.stat), esc(e.column ?? ""), `± ${esc(formatHalfWidth(e.exact))}`];
  const { shown, rest } = listedParts(errs);
  const rows = shown.map(row);
  const head = ["statistic", "column", `expected error (${esc(percent(p.confidence))})`];
  // The parts past the first few, folded: a describe, correlation or regression has tens of them.
  const more =
    rest === null
      ? ""
      : `<details class="hush-parts" style="margin-top:2px"><summary style="${MUTED}">${esc(restText(rest))}</summary>${table(head, errs.slice(shown.length).map(row), new Set([2]))}</details>`;
  const s = spendAmounts(p.spend);
  return box(
    `<div><b>preview</b> ${esc(c.what)}${status}</div>` +
      `<div>would cost <b>${esc(unitSymbol(p.unit))}=${esc(q(p.cost))}</b> · nothing spent yet</div>` +
      // The estimate's own expected error (mean, variance, std) for an assumed count, before its parts.
      c.estimateErrors
        .map(
          (r) =>
            `<div>expected error of the ${esc(r.stat)} itself <b>± ${esc(q(r.typical))}</b> (${esc(percent(p.confidence))}) for ${esc(r.typicalAt)}; up to ± ${esc(q(r.widest))} elsewhere in the range (${r.assumedFrom === "analyst" ? "your assumed count" : "the steward's public size hint"})</div>`,
        )
        .join("") +
      (rows.length ? table(head, rows, new Set([2])) + more : "") +
      budgetBar({ total: s.total, recent: "0", cap: s.cap, symbol: s.symbol, recentLabel: "this session", beforeLabel: "spent" }) +
      (p.notes.length ? `<details class="hush-notes" style="margin-top:2px;font-size:12px"><summary style="${MUTED}">${esc(plural(p.notes.length, "note"))}</summary>${notesList(p.notes)}</details>` : ""),
    "preview",
  );
}

export function tableHtml(t: SealedTable): string {
  const u = t.unit;
  const unit = u.column === null ? "each row" : `${u.column} (at most ${u.maxRows} rows per unit)`;
  const cols = table(
    ["column", "type and declared values"],
    t.columns.map((c) => [esc(c.name), esc(columnText(c))]),
  );
  const s = t.spend;
  const query = t.filter || t.groups.length ? `<div>query so far: ${esc(planText({ measure: { kind: "count" }, where: t.filter, groupBy: t.groups }).replace(/^count ?/, ""))}</div>` : "";
  return box(
    `<div><b>${esc(t.name)}</b>${badge("sealed — aggregates only", "#6a1b9a")}</div>` +
      `<div style="${MUTED}">${esc(t.description)}</div>` +
      `<div>privacy unit: ${esc(unit)}</div>` +
      query +
      cols +
      `<div>spend of ${esc(s.analyst)}: ${esc(spendText(s))}</div>` +
      sessionBar(s, t.sessionSpent),
    "dataset",
  );
}

function queryRows(list: readonly QueryRecord[]): string[][] {
  return list.map((r) => [
    `#${r.seq}`,
    esc(r.what),
    r.replay ? "replayed — no new cost" : `${esc(unitSymbol(r.unit))} ${esc(q(r.cost))}`,
    `${esc(q(r.total))} / ${esc(q(r.cap))}`,
  ]);
}

export function budgetHtml(b: BudgetReport): string {
  if (b.datasets.length === 0) return box(`<div><b>privacy budget of ${esc(b.analyst)}</b>: no dataset opened yet (<code>hush.open(name)</code>)</div>`, "budget");
  const parts = b.datasets.map(
    (d) =>
      `<div style="margin-top:6px"><b>${esc(d.dataset)}</b> <span style="${MUTED}">${esc(d.spend.mode === "zcdp" ? "zCDP accounting" : "pure ε accounting")}</span></div>` +
      sessionBar(d.spend, d.sessionSpent) +
      `<div>${esc(spendText(d.spend))}</div>` +
      (d.queries.length ? table(["receipt", "query (this session)", "cost", "total after"], queryRows(d.queries), new Set([2, 3])) : `<div style="${MUTED}">no queries in this session</div>`),
  );
  return box(`<div><b>privacy budget of ${esc(b.analyst)}</b></div>${parts.join("")}`, "budget");
}

export function ledgerHtml(l: LedgerView): string {
  if (l.entries.length === 0) return box("<div><b>ledger</b>: no releases yet</div>", "ledger");
  const rows = l.entries.map((e) => [
    esc(e.dataset),
    `#${e.seq}`,
    esc(planText(e.plan)),
    `${esc(unitSymbol(e.receipt.unit))} ${esc(q(e.cost))}`,
    `${esc(q(e.total))} / ${esc(q(e.receipt.cap))}`,
    esc(e.issuedAt),
  ]);
  const more = l.earlierNote();
  return box(
    `<div><b>ledger</b> (${l.entries.length} releases, signed receipts)</div>` +
      table(["dataset", "receipt", "query", "cost", "total after", "issued"], rows, new Set([3, 4])) +
      (more === null ? "" : `<div style="${MUTED}">${esc(more)}</div>`),
    "ledger",
  );
}

/** The running privacy loss under a cell: one entry per dataset touched in the cell. */
export interface LossLine {
  dataset: string;
  sessionSpent: string;
  /** What this cell's new releases on the dataset cost, exact, in the accounting unit. */
  cellSpent: string;
  spend: SpendSummary;
  released: number;
  replayed: number;
}

/** Datasets of one population share one account, so they share one line: amounts added, names listed. */
interface Account {
  datasets: string[];
  cellSpent: Rational;
  spend: SpendSummary;
  released: number;
  replayed: number;
}

function accounts(lines: readonly LossLine[]): Account[] {
  const out = new Map<string, Account>();
  for (const l of lines) {
    const k = `${l.spend.analyst}\u0000${l.spend.population}`;
    const a = out.get(k);
    let cell = Rational.ZERO;
    try {
      cell = Rational.parse(l.cellSpent);
    } catch {
      // an unreadable amount counts as nothing spent in this cell; the total still shows
    }
    if (a === undefined) {
      out.set(k, { datasets: [l.dataset], cellSpent: cell, spend: l.spend, released: l.released, replayed: l.replayed });
      continue;
    }
    a.datasets.push(l.dataset);
    a.cellSpent = a.cellSpent.add(cell);
    a.spend = l.spend; // the later summary is the newer one
    a.released += l.released;
    a.replayed += l.replayed;
  }
  return [...out.values()];
}

function accountName(a: Account): string {
  const names = a.datasets.join(", ");
  return a.datasets.length === 1 && a.datasets[0] === a.spend.population ? names : `${names} (population ${a.spend.population})`;
}

function replayNote(a: Account): string {
  return a.replayed ? ` (${plural(a.replayed, "answer")} replayed, no new cost)` : "";
}

/** The zCDP line's ε equivalent: "(ε 1.2 of 2 at δ=1e-6)". */
function epsilonEquivalent(s: SpendSummary): string {
  return s.mode === "zcdp" && s.spentRho !== undefined && s.delta !== undefined ? ` (${epsilonAtDelta(s)})` : "";
}

/**
 * The one privacy-loss line under a cell that released something (text/plain): per account, the
 * analyst's total against the cap, this cell's part, what is left, and a bar.
 * "privacy loss on visits: ε 0.3 of 3 used · this cell 0.05 · left 2.7 [##+.....]".
 */
export function lossText(lines: readonly LossLine[]): string {
  return accounts(lines)
    .map((a) => {
      const s = spendAmounts(a.spend);
      const p = capParts(s.total, a.cellSpent.toString(), s.cap);
      return (
        `privacy loss on ${accountName(a)}: ${s.symbol} ${q(s.total)} of ${q(s.cap)} used${epsilonEquivalent(a.spend)}` +
        ` · this cell ${q(p.recent === "?" ? "0" : p.recent)}${replayNote(a)} · left ${leftText(p.left)} ${textBar(s.total, a.cellSpent.toString(), s.cap)}`
      );
    })
    .join("\n");
}

/** The same in HTML: one `hush-loss` element per cell, with a labelled bar per account. */
export function lossHtml(lines: readonly LossLine[]): string {
  return box(
    accounts(lines)
      .map((a) => {
        const s = spendAmounts(a.spend);
        return (
          `<div><b>privacy loss</b> on ${esc(accountName(a))}${esc(epsilonEquivalent(a.spend))}${esc(replayNote(a))} <span style="font-size:11px;${MUTED}">(the cap is per analyst and population and persists across sessions)</span></div>` +
          budgetBar({ total: s.total, recent: a.cellSpent.toString(), cap: s.cap, symbol: s.symbol, recentLabel: "this cell", beforeLabel: "earlier" })
        );
      })
      .join(""),
    "loss",
  );
}

export function preHtml(text: string, kind: BoxKind): string {
  return box(`<pre style="margin:0;white-space:pre-wrap">${esc(text)}</pre>`, kind);
}
