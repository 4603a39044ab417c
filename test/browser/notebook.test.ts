/// <reference lib="dom" />
/// <reference lib="dom.iterable" />
/**
 * Acceptance (issue 11, "checked in a real browser"): the demo notebook runs in the classic
 * notebook server (Debian `jupyter-notebook`, 6.x) on 127.0.0.1, a free port and a random token,
 * with the hush kernel installed into a temp JUPYTER_PATH, opened in headless Chromium (the system
 * /usr/bin/chromium driven by puppeteer-core; no browser is downloaded) with an empty profile.
 * The test clicks Cell → Run All as a user would, then adds one cell that asks past the cap, and
 * asserts on the rendered page. Screenshots go to .hush/browser/ for people to look at.
 *
 * The notebook is the one a user works in: `hush notebooks --to DIR` copies the tracked clean
 * template into a git-ignored folder (DEVELOPERS.md, "Demo layout"), and the server's root is the
 * clone, as when a user runs `jupyter notebook` there. Saving it must leave every tracked file
 * as it was, and the server must not list or serve the demo data, key or ledger.
 *
 * Every process the test starts (server, kernel, embedded curator, Chromium) carries a marker in
 * its environment; at the end the test looks for the marker in /proc and fails if any is left.
 */
import { spawn, spawnSync, type ChildProcess } from "node:child_process";
import { createHash, randomBytes } from "node:crypto";
import { existsSync, mkdirSync, mkdtempSync, readFileSync, readdirSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, relative, resolve } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import puppeteer, { type Browser, type Page } from "puppeteer-core";
import { freePorts } from "../../kernel/client/index.js";
import { installKernelspec } from "../../kernel/kernelspec.js";
import { findPython } from "../jupyter/tools.js";

const ROOT = resolve(import.meta.dirname, "../..");
const CLI = join(ROOT, "dist", "cli", "main.js");
const CHROMIUM = "/usr/bin/chromium";
const SHOTS = join(ROOT, ".hush", "browser");
const TEMPLATE = join(ROOT, "notebooks", "exploration.ipynb");
/** Cells the test adds after Run All: an accuracy-first ask with no bound (refused with its price), and one far past the demo cap of ε = 3. */
const UNBOUNDED = "await visits.count({ within: 25 })";
const OVER_CAP = "await visits.count({ epsilon: 5 })";
const ADDED = [UNBOUNDED, OVER_CAP];

const python = findPython(["notebook"], "browser test (the classic notebook server, Debian jupyter-notebook)");
const haveChromium = existsSync(CHROMIUM);
if (!haveChromium) console.warn(`SKIP: browser test needs ${CHROMIUM} (apt-get install -y chromium)`);
const haveDist = existsSync(CLI) && existsSync(join(ROOT, "dist", "kernel", "main.js"));
if (!haveDist) console.warn("SKIP: browser test needs the build (npx tsc -p tsconfig.json)");

/** What the page shows for one code cell, read from the notebook's own model and the DOM. */
interface CellFacts {
  index: number;
  source: string;
  prompt: number | string | null;
  /** Outputs carrying a hush receipt, and whether each was a replay. */
  releases: { replay: boolean }[];
  /** Output areas of an error (a refusal), their visible text. */
  errors: string[];
  /** Visible text of the whole output area. */
  text: string;
  count: Record<string, number>;
  /** Every `.hush-value` / `.hush-errorbar` is rendered with a size and non-empty text. */
  valuesVisible: boolean;
  errorbarsVisible: boolean;
  /** Charts: images or SVGs inside `.hush-chart` (or the old view's `img[alt^="chart:"]`), drawn with a size. */
  charts: { drawn: boolean; width: number; height: number }[];
}

interface GlyphFacts {
  /** Characters whose canvas rendering equals the .notdef rendering of an unassigned code point, or that draw no ink. */
  missing: { char: string; code: string; font: string }[];
  /** The method's own check: an unassigned code point is found missing, 'A' is not. */
  probe: { unassignedMissing: boolean; letterMissing: boolean };
  checked: number;
}

