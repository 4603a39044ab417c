/**
 * Charts of grouped releases and histograms: a Vega-Lite spec (bars with noise-only error bars)
 * that frontends with a Vega renderer draw themselves, and the same chart rendered to SVG here in
 * the kernel (Vega's headless renderer, no browser) for every other frontend.
 */
import * as vega from "vega";
import { compile, type TopLevelSpec } from "vega-lite";
import type { Answer } from "../../runtime/api/answer.js";
import { percent, shownValue } from "../../runtime/api/text.js";

export const VEGALITE_MIME = "application/vnd.vegalite.v5+json";

interface Point {
  label: string;
  series: string;
  value: number;
  low: number | null;
  high: number | null;
  shown: string;
}

/** Should this release get a chart? Grouped results of one statistic, and histograms. */
export function chartable(a: Answer): boolean {
  const r = a.release;
  if (r.groupColumns.length === 0 || r.plan.measure.kind === "describe") return false;
  const first = r.rows[0];
  if (!first) return false;
  return r.rows.every((x) => x.stat === first.stat && x.column === first.column) && r.rows.some((x) => x.value !== null);
}

function points(a: Answer): Point[] {
  const out: Point[] = [];
  for (const row of a.release.rows) {
    if (row.value === null) continue; // unavailable estimates are listed in the table, not drawn
    const [first, ...rest] = row.key.map((k) => k ?? "(missing)");
    out.push({
      label: first ?? "",
      series: rest.join(" · "),
      value: Number(row.value),
      low: row.low === null ? null : Number(row.low),
      high: row.high === null ? null : Number(row.high),
      shown: shownValue(row),
    });
  }
  return out;
}

/** The Vega-Lite (v5) spec: plain JSON, data inline. */
export function vegaLiteSpec(a: Answer): TopLevelSpec {
  const r = a.release;
  const row = r.rows[0];
  const yTitle = row.column === null ? row.stat : `${row.stat} ${row.column}`;
  const xTitle = r.groupColumns[0];
  const series = r.groupColumns.length > 1;
  const data = points(a);
  const outer = new Set(data.map((p) => p.label));
  const step = series ? 14 : Math.max(12, Math.min(60, Math.floor(480 / Math.max(1, outer.size))));
  // Tilt the axis labels when they would not fit side by side (about 7 px per character at 10 px).
  const room = series ? step * Math.max(1, data.length / Math.max(1, outer.size)) : step;
  const longest = Math.max(0, ...[...outer].map((l) => l.length));
  const x = { field: "label", type: "nominal" as const, sort: null, title: xTitle, axis: { labelAngle: longest * 7 > room ? -45 : 0 } };
  const offset = series ? { xOffset: { field: "series", type: "nominal" as const, sort: null } } : {};
  const colour = series ? { color: { field: "series", type: "nominal" as const, sort: null, title: r.groupColumns.slice(1).join(" · ") } } : {};
  const spec: TopLevelSpec = {
    $schema: "https://vega.github.io/schema/vega-lite/v5.json",
    title: { text: a.what, subtitle: `error bars: ${percent(r.confidence)} noise-only intervals` },
    width: { step },
    height: 220,
    data: { values: data.map((p) => ({ ...p })) },
    layer: [
      {
        mark: { type: "bar" },
        encoding: {
          x,
          y: { field: "value", type: "quantitative", title: yTitle },
          ...offset,
          ...colour,
          tooltip: [
            { field: "label", type: "nominal", title: xTitle },
            ...(series ? [{ field: "series", type: "nominal" as const, title: r.groupColumns.slice(1).join(" · ") }] : []),
            { field: "shown", type: "nominal", title: yTitle },
          ],
        },
      },
      {
        mark: { type: "rule", color: "black", strokeWidth: 1.5 },
        transform: [{ filter: "datum.low != null && datum.high != null" }],
        encoding: { x, ...offset, y: { field: "low", type: "quantitative" }, y2: { field: "high" } },
      },
    ],
  };
  return spec;
}

/** The chart as an SVG document, rendered headless. */
export async function renderSvg(spec: TopLevelSpec): Promise<string> {
  // Vega tags the inline data objects it ingests; work on a copy so the published spec stays plain JSON.
  const compiled = compile(structuredClone(spec)).spec;
  const view = new vega.View(vega.parse(compiled), { renderer: "none" });
  try {
    return await view.toSVG();
  } finally {
    view.finalize();
  }
}
