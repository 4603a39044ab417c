/**
 * Mime bundles of the cell API objects, from a HushSession wired to the stand-in curator.
 */
import { describe, expect, test } from "vitest";
import { compile } from "vega-lite";
import { OUTPUT_METADATA_KEY } from "../../runtime/protocol/messages.js";
import { formatWithError } from "../../runtime/protocol/format.js";
import { esc } from "../../kernel/display/html.js";
import { VEGALITE_MIME } from "../../kernel/display/chart.js";
import { HushSession, type MimeBundle } from "../../kernel/hush-session.js";
import type { Answer } from "../../runtime/api/answer.js";
import { DISTRICTS, FakeCurator, fakeSession } from "../api/fake-curator.js";

/** Tags to spaces and entities decoded, as the notebook audit reads an HTML view. */
function plainOf(html: string): string {
  return html
    .replace(/<[^>]*>/g, " ")
    .replace(/&lt;/g, "<")
    .replace(/&gt;/g, ">")
    .replace(/&amp;/g, "&")
    .replace(/\s+/g, " ");
}

/** Every signed number must stand on its own in every text view, formatted by the shared formatter. */
function expectShown(b: MimeBundle, a: Answer): void {
  for (const [, , , v, lo, hi] of a.receipt.result) {
    if (v === null) continue;
    const shown = formatWithError(v, lo, hi).replace(/[.*+?^${}()|[\]\\]/g, "\\$&");
    const re = new RegExp(`(?<![\\d.])${shown}(?![\\d])`);
    expect(b.data["text/plain"] as string).toMatch(re);
    expect(plainOf(b.data["text/html"] as string)).toMatch(re);
  }
}