const MARK = `hush-browser-${randomBytes(6).toString("hex")}`;
const work = mkdtempSync(join(tmpdir(), "hush-browser-"));
/** The user's copy of the demo notebook, in a git-ignored folder of the clone (removed at the end). */
const workspace = join(ROOT, "workspace", `browser-${MARK.slice(-12)}`);
let server: ChildProcess | null = null;
let serverLog = "";
let browser: Browser | null = null;
let page: Page | null = null;
let baseUrl = "";
let token = "";
let cells: CellFacts[] = [];
let glyphs: GlyphFacts | null = null;
let newView = false;
let afterRestart = "";
let untrusted: { trusted: boolean; cells: CellFacts[] } | null = null;
let trackedBefore = "";
let statusBefore = "";

function gitStatus(): string {
  return spawnSync("git", ["status", "--porcelain", "--untracked-files=all"], { cwd: ROOT, encoding: "utf8" }).stdout;
}

function trackedDigest(): string {
  const files = spawnSync("git", ["ls-files", "-z"], { cwd: ROOT, encoding: "utf8" }).stdout.split("\0").filter((f) => f !== "");
  const h = createHash("sha256");
  for (const f of files) {
    const p = join(ROOT, f);
    h.update(f).update("\0").update(existsSync(p) ? readFileSync(p) : Buffer.from("(absent)")).update("\0");
  }
  return h.digest("hex");
}

/** Pids of live processes whose environment holds this run's marker. */
function markedPids(): number[] {
  const out: number[] = [];
  for (const name of readdirSync("/proc")) {
    if (!/^\d+$/.test(name) || Number(name) === process.pid) continue;
    try {
      if (readFileSync(`/proc/${name}/environ`).includes(MARK)) out.push(Number(name));
    } catch {
      // gone, or not ours to read
    }
  }
  return out;
}

async function until<T>(what: string, ms: number, probe: () => Promise<T | null | undefined | false>): Promise<T> {
  const end = Date.now() + ms;
  for (;;) {
    const v = await probe();
    if (v) return v;
    if (Date.now() > end) throw new Error(`timed out after ${ms} ms waiting for ${what}\nserver log:\n${serverLog.slice(-3000)}`);
    await new Promise((r) => setTimeout(r, 250));
  }
}

async function api(path: string, init: RequestInit = {}): Promise<Response> {
  return fetch(`${baseUrl}${path}`, { ...init, headers: { Authorization: `token ${token}`, ...(init.headers ?? {}) } });
}

async function startServer(): Promise<void> {
  const [port] = await freePorts(1);
  token = randomBytes(16).toString("hex");
  baseUrl = `http://127.0.0.1:${port}/`;
  const jroot = join(work, "jupyter");
  installKernelspec({ prefix: jroot, name: "hush" });
  const env: NodeJS.ProcessEnv = { ...process.env };
  for (const k of Object.keys(env)) if (k.startsWith("JUPYTER_") || k.startsWith("HUSH_")) delete env[k];
  Object.assign(env, {
    JUPYTER_PATH: join(jroot, "share", "jupyter"),
    JUPYTER_RUNTIME_DIR: join(jroot, "runtime"),
    JUPYTER_CONFIG_DIR: join(jroot, "config"),
    JUPYTER_DATA_DIR: join(jroot, "data"),
    // The embedded demo's key and ledger for this run only, so it starts from an empty ledger.
    HUSH_DEMO_DIR: join(work, "demo"),
    HUSH_BROWSER_MARK: MARK,
    PYTHONDONTWRITEBYTECODE: "1",
  });
  server = spawn(
    python as string,
    [
      "-m",
      "notebook",
      "--no-browser",
      "--allow-root", // CI containers run as root
      "--NotebookApp.ip=127.0.0.1",
      `--NotebookApp.port=${port}`,
      "--NotebookApp.port_retries=0",
      `--NotebookApp.token=${token}`,
      `--NotebookApp.notebook_dir=${ROOT}`,
    ],
    { env, cwd: ROOT, stdio: ["ignore", "ignore", "pipe"] },
  );
  server.stderr?.on("data", (d: Buffer) => (serverLog += d.toString("utf8")));
  await until("the notebook server", 60_000, async () => {
    if (server?.exitCode !== null) throw new Error(`notebook server exited (${server?.exitCode}):\n${serverLog}`);
    try {
      return (await api("api/status")).ok;
    } catch {
      return false;
    }
  });
}

