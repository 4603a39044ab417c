import { defineConfig } from "vitest/config";

export default defineConfig({
  test: {
    include: ["test/**/*.test.ts", "runtime/**/*.test.ts", "kernel/**/*.test.ts", "cli/**/*.test.ts"],
    testTimeout: 60_000,
    hookTimeout: 120_000,
    pool: "forks",
    fileParallelism: true,
    maxWorkers: 2,
    // The JSON report lets .ci/run print one plain closing line ("N passed, N failed, N skipped").
    reporters: ["default", "json"],
    outputFile: { json: ".hush/test-report.json" },
  },
});
