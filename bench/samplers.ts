/**
 * Throughput of the exact samplers (runtime/core, production CSPRNG source) against a float
 * Gaussian baseline measured in the same run: discrete Laplace with scale t and discrete Gaussian
 * with sigma in {1, 100, 10^4}. Each configuration is timed over several repeats; the report gives
 * median and min–max samples per second, and the ratio of the float baseline's median rate to the
 * sampler's (how many times slower the exact sampler is).
 *
 * Run alone: `node dist/bench/samplers.js [--quick]` prints the markdown.
 */
import { performance } from "node:perf_hooks";
import { pathToFileURL } from "node:url";
import { Bits, cryptoBytes } from "../runtime/core/random.js";
import { Rational } from "../runtime/core/rational.js";
import { sampleDiscreteGaussian, sampleDiscreteLaplace } from "../runtime/core/samplers.js";
import { floatGaussianBatch } from "./float-baseline.js";

export interface SamplerRow {
  name: string;
  samplesPerSec: number;
  ratioToFloat: number;
  min: number;
  max: number;
}

interface Config {
  name: string;
  run: (n: number) => void;
}

function median(xs: number[]): number {
  const s = [...xs].sort((a, b) => a - b);
  const m = s.length >> 1;
  return s.length % 2 ? s[m] : (s[m - 1] + s[m]) / 2;
}

function rate(run: (n: number) => void, n: number): number {
  const t0 = performance.now();
  run(n);
  return n / ((performance.now() - t0) / 1000);
}

let sink = 0n;

export async function benchSamplers(opts: { quick?: boolean; repeats?: number; samples?: number } = {}): Promise<{
  rows: SamplerRow[];
  markdown: string;
}> {
  const repeats = Math.max(5, opts.repeats ?? 7);
  // Each timed repeat lasts about this long (unless a fixed sample count is given), so that timer
  // resolution and JIT warm-up do not dominate the short float baseline.
  const targetSeconds = opts.quick ? 0.05 : 0.25;
  const bits = new Bits(cryptoBytes);
  const configs: Config[] = [];
  for (const s of ["1", "100", "10000"]) {
    const t = Rational.parse(s);
    const sigma2 = t.mul(t);
    configs.push({
      name: `discrete Laplace, t = ${s}`,
      run: (n) => {
        let acc = 0n;
        for (let i = 0; i < n; i++) acc += sampleDiscreteLaplace(t, bits);
        sink ^= acc;
      },
    });
    configs.push({
      name: `discrete Gaussian, sigma = ${s}`,
      run: (n) => {
        let acc = 0n;
        for (let i = 0; i < n; i++) acc += sampleDiscreteGaussian(sigma2, bits);
        sink ^= acc;
      },
    });
  }
  const floatRun = (n: number): void => {
    if (floatGaussianBatch(n) === Infinity) sink ^= 1n;
  };
  // warm-up (every path compiled) and calibration of the sample count per configuration
  const sizeFor = (run: (n: number) => void): number => {
    run(20_000);
    const r = rate(run, 50_000);
    return opts.samples ?? Math.max(50_000, Math.round(r * targetSeconds));
  };
  const floatN = sizeFor(floatRun);
  const sizes = configs.map((c) => sizeFor(c.run));
  const floatRates: number[] = [];
  const rates = configs.map(() => [] as number[]);
  for (let r = 0; r < repeats; r++) {
    // the float baseline runs in every repeat, interleaved, so machine drift affects both sides
    floatRates.push(rate(floatRun, floatN));
    for (let i = 0; i < configs.length; i++) rates[i].push(rate(configs[i].run, sizes[i]));
  }
  const floatMedian = median(floatRates);
  const rows: SamplerRow[] = [
    { name: "float Gaussian (Box–Muller, Math.random; baseline)", samplesPerSec: floatMedian, ratioToFloat: 1, min: Math.min(...floatRates), max: Math.max(...floatRates) },
    ...configs.map((c, i) => {
      const m = median(rates[i]);
      return { name: c.name, samplesPerSec: m, ratioToFloat: floatMedian / m, min: Math.min(...rates[i]), max: Math.max(...rates[i]) };
    }),
  ];
  const fmt = (x: number): string => (x >= 1e6 ? `${(x / 1e6).toFixed(2)} M` : `${(x / 1e3).toFixed(0)} k`);
  const lines = [
    `Exact samplers (runtime/core, node:crypto CSPRNG), ${repeats} repeats of about ${Math.round(targetSeconds * 1000)} ms each, against a float Gaussian measured in the same run (interleaved).`,
    "",
    "| sampler | samples/s (median) | min – max | times slower than float |",
    "|---|---:|---:|---:|",
    ...rows.map((r) => `| ${r.name} | ${fmt(r.samplesPerSec)} | ${fmt(r.min)} – ${fmt(r.max)} | ${r.ratioToFloat.toFixed(1)}× |`),
    "",
    "Targets: at least 1 M exact samples/s and at most 20× the float baseline.",
  ];
  return { rows, markdown: lines.join("\n") };
}

if (process.argv[1] !== undefined && import.meta.url === pathToFileURL(process.argv[1]).href) {
  const quick = process.argv.includes("--quick");
  benchSamplers({ quick }).then(
    (r) => console.log(r.markdown),
    (e: unknown) => {
      console.error(e);
      process.exitCode = 1;
    },
  );
}