/** Shuts every kernel down through the server, then the server itself (SIGTERM, SIGKILL after 10 s). */
async function stopServer(): Promise<void> {
  if (!server) return;
  try {
    const kernels = (await (await api("api/kernels")).json()) as { id: string }[];
    await Promise.all(kernels.map((k) => api(`api/kernels/${k.id}`, { method: "DELETE" })));
  } catch {
    // the server may already be gone
  }
  const s = server;
  server = null;
  if (s.exitCode !== null) return;
  const exited = new Promise<void>((r) => s.once("exit", () => r()));
  s.kill("SIGTERM");
  const timer = setTimeout(() => s.kill("SIGKILL"), 10_000);
  await exited;
  clearTimeout(timer);
}

/** Everything the assertions need, read in the page from the notebook model and the rendered DOM. */
function readCells(p: Page): Promise<CellFacts[]> {
  return p.evaluate(() => {
    const J = (window as unknown as { Jupyter: any }).Jupyter;
    const visible = (el: Element): boolean => {
      const r = el.getBoundingClientRect();
      const st = getComputedStyle(el);
      return r.width > 0 && r.height > 0 && st.visibility !== "hidden" && st.display !== "none" && (el.textContent ?? "").trim() !== "";
    };
    const names = ["hush-release", "hush-value", "hush-errorbar", "hush-loss", "hush-notes", "hush-refusal", "hush-chart"];
    return (J.notebook.get_cells() as any[])
      .map((c, index) => ({ c, index }))
      .filter(({ c }) => c.cell_type === "code" && c.get_text().trim() !== "")
      .map(({ c, index }) => {
        const area: HTMLElement = c.element[0].querySelector(".output");
        const outputs: any[] = c.output_area.outputs;
        const count: Record<string, number> = {};
        for (const n of names) count[n] = area.querySelectorAll(`.${n}`).length;
        const charts = [...area.querySelectorAll('.hush-chart img, .hush-chart svg, img[alt^="chart:"]')].map((el) => {
          const r = el.getBoundingClientRect();
          const img = el instanceof HTMLImageElement ? el : null;
          return { drawn: r.width > 0 && r.height > 0 && (img === null || (img.complete && img.naturalWidth > 0)), width: r.width, height: r.height };
        });
        return {
          index,
          source: c.get_text() as string,
          prompt: c.input_prompt_number ?? null,
          releases: outputs.filter((o) => o.metadata?.hush?.receipt).map((o) => ({ replay: o.metadata.hush.replay === true })),
          errors: [...area.querySelectorAll(".output_error, .hush-refusal")].map((e) => (e as HTMLElement).innerText),
          text: area.innerText,
          count,
          valuesVisible: [...area.querySelectorAll(".hush-value")].every(visible),
          errorbarsVisible: [...area.querySelectorAll(".hush-errorbar")].every(visible),
          charts,
        };
      });
  });
}

/**
 * The empty-glyph check. For every character shown in an output, in the font its element
 * computes, the character is drawn on a canvas and compared pixel by pixel with the drawing of an
 * unassigned code point (U+0378, which no font maps, so the browser draws the .notdef box): equal
 * pixels and equal measureText width mean the browser had no glyph. A non-space character that
 * draws no ink at all is counted as missing too. The method checks itself on U+0378 and 'A'.
 */
