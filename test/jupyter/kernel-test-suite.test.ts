/** jupyter_kernel_test.KernelTests (a client we did not write) against the installed kernelspec. */
import { expect, it } from "vitest";
import { findPython, HERE, kernelEnv, run } from "./tools.js";

const python = findPython(["jupyter_kernel_test", "jupyter_client"], "jupyter_kernel_test suite");

it.skipIf(!python)("passes jupyter_kernel_test's KernelTests with TypeScript samples", { timeout: 300_000 }, async () => {
  const { env } = kernelEnv();
  const r = await run(python as string, ["-m", "unittest", "-v", "kernel_tests"], { env, cwd: HERE, timeoutMs: 280_000 });
  const report = r.stderr;
  if (r.code !== 0) console.error(report);
  expect(r.code).toBe(0);
  // Every sample family actually ran (a skipped KernelTests test is not a pass).
  for (const name of [
    "test_completion",
    "test_display_data",
    "test_error",
    "test_execute_result",
    "test_execute_stderr",
    "test_execute_stdout",
    "test_history",
    "test_inspect",
    "test_is_complete",
    "test_kernel_info",
  ]) {
    expect(report).toMatch(new RegExp(`${name} \\(kernel_tests\\.HushKernelTests(\\.${name})?\\) \\.\\.\\. ok`));
  }
});