describe("release bundles", () => {
  test("a scalar: one line, HTML with value, interval, method, cost and budget bar; receipt in metadata", async () => {
    const { session, hush } = await fakeSession();
    const t = await hush.open("clinic");
    const a = await t.mean("wait_minutes", { epsilon: 0.1 });
    const b = (await session.render(a))!;
    expect(b.data["text/plain"]).toBe("mean wait_minutes = 100 ± 5 (95%) · cost ε=0.1 · session 0.1 · total 0.1 / 1");
    expect(b.data["text/plain"]).toMatch(/^\S.* = \S+ ± \S+ \(\d+%\) · cost ε=[\d.]+ · session [\d.]+ · total [\d.]+ \/ [\d.]+$/);
    const html = b.data["text/html"] as string;
    expect(html).toContain("100 ± 5");
    expect(html).toContain("[95, 105]");
    expect(html).toContain("invented interval (fake curator)");
    expect(html).toContain("noise-only interval");
    expect(html).toContain("cost ε=0.1 · session 0.1 · total 0.1 / 1");
    expect(html).toContain("ε 0.1 of 1 used (this session 0.1)");
    expect(html).not.toContain("<script");
    expect(b.metadata).toEqual({ [OUTPUT_METADATA_KEY]: { receipt: a.receipt, replay: false, dataset: "clinic" } });
    expect(b.data[VEGALITE_MIME]).toBeUndefined();
    expectShown(b, a);
  });

  test("grouped: the HTML table has every group key; a Vega-Lite chart with error bars and a kernel-made SVG", async () => {
    const { session, hush } = await fakeSession();
    const t = await hush.open("clinic");
    const a = await t.by("district").mean("wait_minutes", { epsilon: 0.1 });
    const b = (await session.render(a))!;
    const html = b.data["text/html"] as string;
    for (const d of DISTRICTS) expect(html).toContain(`>${d}</td>`);
    expectShown(b, a);

    const spec = b.data[VEGALITE_MIME] as Record<string, unknown>;
    expect(JSON.parse(JSON.stringify(spec))).toEqual(spec); // plain JSON, nothing lost
    expect(spec.$schema).toBe("https://vega.github.io/schema/vega-lite/v5.json");
    expect("rows" in spec).toBe(false); // the audit reads a top-level `rows` in JSON bundles as released rows
    const layers = spec.layer as { mark: { type: string }; encoding: Record<string, { field?: string }> }[];
    expect(layers.map((l) => l.mark.type)).toEqual(["bar", "rule"]);
    expect(layers[1].encoding.y.field).toBe("low");
    expect(layers[1].encoding.y2.field).toBe("high");
    const values = (spec.data as { values: { label: string; value: number; low: number; high: number }[] }).values;
    expect(values.map((v) => [v.label, v.value, v.low, v.high])).toEqual([
      ["Northgate", 100, 95, 105],
      ["Riverside", 110, 105, 115],
      ["Eastfield", 120, 115, 125],
    ]);
    expect(() => compile(spec as never)).not.toThrow();

    const svg = b.data["image/svg+xml"] as string;
    expect(svg.startsWith("<svg")).toBe(true);
    expect(svg.trimEnd().endsWith("</svg>")).toBe(true);
    expect(svg).toContain("mark-rule"); // the error bars are drawn
    expect(svg).toContain("Riverside");
    expect(html).toContain('src="data:image/svg+xml;base64,');
  });

  test("histogram and crosstab get charts; both keys of a crosstab are in the table", async () => {
    const { session, hush } = await fakeSession();
    const t = await hush.open("clinic");
    const h = await t.histogram("age", { bins: 4, epsilon: 0.1 });
    const hb = (await session.render(h))!;
    expect((hb.data["image/svg+xml"] as string).startsWith("<svg")).toBe(true);
    for (const k of ["[0, 25)", "[25, 50)", "[50, 75)", "[75, 100]"]) expect(hb.data["text/html"]).toContain(`>${esc(k)}</td>`);
    expectShown(hb, h);

    const x = await t.crosstab("sex", "district", { epsilon: 0.1 });
    const xb = (await session.render(x))!;
    const html = xb.data["text/html"] as string;
    for (const k of ["female", "male", ...DISTRICTS]) expect(html).toContain(`>${k}</td>`);
    const spec = xb.data[VEGALITE_MIME] as { layer: { encoding: Record<string, unknown> }[] };
    expect(spec.layer[0].encoding.xOffset).toEqual({ field: "series", type: "nominal", sort: null });
    expect(spec.layer[1].encoding.xOffset).toBeDefined(); // error bars sit on their own bars
    expectShown(xb, x);
  });

  test("describe: a table of statistics, no chart (mixed scales)", async () => {
    const { session, hush } = await fakeSession();
    const t = await hush.open("clinic");
    const d = await t.describe({ epsilon: 0.3 });
    const b = (await session.render(d))!;
    expect(b.data[VEGALITE_MIME]).toBeUndefined();
    expect(b.data["text/html"]).toContain(">mean age</td>");
    expect(b.data["text/html"]).toContain(">count sex · female</td>");
    expectShown(b, d);
  });

  test("a replay shows the no-new-cost badge", async () => {
    const { session, hush } = await fakeSession();
    const t = await hush.open("clinic");
    await t.count({ epsilon: 0.1 });
    const again = await t.count({ epsilon: 0.1 });
    const b = (await session.render(again))!;
    expect(b.data["text/html"]).toContain("replayed — no new cost");
    expect(b.data["text/plain"]).toContain("replayed, no new cost");
    expect((b.metadata[OUTPUT_METADATA_KEY] as { replay: boolean }).replay).toBe(true);
  });

  test("quantiles without intervals show the estimate alone", async () => {
    const { session, hush } = await fakeSession();
    const t = await hush.open("clinic");
    const q = await t.quantiles("age", [0.25, 0.75], { epsilon: 0.1 });
    const b = (await session.render(q))!;
    expect(b.data["text/plain"]).toContain("p25 age  30.5");
    expect(b.data["text/html"]).toContain("<td");
    expectShown(b, q);
  });
});