function readGlyphs(p: Page): Promise<GlyphFacts> {
  return p.evaluate(() => {
    const canvas = document.createElement("canvas");
    canvas.width = 96;
    canvas.height = 96;
    const ctx = canvas.getContext("2d", { willReadFrequently: true })!;
    const draw = (ch: string, font: string): { pixels: Uint8ClampedArray; width: number } => {
      ctx.clearRect(0, 0, 96, 96);
      ctx.font = font;
      ctx.fillStyle = "#000";
      ctx.textBaseline = "middle";
      ctx.fillText(ch, 8, 48);
      return { pixels: ctx.getImageData(0, 0, 96, 96).data, width: ctx.measureText(ch).width };
    };
    const same = (a: Uint8ClampedArray, b: Uint8ClampedArray): boolean => a.length === b.length && a.every((v, i) => v === b[i]);
    const inked = (a: Uint8ClampedArray): boolean => a.some((v, i) => i % 4 === 3 && v !== 0);
    const refs = new Map<string, { pixels: Uint8ClampedArray; width: number }>();
    const isMissing = (ch: string, font: string): boolean => {
      if (!refs.has(font)) refs.set(font, draw("\u0378", font));
      const ref = refs.get(font)!;
      const got = draw(ch, font);
      return !inked(got.pixels) || (got.width === ref.width && same(got.pixels, ref.pixels));
    };
    const fontOf = (el: Element): string => {
      const st = getComputedStyle(el);
      return `${st.fontStyle} ${st.fontWeight} 40px ${st.fontFamily}`;
    };
    const seen = new Map<string, { char: string; font: string }>();
    for (const area of document.querySelectorAll(".output_area")) {
      const walk = document.createTreeWalker(area, NodeFilter.SHOW_TEXT);
      for (let n = walk.nextNode(); n; n = walk.nextNode()) {
        const parent = n.parentElement;
        if (!parent || parent.closest("script,style") || parent.getClientRects().length === 0) continue;
        const font = fontOf(parent);
        for (const ch of n.textContent ?? "") {
          if (/\s/u.test(ch) || /\p{Cc}/u.test(ch)) continue;
          seen.set(`${font}\u0000${ch}`, { char: ch, font });
        }
      }
    }
    // Text drawn inside the charts' SVG images is not in the DOM: read it from the image source.
    for (const img of document.querySelectorAll('.output_area img[src^="data:image/svg+xml"]')) {
      const src = (img as HTMLImageElement).src;
      const body = src.slice(src.indexOf(",") + 1);
      const svgText = src.slice(0, src.indexOf(",")).endsWith(";base64") ? new TextDecoder().decode(Uint8Array.from(atob(body), (c) => c.charCodeAt(0))) : decodeURIComponent(body);
      const svg = new DOMParser().parseFromString(svgText, "image/svg+xml");
      for (const t of svg.querySelectorAll("text")) {
        const family = t.getAttribute("font-family") ?? "sans-serif";
        const weight = t.getAttribute("font-weight") ?? "normal";
        const font = `normal ${weight} 40px ${family}`;
        for (const ch of t.textContent ?? "") {
          if (/\s/u.test(ch) || /\p{Cc}/u.test(ch)) continue;
          seen.set(`${font}\u0000${ch}`, { char: ch, font });
        }
      }
    }
    const missing = [...seen.values()]
      .filter(({ char, font }) => char === "\u25a1" || char === "\ufffd" || isMissing(char, font))
      .map(({ char, font }) => ({ char, font, code: `U+${char.codePointAt(0)!.toString(16).toUpperCase().padStart(4, "0")}` }));
    const probeFont = "normal 400 40px sans-serif";
    return { missing, checked: seen.size, probe: { unassignedMissing: isMissing("\u0378", probeFont), letterMissing: isMissing("A", probeFont) } };
  });
}

