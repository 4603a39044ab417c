/**
 * HTML views of the cell API objects. Every released number is written with the shared formatter
 * (runtime/protocol/format.ts via runtime/api/text.ts), so the notebook audit finds in the HTML the
 * same text it finds in text/plain.
 */
import type { Answer } from "../../runtime/api/answer.js";
import type { BudgetReport, LedgerView } from "../../runtime/api/budget.js";
import type { CostQuote } from "../../runtime/api/quote.js";
import type { QueryRecord } from "../../runtime/api/session-spend.js";
import { columnText, type SealedTable } from "../../runtime/api/table.js";
import { costText, percent, planText, q, rowLabel, shownValue, spendAmounts, spendText, uniformStat, unitSymbol } from "../../runtime/api/text.js";
import { formatDecimal } from "../../runtime/protocol/format.js";
import type { SpendSummary } from "../../runtime/protocol/messages.js";
import { MUTED, badge, box, budgetBar, esc, notesList, table } from "./html.js";
import { modelBody } from "./regression.js";

const NOISE_ONLY =
  "noise-only interval: it covers the privacy noise, not clamping to the declared range, grid rounding, rows dropped by the per-unit bound, or sampling error.";

function interval(low: string | null, high: string | null): string {
  return low === null || high === null ? "—" : `[${esc(formatDecimal(low))}, ${esc(formatDecimal(high))}]`;
}


export function answerHtml(a: Answer, chartImg: string | null): string {
  const r = a.release;
  const head = `<div><b>${esc(a.what)}</b> <span style="${MUTED}">on ${esc(r.dataset)}</span>${r.replay ? badge("replayed — no new cost", "#2e7d32") : ""}</div>`;
  let body: string;
  const model = modelBody(a); // regression and correlation (regression.ts)
  if (model !== null) {
    body = model;
  } else if (a.isScalar) {
    const row = r.rows[0];
    body =
      `<div style="font-size:18px;margin:2px 0">${esc(shownValue(row))}</div>` +
      `<div style="${MUTED}">${esc(percent(r.confidence))} interval ${interval(row.low, row.high)} · ${esc(r.intervalMethod)}</div>`;
  } else {
    const uniform = uniformStat(r.rows);
    const keyed = uniform && r.groupColumns.length > 0;
    const headCells = [...(keyed ? r.groupColumns.map(esc) : ["statistic"]), `estimate (${esc(percent(r.confidence))})`, "interval"];
    const rows = r.rows.map((row) => [
      ...(keyed ? row.key.map((k) => esc(k ?? "(missing)")) : [esc(rowLabel(row, true))]),
      esc(shownValue(row)),
      interval(row.low, row.high),
    ]);
    const n = headCells.length;
    body = table(headCells, rows, new Set([n - 2, n - 1])) + `<div style="${MUTED}">${esc(r.intervalMethod)}</div>`;
  }
  const cost = costText({ cost: r.cost, replay: r.replay, sessionSpent: a.sessionSpent, spend: r.spend });
  const bar = budgetBar({ ...spendAmounts(r.spend), sessionSpent: a.sessionSpent });
  const receipt = `<div style="font-size:11px;${MUTED}">receipt #${r.receipt.seq} for ${esc(r.receipt.analyst)} · signed by key ${esc(r.receipt.keyId)} · plan ${esc(r.digest.slice(0, 12))}</div>`;
  return box(
    head +
      body +
      (chartImg ?? "") +
      `<div style="margin-top:4px">${esc(cost)}</div>` +
      bar +
      `<div style="font-size:12px;${MUTED}">ⓘ ${esc(NOISE_ONLY)}</div>` +
      notesList(r.notes.filter((n) => !n.startsWith("Error bars are noise-only"))) +
      receipt,
    "release",
  );
}

export function quoteHtml(c: CostQuote): string {
  const p = c.preview;
  const status = p.replay
    ? badge("already released — running it again costs nothing", "#2e7d32")
    : p.affordable
      ? badge("fits under the cap", "#2e7d32")
      : badge("does not fit under the cap", "#c62828");
  const errs = c.expectedErrors;
  const rows = errs.map((e) => [esc(e.stat), esc(e.column ?? ""), `± ${esc(q(e.exact))}`]);
  const s = spendAmounts(p.spend);
  return box(
    `<div><b>preview</b> ${esc(c.what)}${status}</div>` +
      `<div>would cost <b>${esc(unitSymbol(p.unit))}=${esc(q(p.cost))}</b> · nothing spent yet</div>` +
      (rows.length ? table(["statistic", "column", `expected error (${esc(percent(p.confidence))})`], rows, new Set([2])) : "") +
      budgetBar({ ...s, sessionSpent: "0" }) +
      notesList(p.notes),
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
      budgetBar({ ...spendAmounts(s), sessionSpent: t.sessionSpent }),
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
      budgetBar({ ...spendAmounts(d.spend), sessionSpent: d.sessionSpent }) +
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
  return box(`<div><b>ledger</b> (${l.entries.length} releases, signed receipts)</div>` + table(["dataset", "receipt", "query", "cost", "total after", "issued"], rows, new Set([3, 4])), "ledger");
}

/** The running privacy loss under a cell: one line per dataset touched in the cell. */
export interface LossLine {
  dataset: string;
  sessionSpent: string;
  spend: SpendSummary;
  released: number;
  replayed: number;
}

export function lossText(lines: readonly LossLine[]): string {
  return lines
    .map((l) => {
      const s = spendAmounts(l.spend);
      const what = [l.released ? `${l.released} new` : "", l.replayed ? `${l.replayed} replayed` : ""].filter(Boolean).join(", ");
      const eps = s.unit === "rho" && l.spend.delta !== undefined ? `, ε ${q(l.spend.spentEpsilon)} of ${q(l.spend.capEpsilon)} at δ=${q(l.spend.delta)}` : "";
      // The total is the analyst's on the population: every dataset over the same people counts.
      return `privacy loss · ${l.dataset}: this session ${s.symbol} ${q(l.sessionSpent)} · ${l.spend.analyst}'s total on ${l.spend.population} ${s.symbol} ${q(s.total)} of ${q(s.cap)}${eps} (${what})`;
    })
    .join("\n");
}

export function lossHtml(lines: readonly LossLine[]): string {
  return box(
    lines
      .map((l) => {
        const s = spendAmounts(l.spend);
        return `<div><b>privacy loss</b> · ${esc(l.dataset)} <span style="${MUTED}">(total on ${esc(l.spend.population)}: the cap is per analyst and population, shared by every dataset over the same people, and persists across sessions)</span></div>${budgetBar({ ...s, sessionSpent: l.sessionSpent })}`;
      })
      .join(""),
    "loss",
  );
}

export function preHtml(text: string, kind: string): string {
  return box(`<pre style="margin:0;white-space:pre-wrap">${esc(text)}</pre>`, kind);
}