describe("other bundles", () => {
  test("handle, preview, budget, ledger and hush itself render as text and HTML", async () => {
    const { session, hush } = await fakeSession();
    const t = await hush.open("clinic");
    await t.count({ epsilon: 0.25 });
    const views = [t, await t.preview.sum("age", { epsilon: 0.1 }), await hush.budget(), await hush.ledger(), hush];
    const expected = [/sealed dataset/, /would cost ε=0\.1/, /ε 0\.25 of 1 used · 0\.75 remaining · 1 release · this session 0\.25/, /clinic #1 count/, /hush\.open/];
    for (const [i, v] of views.entries()) {
      const b = (await session.render(v))!;
      expect(b.data["text/plain"]).toMatch(expected[i]);
      expect(typeof b.data["text/html"]).toBe("string");
      expect(b.data["text/html"]).toMatch(/^<div class="hush-/);
      expect(b.metadata).toEqual({});
    }
    expect((await session.render(t))?.data["text/html"]).toContain("sealed — aggregates only");
  });

  test("values hush does not know render as null (the kernel's default applies)", async () => {
    const { session } = await fakeSession();
    for (const v of [1, "x", null, undefined, { rows: [] }, new Map()]) expect(await session.render(v)).toBeNull();
  });

  test("afterCell: the running privacy loss once per cell that released, null otherwise", async () => {
    const { session, hush } = await fakeSession();
    expect(await session.afterCell()).toBeNull();
    const t = await hush.open("clinic");
    expect(await session.afterCell()).toBeNull(); // opening spends nothing
    await t.count({ epsilon: 0.1 });
    await t.sum("age", { epsilon: 0.2 });
    await t.count({ epsilon: 0.1 });
    const b = (await session.afterCell())!;
    expect(b.data["text/plain"]).toBe("privacy loss · clinic: this session ε 0.3 · ada's total on clinic ε 0.3 of 1 (2 new, 1 replayed)");
    expect(b.data["text/html"]).toContain("ε 0.3 of 1 used (this session 0.3)");
    expect(await session.afterCell()).toBeNull();
  });

  test("HTML escaping", () => {
    expect(esc(`<b a="1">&'`)).toBe("&lt;b a=&quot;1&quot;&gt;&amp;&#39;");
  });
});

describe("embedded default", () => {
  test("with nothing configured: demo data, a local curator, and a notice as the first output", async () => {
    const shown: MimeBundle[] = [];
    const fake = new FakeCurator("rowan");
    const started: string[] = [];
    const connects: unknown[] = [];
    let stopped = 0;
    const session = HushSession.create({ display: (b) => shown.push(b) }, { HUSH_DEMO_DIR: "/tmp/somewhere" }, {
      ensureDemoData: async (o) => {
        started.push(`demo:${o.dir}`);
        return { policyFile: "/tmp/somewhere/policy.yaml", analyst: "rowan", token: "demo-token" };
      },
      startEmbedded: async (o) => {
        started.push(`curator:${o.policyFile}`);
        return { address: "ipc:///tmp/x/curator.sock", publicKeyB64: "k", pid: 4242, stop: async () => void (stopped += 1) };
      },
      connect: async (o) => {
        connects.push(o);
        return fake;
      },
    });
    expect(started).toEqual([]); // lazy
    await session.api.open("clinic");
    await session.api.open("clinic");
    expect(started).toEqual(["demo:/tmp/somewhere", "curator:/tmp/somewhere/policy.yaml"]);
    expect(connects).toEqual([{ address: "ipc:///tmp/x/curator.sock", analyst: "rowan", token: "demo-token" }]);
    expect(shown).toHaveLength(1);
    const text = shown[0].data["text/plain"] as string;
    expect(text).toMatch(/^hush: no curator configured — started a local curator on the demo policy \/tmp\/somewhere\/policy\.yaml/);
    expect(text).toContain("(local embedded mode: the data lives on this machine, in a separate process;");
    expect(shown[0].data["text/html"]).toContain("local embedded mode");
    await session.close();
    expect(stopped).toBe(1);
    expect(fake.closed).toBe(true);
  });

  test("a failed start is reported and retried on the next use", async () => {
    let attempts = 0;
    const session = HushSession.create({ display: () => {} }, {}, {
      ensureDemoData: async () => {
        attempts += 1;
        throw new Error("disk full");
      },
    });
    await expect(session.api.open("visits")).rejects.toThrow("disk full");
    await expect(session.api.open("visits")).rejects.toThrow("disk full");
    expect(attempts).toBe(2);
    await session.close();
  });

  test("typeDeclarations declares the global", () => {
    const session = HushSession.create({ display: () => {} }, {});
    expect(session.typeDeclarations()).toContain("declare const hush: HushApi.Hush;");
  });
});
