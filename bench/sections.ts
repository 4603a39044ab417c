/**
 * Bench sections that come from other parts of the project (exact samplers, kernel), listed in
 * the order the report shows them, between the aggregates and the memory section.
 */
import { benchCompletion } from "./completion.js";
import { benchKernel } from "./kernel.js";
import { benchKernelDp } from "./kernel-dp.js";
import { benchQuantileAsks } from "./quantile-asks.js";
import { benchSamplers } from "./samplers.js";

export interface SectionResult {
  name: string;
  title: string;
  markdown: string;
}

export interface ExtraSection {
  name: string;
  title: string;
  run: (opts: { quick: boolean; dataDir: string }) => Promise<string>;
}

export const SECTIONS_EXTRA: ExtraSection[] = [
  {
    name: "samplers",
    title: "Exact noise samplers",
    run: async ({ quick }) => (await benchSamplers({ quick })).markdown,
  },
  {
    name: "quantiles",
    title: "Quantile asks at small epsilon (the power path)",
    run: async ({ quick }) => benchQuantileAsks({ quick }),
  },
  {
    name: "kernel",
    title: "Kernel overhead",
    run: async ({ quick }) => (await benchKernel({ quick })).markdown,
  },
  {
    name: "completion",
    title: "First completion after kernel start",
    run: async ({ quick }) => (await benchCompletion({ quick })).markdown,
  },
  {
    name: "kernel-dp",
    title: "DP count end to end through the kernel",
    run: benchKernelDp,
  },
];
