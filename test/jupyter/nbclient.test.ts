/** nbclient (a client we did not write) executes a small notebook end to end on our kernel. */
import { fileURLToPath } from "node:url";
import { expect, it } from "vitest";
import { findPython, HERE, kernelEnv, run } from "./tools.js";

const python = findPython(["nbclient", "nbformat"], "nbclient notebook run");
const NOTEBOOK = fileURLToPath(new URL("../fixtures/notebooks/kernel-basics.ipynb", import.meta.url));

it.skipIf(!python)("runs every cell and records nbformat outputs", { timeout: 300_000 }, async () => {
  const { env, kernelName } = kernelEnv();
  const r = await run(python as string, ["run_nbclient.py", NOTEBOOK, kernelName], { env, cwd: HERE, timeoutMs: 280_000 });
  if (r.code !== 0) console.error(r.stderr);
  expect(r.code).toBe(0);
  // nbformat stores multi-line strings as lists of lines; join them back for comparison.
  const nb = JSON.parse(r.stdout, (_k, v) => (Array.isArray(v) && v.every((x) => typeof x === "string") && _k !== "traceback" ? v.join("") : v)) as {
    cells: Array<{ cell_type: string; execution_count?: number; outputs?: any[] }>;
  };
  const code = nb.cells.filter((c) => c.cell_type === "code");
  expect(code.map((c) => c.execution_count)).toEqual([1, 2, 3, 4, 5]);
  expect(code[0].outputs).toEqual([{ output_type: "stream", name: "stdout", text: "3 values\n" }]);
  expect(code[1].outputs).toEqual([{ output_type: "execute_result", execution_count: 2, data: { "text/plain": "16" }, metadata: {} }]);
  expect(code[2].outputs?.[0]).toMatchObject({ output_type: "execute_result", data: { "text/plain": "32" } });
  expect(code[3].outputs).toEqual([
    { output_type: "display_data", data: { "text/plain": "{ total: 16, mean: 5.333333333333333 }" }, metadata: {} },
  ]);
  expect(code[4].outputs?.[0]).toMatchObject({ output_type: "error", ename: "RangeError", evalue: "expected failure" });
});
