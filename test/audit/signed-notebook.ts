/**
 * A notebook assembled in the test from receipts signed by the curator's own signing code
 * (runtime/curator/receipts.ts) with a real Ed25519 key. It stands in for an executed notebook
 * where the kernel is not needed: the audit reads only JSON, receipts and the public key.
 * The figures are invented; their arithmetic (exact running totals) is what matters.
 */
import { Rational } from "../../runtime/core/index.js";
import type { CuratorKey } from "../../runtime/curator/keys.js";
import { signReceipt } from "../../runtime/curator/receipts.js";
import type { NbCell, Notebook } from "../../cli/audit/notebook.js";
import { formatDecimal, formatWithError } from "../../runtime/protocol/format.js";
import { OUTPUT_METADATA_KEY, type Receipt } from "../../runtime/protocol/messages.js";
import { GENESIS_PREV, receiptHash } from "../../runtime/protocol/receipts.js";
import { cellSourceDigest } from "../../runtime/protocol/cell-source.js";

/** The code of the cell that asks for release `seq` in an assembled notebook (its receipt signs its digest). */
export const releaseSource = (seq: number): string[] => [`// release ${seq}\n`, `await visits.count({ epsilon: 0.${seq} })`];
/** The `cell` field a receipt made by `releaseSource(seq)` carries. */
export const releaseCell = (seq: number): string => cellSourceDigest(releaseSource(seq).join(""));

type Row = Receipt["result"][number];

/**
 * A chain of receipts for one analyst and population (default "clinic-patients") with the given
 * costs and result rows; each part is on `who.dataset` unless it names another dataset of the population.
 */
export function signedChain(
  key: CuratorKey,
  who: { analyst: string; dataset: string; cap: string; population?: string },
  parts: { cost: string; rows: Row[]; dataset?: string; digest?: string }[],
): Receipt[] {
  let prev = GENESIS_PREV;
  let total = Rational.ZERO;
  return parts.map((p, i) => {
    total = total.add(Rational.parse(p.cost));
    const r = signReceipt(
      {
        analyst: who.analyst,
        dataset: p.dataset ?? who.dataset,
        population: who.population ?? "clinic-patients",
        seq: i + 1,
        digest: p.digest ?? String(i + 1).padStart(64, "0"),
        cell: releaseCell(i + 1),
        unit: "epsilon",
        cost: p.cost,
        total: total.toString(),
        cap: who.cap,
        result: p.rows,
        mechanisms: [{ target: "count", family: "discrete-laplace", scale: "20", sensitivity: "1", step: "1", cost: p.cost }],
        issuedAt: `2025-03-0${i + 1}T10:00:00.000Z`,
        prev,
      },
      key,
    );
    prev = receiptHash(r);
    return r;
  });
}

export function releaseOutput(r: Receipt, replay = false): NonNullable<NbCell["outputs"]>[number] {
  const lines = r.result.map(([k, stat, column, v, lo, hi]) => {
    const label = [...k, column === null ? stat : `${stat}(${column})`].join(" · ");
    return `${label}: ${formatWithError(v, lo, hi)}`;
  });
  // The kernel's cost wording (runtime/api/text.ts costStatement).
  const q = (x: string): string => formatDecimal(x, 6);
  lines.push(`${replay ? "replayed, no new cost" : `cost ε=${q(r.cost)}`} · total ${q(r.total)} / ${q(r.cap)}`);
  const data: Record<string, unknown> = { "text/plain": lines.join("\n") };
  // Grouped releases carry a Vega-Lite chart whose inline data are the signed rows, shaped as
  // kernel/display/chart.ts writes them (numbers as JS numbers, the shown text beside them).
  if (r.result.some((row) => row[0].length > 0)) {
    data["application/vnd.vegalite.v5+json"] = {
      $schema: "https://vega.github.io/schema/vega-lite/v5.json",
      data: {
        values: r.result.map(([k, , , v, lo, hi]) => ({
          label: k[0] ?? "",
          series: k.slice(1).join(" · "),
          value: Number(v),
          low: lo === null ? null : Number(lo),
          high: hi === null ? null : Number(hi),
          shown: formatWithError(v, lo, hi),
        })),
      },
      mark: "bar",
      encoding: { x: { field: "label", type: "nominal" }, y: { field: "value", type: "quantitative" } },
    };
  }
  return {
    output_type: "display_data",
    data,
    metadata: { [OUTPUT_METADATA_KEY]: { receipt: r, replay, dataset: r.dataset } },
  };
}

/**
 * Markdown, a plain code cell, one cell per receipt (its code `releaseSource(seq)`), and the second
 * question asked again from the same code at the end (answered from the ledger).
 */
export function assembleNotebook(receipts: Receipt[]): Notebook {
  const cells: NbCell[] = [
    { cell_type: "markdown", source: "# Course assignment\n", metadata: {} },
    { cell_type: "code", source: 'const v = await hush.open("visits-course")', execution_count: 1, outputs: [], metadata: {} },
  ];
  receipts.forEach((r, i) => {
    cells.push({ cell_type: "code", source: releaseSource(r.seq), execution_count: i + 2, outputs: [releaseOutput(r)], metadata: {} });
  });
  cells.push({
    cell_type: "code",
    source: releaseSource(receipts[1].seq),
    execution_count: receipts.length + 2,
    outputs: [releaseOutput(receipts[1], true)],
    metadata: {},
  });
  return { nbformat: 4, nbformat_minor: 5, metadata: { kernelspec: { name: "hush", display_name: "TypeScript (hush)", language: "typescript" } }, cells };
}

export const rowsOf = (stat: string, column: string | null, values: [string, string, string][], keys: string[][] = [[]]): Row[] =>
  values.map(([v, lo, hi], i) => [keys[i] ?? [], stat, column, v, lo, hi]);
