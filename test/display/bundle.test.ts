/**
 * Mime bundles of the cell API objects, from a HushSession wired to the stand-in curator.
 */
import { inspect } from "node:util";
import { describe, expect, test } from "vitest";
import { compile } from "vega-lite";
import { OUTPUT_METADATA_KEY } from "../../runtime/protocol/messages.js";
import { formatWithError } from "../../runtime/protocol/format.js";
import { esc } from "../../kernel/display/html.js";
import { refusalBundle } from "../../kernel/display/refusal.js";
import { KERNEL_CLASSES, htmlText } from "../../cli/audit/html-text.js";
import { VEGALITE_MIME } from "../../kernel/display/chart.js";
import { HushSession, type MimeBundle } from "../../kernel/hush-session.js";
import type { Answer } from "../../runtime/api/answer.js";
import { LedgerView } from "../../runtime/api/budget.js";
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
  test("a scalar: the compact view in text/plain and HTML, with the browser test's hooks; receipt in metadata", async () => {
    const { session, hush } = await fakeSession();
    const t = await hush.open("clinic");
    const a = await t.mean("wait_minutes", { epsilon: 0.1 });
    const b = (await session.render(a))!;
    // Written by hand: the figure, the cost, one plain sentence, the number of notes.
    expect(b.data["text/plain"]).toBe(
      "mean wait_minutes = 100 ± 5 · cost ε=0.1\n  at least 95% of such answers fall within ±5 of the true mean (privacy noise only) · 1 note: .notes",
    );
    const html = b.data["text/html"] as string;
    expect(html.startsWith('<div class="hush-release" ')).toBe(true);
    expect(html.match(/class="hush-release"/g)).toHaveLength(1);
    expect(html).toContain('<span class="hush-value">100</span> <span class="hush-errorbar">± 5</span>');
    expect(html).toContain(">at least 95% of such answers fall within ±5 of the true mean (privacy noise only)</div>");
    expect(html).toContain('<div style="margin-top:2px">cost ε=0.1</div>');
    // Notes, the exact method and the receipt are folded away in a disclosure element, after the cost.
    expect(html).toMatch(/<details class="hush-notes"[^>]*><summary[^>]*>details and 1 note<\/summary>.*method: invented interval \(fake curator\).*<li>invented note<\/li>.*receipt #1 for ada.*<\/details><\/div>$/);
    expect(html.indexOf("cost ε=0.1")).toBeLessThan(html.indexOf("<details"));
    // No running total inside the release (the one privacy-loss line is under the cell), no glyph
    // Debian Chromium's default fonts lack.
    expect(html).not.toMatch(/session|total|hush-loss|ⓘ|<script/);
    expect(b.metadata).toEqual({ [OUTPUT_METADATA_KEY]: { receipt: a.receipt, replay: false, dataset: "clinic", plan: a.release.plan } });
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
    expect(b.data["text/html"]).toContain("replayed, no new cost");
    expect(b.data["text/html"]).not.toContain("cost ε=");
    expect(b.data["text/plain"]).toBe("count = 100 ± 5 · replayed, no new cost\n  at least 95% of such answers fall within ±5 of the true count (privacy noise only) · 1 note: .notes");
    expect((b.metadata[OUTPUT_METADATA_KEY] as { replay: boolean }).replay).toBe(true);
  });

  test("quantiles without intervals show the estimate alone", async () => {
    const { session, hush } = await fakeSession();
    const t = await hush.open("clinic");
    const q = await t.quantiles("age", [0.25, 0.75], { epsilon: 0.1 });
    const b = (await session.render(q))!;
    expect(b.data["text/plain"]).toBe(
      "quantiles p25, p75 of age (95%):\n  p25 age  30.5\n  p75 age  30.5\n  no interval on the value: the quantile's guarantee is on its rank (see the notes)\ncost ε=0.1 · 1 note: .notes",
    );
    const html = b.data["text/html"] as string;
    expect(html).toContain('<td style="text-align:right;padding:1px 10px 1px 0;white-space:nowrap"><span class="hush-value">30.5</span></td>');
    // No interval, so no noise-only notice and no error-bar hook.
    expect(html).not.toMatch(/hush-errorbar|noise only|noise-only/);
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

  test("a ledger page says how many earlier releases it left out and how to page back", async () => {
    const { session, hush } = await fakeSession();
    const t = await hush.open("clinic");
    await t.count({ epsilon: 0.25 });
    await t.count({ epsilon: 0.125 });
    const whole = await hush.ledger();
    expect(whole.earlier).toBe(0);
    expect(whole.earlierNote()).toBeNull();
    // As the curator sends it when the page is full: the latest releases and a count of the rest.
    const page = new LedgerView([...whole.entries], 1500, "clinic");
    const b = (await session.render(page))!;
    const note = `… and 1,500 earlier releases not shown (the curator sends the latest 1,000 of each population): hush.ledger("clinic", { before: 1 })`;
    expect(b.data["text/plain"]).toContain(note);
    expect(b.data["text/html"]).toContain(esc(note));
    await expect(hush.ledger("clinic", { before: 0 })).rejects.toThrow(/before must be a release number/);
    await expect(hush.ledger("clinic", { before: 1.5 })).rejects.toThrow(/before must be a release number/);
  });

  test("console.log and util.inspect show readable summaries, not internal fields", async () => {
    const { hush } = await fakeSession();
    const t = await hush.open("clinic");
    const a = await t.mean("wait_minutes", { epsilon: 0.1 });
    expect(inspect(a)).toBe("Answer <mean wait_minutes = 100 ± 5 (95%) · receipt #1 on clinic>");
    const g = await t.by("district").mean("wait_minutes", { epsilon: 0.1 });
    expect(inspect(g)).toBe("Answer <mean wait_minutes by district: 3 values (95%) · receipt #2 on clinic>");
    // Inside other values too (the kernel shows a bare expression with util.inspect).
    expect(inspect({ first: a }, { breakLength: Infinity })).toBe("{ first: Answer <mean wait_minutes = 100 ± 5 (95%) · receipt #1 on clinic> }");
    expect(inspect(t)).toMatch(/^SealedTable <clinic: sealed, aggregates only · privacy unit \S+ · columns [a-z_, ]+>$/);
    expect(inspect(t.where({ age: { ge: 65 } }).by("district"))).toMatch(/^SealedTable <clinic where age ≥ 65 by district: /);
    expect(inspect(t.preview)).toBe("CostPreview <prices asks on clinic; spends nothing>");
    const budget = await hush.budget();
    expect(inspect(budget)).toBe(budget.toString());
    const quote = await t.preview.sum("age", { epsilon: 0.1 });
    expect(inspect(quote)).toBe(quote.toString());
    expect(inspect(hush)).toBe(hush.toString());
    // No field of the release (receipt, signature, mechanisms) leaks into the summary.
    expect(inspect(a)).not.toMatch(/sig|digest|mechanisms|release/);
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
    expect(b.data["text/plain"]).toBe("privacy loss on clinic: ε 0.3 of 1 used · this cell 0.3 (1 answer replayed, no new cost) · left 0.7 [+++++++.................]");
    const html = b.data["text/html"] as string;
    expect(html.match(/class="hush-loss"/g)).toHaveLength(1);
    // The bar's three parts, labelled with their amounts.
    expect(html).toMatch(/<span>earlier 0<\/span>.*<span>this cell 0\.3<\/span>.*<span>left 0\.7<\/span>.*ε 0\.3 of 1 used/);
    expect(html).toContain("width:30.00%;background:#e8a33d");
    expect(await session.afterCell()).toBeNull();
    // The next cell: what it spent is "this cell", the rest "earlier".
    await t.sum("age", { epsilon: 0.05 });
    const next = (await session.afterCell())!;
    expect(next.data["text/plain"]).toBe("privacy loss on clinic: ε 0.35 of 1 used · this cell 0.05 · left 0.65 [#######+................]");
    expect(next.data["text/html"]).toMatch(/<span>earlier 0\.3<\/span>.*<span>this cell 0\.05<\/span>.*<span>left 0\.65<\/span>/);
  });

  test("every view's markup is in the audit's vocabulary: its classes, elements and styles draw no finding", async () => {
    const { session, hush } = await fakeSession();
    const t = await hush.open("clinic");
    const views: unknown[] = [
      t,
      await t.mean("wait_minutes", { epsilon: 0.1 }),
      await t.by("district").mean("wait_minutes", { epsilon: 0.1 }),
      await t.histogram("age", { bins: 4, epsilon: 0.1 }),
      await t.quantiles("age", [0.25, 0.75], { epsilon: 0.1 }),
      await t.preview.sum("age", { epsilon: 0.1 }),
      await hush.budget(),
      await hush.ledger(),
      hush,
    ];
    const bundles = [...(await Promise.all(views.map((v) => session.render(v)))), await session.afterCell()];
    bundles.push(refusalBundle({ name: "OverCapError", kind: "over-cap", message: "over the cap: this query costs ε 0.5\nNothing was spent.", where: "In [3], line 2" }));
    const seen = new Set<string>();
    for (const b of bundles) {
      const html = b!.data["text/html"] as string;
      for (const m of html.matchAll(/class="([^"]*)"/g)) for (const c of m[1].split(" ")) seen.add(c);
      const svg = b!.data["image/svg+xml"];
      const chart = typeof svg === "string" ? `data:image/svg+xml;base64,${Buffer.from(svg, "utf8").toString("base64")}` : null;
      expect(htmlText(html, chart).problems, html.slice(0, 80)).toEqual([]);
      // No glyph that Debian Chromium's default fonts lack (the old info sign).
      expect(html).not.toMatch(/[\u24b6-\u24ff]/);
    }
    expect([...seen].filter((c) => !KERNEL_CLASSES.has(c))).toEqual([]);
    for (const hook of ["hush-release", "hush-value", "hush-errorbar", "hush-loss", "hush-notes", "hush-refusal", "hush-chart"]) expect(seen.has(hook), hook).toBe(true);
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
