/**
 * The bench's steward workspace: one dataset "bench" over a generated Parquet file, either with
 * each row its own unit, or with `pid` as the privacy unit (bounded to 8 rows and 2 groups per
 * unit; the generated data has about 4 rows per unit, a few units above 8). A generous cap, so a
 * bench never runs out of budget.
 */
import fs from "node:fs";
import os from "node:os";
import path from "node:path";
import { BENCH_COLUMNS, BENCH_UNIT_COLUMN } from "./data.js";
import { writeWorkspace, type Workspace } from "./workspace.js";

export const BENCH_DATASET = "bench";
export const BENCH_ANALYST = "bench";

export function benchWorkspace(parquet: string, opts: { unit: boolean; prefix?: string }): Workspace {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), `hush-${opts.prefix ?? "bench"}-`));
  return writeWorkspace(dir, {
    analysts: [BENCH_ANALYST],
    datasets: {
      [BENCH_DATASET]: {
        description: "Generated bench rows",
        source: parquet,
        ...(opts.unit ? { unit: { column: BENCH_UNIT_COLUMN, maxRows: 8, maxGroups: 2 } } : {}),
        accounting: { mode: "pure", cap: { epsilon: "1000000" } },
        analysts: [BENCH_ANALYST],
        columns: BENCH_COLUMNS as unknown as Record<string, unknown>,
      },
    },
  });
}

export function removeWorkspace(ws: Workspace): void {
  fs.rmSync(ws.dir, { recursive: true, force: true });
}