async function waitForIdleCells(p: Page, what: string, ms: number): Promise<void> {
  await until(what, ms, () =>
    p.evaluate(() => {
      const J = (window as unknown as { Jupyter: any }).Jupyter;
      // Shift-Enter on the last cell adds an empty one below it, which never runs.
      const code = (J.notebook.get_cells() as any[]).filter((c) => c.cell_type === "code" && c.get_text().trim() !== "");
      return code.every((c) => typeof c.input_prompt_number === "number") && !J.notebook.kernel_busy && document.querySelector("#kernel_indicator_icon.kernel_idle_icon") !== null;
    }),
  );
}

const ready = !!python && haveChromium && haveDist;

describe.skipIf(!ready)("the demo notebook in the classic notebook server and headless Chromium", () => {
  beforeAll(async () => {
    try {
      await runNotebookInBrowser();
    } catch (e: unknown) {
      // What the page showed when it went wrong, for the person reading the failure.
      await page?.screenshot({ path: join(SHOTS, "failure.png") as `${string}.png`, fullPage: true }).catch(() => {});
      throw e;
    }
  }, 170_000);

  async function runNotebookInBrowser(): Promise<void> {
    rmSync(SHOTS, { recursive: true, force: true });
    mkdirSync(SHOTS, { recursive: true });
    trackedBefore = trackedDigest();
    statusBefore = gitStatus();
    // The user's copy, as the README says: `hush notebooks --to DIR`.
    const copy = spawnSync(process.execPath, [CLI, "notebooks", "--to", workspace], { cwd: ROOT, encoding: "utf8", timeout: 30_000 });
    expect(copy.status, `hush notebooks: ${copy.stderr}`).toBe(0);
    expect(readFileSync(join(workspace, "exploration.ipynb"), "utf8")).toBe(readFileSync(TEMPLATE, "utf8"));

    await startServer();
    browser = await puppeteer.launch({
      executablePath: CHROMIUM,
      headless: true,
      userDataDir: join(work, "chromium-profile"),
      env: { ...process.env, HUSH_BROWSER_MARK: MARK },
      args: [
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--window-size=1280,900",
      ],
    });
    page = await browser.newPage();
    await page.setViewport({ width: 1280, height: 900 });
    const rel = relative(ROOT, join(workspace, "exploration.ipynb")).split("/").map(encodeURIComponent).join("/");
    await page.goto(`${baseUrl}notebooks/${rel}?token=${token}`, { waitUntil: "load", timeout: 60_000 });
    await until("the hush kernel to start", 60_000, () =>
      page!.evaluate(() => {
        const J = (window as unknown as { Jupyter?: any }).Jupyter;
        return !!J?.notebook?.kernel?.is_connected?.() && J.notebook.kernel.name === "hush" && document.querySelector("#kernel_indicator_icon.kernel_idle_icon") !== null;
      }),
    );
    // Cell → Run All, the menu item a user clicks.
    await page.evaluate(() => (document.querySelector("#run_all_cells > a") as HTMLElement).click());
    await waitForIdleCells(page, "Run All to finish", 120_000);

    // Cells added at the bottom and run with Shift-Enter, as a user would.
    for (const code of ADDED) {
      await page.evaluate((text: string) => {
        const J = (window as unknown as { Jupyter: any }).Jupyter;
        const last = J.notebook.get_cell(J.notebook.ncells() - 1);
        const cell = last.cell_type === "code" && last.get_text() === "" ? last : J.notebook.insert_cell_at_bottom("code");
        cell.set_text(text);
        J.notebook.select(J.notebook.find_cell_index(cell));
        cell.focus_editor();
      }, code);
      await page.keyboard.down("Shift");
      await page.keyboard.press("Enter");
      await page.keyboard.up("Shift");
      await waitForIdleCells(page, `the added cell ${code}`, 30_000);
    }

    cells = await readCells(page);
    glyphs = await readGlyphs(page);
    newView = cells.some((c) => c.count["hush-value"] > 0);
    await page.screenshot({ path: join(SHOTS, "exploration.png") as `${string}.png`, fullPage: true });
    for (const c of cells) {
      const handle = await page.$(`#notebook-container > .cell:nth-child(${c.index + 1}) .output_wrapper`);
      if (handle && c.text.trim() !== "") await handle.screenshot({ path: join(SHOTS, `cell-${String(c.index).padStart(2, "0")}.png`) as `${string}.png` });
    }
    // Save as the user would (Ctrl-S / File → Save), and wait for the server to have it.
    await page.evaluate(() => (window as unknown as { Jupyter: any }).Jupyter.notebook.save_notebook());
    await until("the save", 20_000, () => page!.evaluate(() => !(window as unknown as { Jupyter: any }).Jupyter.notebook.dirty));

    // Kernel → Restart, then the budget before any dataset is opened: the spend above, from the ledger.
    await page.evaluate(() => (window as unknown as { Jupyter: any }).Jupyter.notebook.kernel.restart());
    await until("the restarted kernel", 60_000, () =>
      page!.evaluate(() => {
        const J = (window as unknown as { Jupyter: any }).Jupyter;
        return J.notebook.kernel.is_connected() && document.querySelector("#kernel_indicator_icon.kernel_idle_icon") !== null;
      }),
    );
    afterRestart = await page.evaluate(async (code: string) => {
      const J = (window as unknown as { Jupyter: any }).Jupyter;
      const cell = J.notebook.insert_cell_at_bottom("code");
      cell.set_text(code);
      cell.execute();
      const end = Date.now() + 60_000;
      while (typeof cell.input_prompt_number !== "number" && Date.now() < end) await new Promise((r) => setTimeout(r, 250));
      return (cell.element[0].querySelector(".output") as HTMLElement).innerText;
    }, "await hush.budget()");
    await page.screenshot({ path: join(SHOTS, "after-restart.png") as `${string}.png`, fullPage: false });

    // The saved notebook as someone else would get it: a copy the server has not signed opens
    // "Not Trusted", and its saved outputs must still show their figures.
    const saved = JSON.parse(readFileSync(join(workspace, "exploration.ipynb"), "utf8")) as { metadata: Record<string, unknown> };
    saved.metadata.shared_by = "a colleague"; // any change: the signature no longer matches
    const untrustedPath = relative(ROOT, join(workspace, "shared.ipynb")).split("/").map(encodeURIComponent).join("/");
    const put = await api(`api/contents/${untrustedPath}`, { method: "PUT", headers: { "Content-Type": "application/json" }, body: JSON.stringify({ type: "notebook", format: "json", content: saved }) });
    expect(put.ok, `PUT a shared copy: ${put.status}`).toBe(true);
    await page.evaluate(() => {
      window.onbeforeunload = null; // the restarted notebook has an unsaved cell; leave without the prompt
    });
    page.on("dialog", (d) => void d.accept());
    await page.goto(`${baseUrl}notebooks/${untrustedPath}?token=${token}`, { waitUntil: "load", timeout: 60_000 });
    await until("the shared copy to render", 30_000, () =>
      page!.evaluate(() => {
        const J = (window as unknown as { Jupyter?: any }).Jupyter;
        return !!J?.notebook && J.notebook.get_cells().length > 5 && document.querySelectorAll(".output_area").length > 5;
      }),
    );
    untrusted = { trusted: await page.evaluate(() => (window as unknown as { Jupyter: any }).Jupyter.notebook.trusted === true), cells: await readCells(page) };
    await page.screenshot({ path: join(SHOTS, "untrusted.png") as `${string}.png`, fullPage: true });
  }

  afterAll(async () => {
    await browser?.close().catch(() => {});
    browser = null;
    await stopServer();
    rmSync(workspace, { recursive: true, force: true });
    // Leftovers would fail the cleanup test below; kill them by pid so nothing outlives the run.
    await new Promise((r) => setTimeout(r, 500));
    const left = markedPids();
    for (const pid of left) {
      try {
        process.kill(pid, "SIGKILL");
      } catch {
        // already gone
      }
    }
    rmSync(work, { recursive: true, force: true });
    if (left.length > 0) throw new Error(`processes left behind by the browser test (killed): ${left.join(", ")}`);
  }, 30_000);

  it("runs every cell of the demo: releases with receipts, the replay free, no error before the added cell", () => {
    const code = cells.filter((c) => !ADDED.includes(c.source));
    expect(code.length).toBeGreaterThan(5);
    for (const c of code) expect(c.errors, `cell ${c.index}: ${c.source}`).toEqual([]);
    const releases = code.flatMap((c) => c.releases);
    expect(releases.filter((r) => !r.replay).length).toBeGreaterThanOrEqual(5);
    const again = code.filter((c) => c.releases.some((r) => r.replay));
    expect(again.length, "the demo asks one question twice").toBe(1);
  });

  it("shows each release's value and error bar (needs the compact view's class names)", (ctx) => {
    if (!newView) {
      console.warn("SKIP: the page has no .hush-value: the compact release view (hush-release/hush-value/hush-errorbar) is not on this branch");
      ctx.skip();
    }
    for (const c of cells.filter((x) => x.releases.length > 0)) {
      expect(c.count["hush-release"], `cell ${c.index}`).toBe(c.releases.length);
      expect(c.count["hush-value"], `cell ${c.index} shows a value`).toBeGreaterThan(0);
      expect(c.count["hush-errorbar"], `cell ${c.index} shows an error bar`).toBeGreaterThan(0);
      expect(c.valuesVisible && c.errorbarsVisible, `cell ${c.index}: values and error bars have a size and text`).toBe(true);
    }
  });

  it("draws exactly one privacy-loss bar under each spending cell (needs the compact view)", (ctx) => {
    if (!newView) {
      console.warn("SKIP: the old view draws its budget bar twice and has no .hush-loss (the compact view is not on this branch)");
      ctx.skip();
    }
    for (const c of cells) {
      const spends = c.releases.some((r) => !r.replay);
      if (spends) expect(c.count["hush-loss"], `cell ${c.index}: ${c.source}`).toBe(1);
      else expect(c.count["hush-loss"], `cell ${c.index}: ${c.source}`).toBeLessThanOrEqual(1);
    }
  });

  it("draws the histogram's chart", () => {
    const hist = cells.find((c) => c.source.includes(".histogram("));
    expect(hist, "the demo has a histogram cell").toBeDefined();
    expect(hist!.charts.length, "a chart in the histogram cell").toBeGreaterThan(0);
    for (const ch of hist!.charts) {
      expect(ch.drawn, `chart ${ch.width}x${ch.height}`).toBe(true);
      expect(ch.width).toBeGreaterThan(100);
    }
  });

  it("prices an accuracy-first ask with no bound and spends nothing; the preview gives the mean's own error", () => {
    const ask = cells.find((c) => c.source === UNBOUNDED);
    expect(ask, "the added accuracy-first cell ran").toBeDefined();
    expect(ask!.releases).toEqual([]);
    expect(ask!.errors.join("\n")).toMatch(/costs ε \d+(\.\d+)?; an accuracy-first ask needs an upper bound .*nothing was spent.*atMost: \d/s);
    const preview = cells.find((c) => c.source.includes(".preview.mean("));
    expect(preview, "the demo previews a mean").toBeDefined();
    expect(preview!.text).toMatch(/expected error of the mean itself ± [\d,.]+ \(95%\) for 2000 values/);
  });

  it("after a kernel restart, hush.budget() shows the notebook's spend without opening a dataset", () => {
    const spent = cells.flatMap((c) => c.releases).filter((r) => !r.replay).length;
    expect(spent).toBe(6);
    expect(afterRestart).not.toMatch(/no dataset opened/);
    // 0.05 + 0.2 + 0.2 + 0.1 + 0.3 + 0.3: the demo's six fresh releases, on the one population of its three datasets.
    expect(afterRestart).toMatch(/ε 1\.15 of 3 used/);
    expect(afterRestart, afterRestart).toMatch(/\bvisits\b/);
  });

  it("a shared copy opens Not Trusted and still shows every release's figures", (ctx) => {
    expect(untrusted).not.toBeNull();
    expect(untrusted!.trusted).toBe(false);
    const shared = untrusted!.cells.filter((c) => c.releases.length > 0);
    expect(shared.length).toBe(cells.filter((c) => c.releases.length > 0).length);
    for (const c of shared) expect(c.text, `cell ${c.index}`).toMatch(/\d/);
    if (!newView) {
      console.warn("SKIP: value and error bar classes in the untrusted view need the compact view");
      ctx.skip();
    }
    for (const c of shared) {
      expect(c.count["hush-value"], `cell ${c.index}`).toBeGreaterThan(0);
      expect(c.valuesVisible && c.errorbarsVisible, `cell ${c.index}`).toBe(true);
    }
  });

  it("refuses the over-cap ask readably: no stack frame, nothing spent", (ctx) => {
    const over = cells.find((c) => c.source === OVER_CAP);
    expect(over, "the added over-cap cell ran").toBeDefined();
    expect(over!.releases).toEqual([]);
    expect(over!.errors.length, over!.text).toBeGreaterThan(0);
    const text = over!.errors.join("\n");
    expect(text).toMatch(/cap/i);
    const frames = text.split("\n").filter((l) => /^\s*at\s|node:internal|\/dist\/|\.[cm]?[jt]s:\d+(:\d+)?\)?$/.test(l));
    if (!newView && frames.length > 0) {
      console.warn(`SKIP: the over-cap refusal still shows ${frames.length} stack frame(s) (readable refusals are not on this branch):\n${frames.join("\n")}`);
      ctx.skip();
    }
    expect(frames).toEqual([]);
    expect(text, "decimals, not fractions").not.toMatch(/\b\d+\/\d{3,}\b/);
  });

  it("has no empty-glyph characters in any output (canvas comparison with .notdef)", (ctx) => {
    expect(glyphs).not.toBeNull();
    // The method must be able to fail: an unassigned code point is missing, a plain letter is not.
    expect(glyphs!.probe).toEqual({ unassignedMissing: true, letterMissing: false });
    expect(glyphs!.checked).toBeGreaterThan(20);
    if (!newView && glyphs!.missing.length > 0) {
      console.warn(`SKIP: the old view shows characters without a glyph: ${glyphs!.missing.map((m) => `${m.char} ${m.code}`).join(", ")}`);
      ctx.skip();
    }
    expect(glyphs!.missing).toEqual([]);
  });

  it("keeps the demo data, key and ledger out of the notebook server, and saving touches no tracked file", async () => {
    expect(trackedDigest(), "tracked files unchanged after Run All and Save").toBe(trackedBefore);
    const saved = JSON.parse(readFileSync(join(workspace, "exploration.ipynb"), "utf8")) as { cells: { outputs?: unknown[] }[] };
    expect(saved.cells.some((c) => (c.outputs ?? []).length > 0), "the save reached the user's copy").toBe(true);
    expect(gitStatus(), "git sees nothing new or changed (the copy and its checkpoints are ignored)").toBe(statusBefore);
    // Listings of the clone's root and notebooks/: no data, no keys, no ledgers.
    for (const dir of ["", "notebooks"]) {
      const r = await api(`api/contents/${dir}`);
      expect(r.ok).toBe(true);
      const names = ((await r.json()) as { content: { name: string }[] }).content.map((e) => e.name);
      expect(names.filter((n) => /\.(csv|parquet|key|sqlite)$|^data$|^keys$|^\.hush$/.test(n)), `listing of /${dir}`).toEqual([]);
    }
    for (const path of [".hush/data/visits.csv", ".hush/demo/policy.yaml", "notebooks/data/visits.csv"]) {
      const r = await api(`files/${path}`);
      expect(r.status, `GET /files/${path}`).toBe(404);
    }
  });
});
