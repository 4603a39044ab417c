/**
 * `npm run bench [-- --quick] [-- --only aggregates,samplers,quantiles,kernel,completion,flood,previewflood,memory] [-- --out FILE]`
 * `[-- --sizes 1000000,10000000] [-- --queries median,count]` (aggregates only: a subset of the sizes
 * and of the query names of bench/baseline.ts, for measuring one change; default all)
 *
 * Runs each bench section and writes a markdown report: machine facts, date, and per figure the
 * median and min–max over repeated runs, as a ratio to a baseline measured in the same run. A full
 * run writes bench/RESULTS.md; --quick (small sizes, few runs: a smoke test of the bench itself)
 * writes .hush/bench/RESULTS-quick.md unless --out says otherwise.
 *
 * bench/RESULTS.md keeps everything below the KEEP_MARKER line across runs: the hand-written
 * analysis (profiles, explanations of missed targets, the lost-debit check) lives there.
 */
import fs from "node:fs";
import path from "node:path";
import { benchAggregates } from "./aggregates.js";
import { repoRoot } from "./curator-process.js";
import { benchFlood, benchPreviewFlood } from "./flood.js";
import { machineFacts, machineMarkdown, progress } from "./harness.js";
import { benchMemory } from "./memory.js";
import { SECTIONS_EXTRA, type SectionResult } from "./sections.js";

export const KEEP_MARKER = "<!-- Everything below this line is hand-written and kept by bench/run.ts across runs. -->";

interface Options {
  quick: boolean;
  only: Set<string> | null;
  out: string;
  sizes: number[] | null;
  queries: Set<string> | null;
}

function parseArgs(argv: string[]): Options {
  let quick = false;
  let only: Set<string> | null = null;
  let out: string | null = null;
  let sizes: number[] | null = null;
  let queries: Set<string> | null = null;
  const sizeList = (v: string): number[] =>
    v.split(",").map((x) => {
      const n = Number(x);
      if (!Number.isSafeInteger(n) || n < 1) throw new Error(`--sizes takes positive whole numbers, got ${x}`);
      return n;
    });
  for (let i = 0; i < argv.length; i++) {
    const a = argv[i];
    if (a === "--quick") quick = true;
    else if (a === "--only") only = new Set((argv[++i] ?? "").split(",").filter(Boolean));
    else if (a.startsWith("--only=")) only = new Set(a.slice(7).split(",").filter(Boolean));
    else if (a === "--out") out = argv[++i] ?? null;
    else if (a.startsWith("--out=")) out = a.slice(6);
    else if (a === "--sizes") sizes = sizeList(argv[++i] ?? "");
    else if (a.startsWith("--sizes=")) sizes = sizeList(a.slice(8));
    else if (a === "--queries") queries = new Set((argv[++i] ?? "").split(",").filter(Boolean));
    else if (a.startsWith("--queries=")) queries = new Set(a.slice(10).split(",").filter(Boolean));
    else throw new Error(`unknown option ${a}; usage: run.js [--quick] [--only aggregates,samplers,quantiles,kernel,completion,kernel-dp,flood,previewflood,memory] [--out FILE] [--sizes N,...] [--queries NAME,...]`);
  }
  const root = repoRoot();
  return {
    quick,
    only,
    sizes,
    queries,
    // A partial run (a subset of sizes or queries) never overwrites bench/RESULTS.md by default.
    out:
      out ??
      (quick ? path.join(root, ".hush", "bench", "RESULTS-quick.md")
        : sizes !== null || queries !== null ? path.join(root, ".hush", "bench", "RESULTS-partial.md")
        : path.join(root, "bench", "RESULTS.md")),
  };
}

async function section(name: string, title: string, opts: Options, run: () => Promise<string>): Promise<SectionResult | null> {
  if (opts.only !== null && !opts.only.has(name)) return null;
  const t0 = performance.now();
  try {
    const markdown = await run();
    progress(`${name}: done in ${((performance.now() - t0) / 1000).toFixed(0)} s`);
    return { name, title, markdown };
  } catch (e: unknown) {
    // One failing section must not lose the others' figures; the failure is reported in place.
    const msg = e instanceof Error ? (e.stack ?? e.message) : String(e);
    progress(`${name}: FAILED: ${msg}`);
    return { name, title, markdown: `**This section failed in this run:**\n\n\`\`\`\n${msg}\n\`\`\`` };
  }
}

async function main(): Promise<void> {
  const opts = parseArgs(process.argv.slice(2));
  const root = repoRoot();
  const dataDir = path.join(root, ".hush", "bench");
  const facts = machineFacts();
  const t0 = performance.now();
  const results: (SectionResult | null)[] = [];

  results.push(
    await section("aggregates", "DP aggregates vs plain DuckDB SQL", opts, async () =>
      (
        await benchAggregates({
          sizes: opts.sizes ?? (opts.quick ? [100_000] : [1_000_000, 10_000_000]),
          queries: opts.queries,
          // Many runs at 1M: there a query takes a few milliseconds and a busy machine's jitter is
          // of the same size, so medians need more samples to settle.
          runs: (rows) => (opts.quick ? 3 : rows >= 10_000_000 ? 9 : 31),
          warmup: opts.quick ? 1 : 3,
          dataDir,
        })
      ).markdown,
    ),
  );
  for (const extra of SECTIONS_EXTRA) {
    results.push(await section(extra.name, extra.title, opts, () => extra.run({ quick: opts.quick, dataDir })));
  }
  results.push(
    await section("flood", "A legitimate analyst during a wrong-token flood", opts, () => benchFlood({ quick: opts.quick })),
  );
  results.push(
    await section("previewflood", "A legitimate analyst while another analyst floods with previews", opts, () => benchPreviewFlood({ quick: opts.quick })),
  );
  results.push(
    await section("memory", "Curator resident memory", opts, async () =>
      (await benchMemory({ rows: opts.quick ? 1_000_000 : 10_000_000, unit: true, dataDir })).markdown,
    ),
  );

  const totalS = ((performance.now() - t0) / 1000).toFixed(0);
  const body = results
    .filter((r): r is SectionResult => r !== null)
    .map((r) => `## ${r.title}\n\n${r.markdown}`)
    .join("\n\n");
  let kept = "";
  if (fs.existsSync(opts.out)) {
    const old = fs.readFileSync(opts.out, "utf8");
    const at = old.indexOf(KEEP_MARKER);
    if (at >= 0) kept = old.slice(at + KEEP_MARKER.length).replace(/^\n+/, "");
  }
  const text =
    `# hush benchmarks\n\n` +
    `Generated by \`npm run bench${opts.quick ? " -- --quick" : ""}\` (bench/run.ts) in ${totalS} s. ` +
    `Each figure: median over repeated runs, with min–max, and its ratio to a baseline measured in the same run.` +
    `${opts.quick ? " **Quick mode: small sizes and few runs; a smoke test of the bench, not figures to quote.**" : ""}\n\n` +
    `## Machine\n\n${machineMarkdown(facts)}\n\n${body}\n\n${KEEP_MARKER}\n\n${kept}`;
  fs.mkdirSync(path.dirname(opts.out), { recursive: true });
  fs.writeFileSync(opts.out, text.trimEnd() + "\n");
  progress(`wrote ${opts.out}`);
}

main().catch((e: unknown) => {
  process.stderr.write(`bench failed: ${e instanceof Error ? (e.stack ?? e.message) : String(e)}\n`);
  process.exitCode = 1;
});
