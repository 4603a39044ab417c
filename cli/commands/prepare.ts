/**
 * `hush prepare --policy FILE [--dataset NAME]`: the steward's one-time step for
 *   - datasets whose source is a table in a DuckDB database file (`source: { duckdb: FILE, table:
 *     NAME }`): the raw table is loaded, with every row-level step the curator needs (typing,
 *     clamping, grid units, per-unit order), into a prepared table of the same file
 *     (runtime/curator/engines/duckdb/prepare.ts); the curator then starts on it in seconds.
 *     Prints the steward's load report (rows kept, rows left out by reason; never a value);
 *   - datasets of Parquet files queried in place with a privacy unit: the start pass that finds
 *     the units above maxRows and fixes their order (runtime/curator/engines/duckdb/in-place.ts)
 *     is run now and kept in the start cache beside the ledger, so that no curator start pays for
 *     it while the files stay as they are.
 */
import { PolicyError } from "../../runtime/errors.js";
import { DuckDBEngine } from "../../runtime/curator/engines/duckdb/engine.js";
import { prepareDataset } from "../../runtime/curator/engines/duckdb/prepare.js";
import type { DatasetPolicy } from "../../runtime/curator/policy.js";
import { loadPolicy } from "../../runtime/curator/policy.js";

export async function runPrepare(o: { policy: string; dataset?: string }, out: (s: string) => void): Promise<void> {
  const policy = loadPolicy(o.policy);
  const preparable = (d: DatasetPolicy) => d.origin.kind === "duckdb" || (d.origin.kind === "files" && d.origin.format === "parquet" && d.unit.column !== null);
  const all = [...policy.datasets.values()].filter(preparable);
  let list = all;
  if (o.dataset !== undefined) {
    const d = policy.datasets.get(o.dataset);
    if (d === undefined) throw new PolicyError(`policy ${policy.file}: no dataset named ${JSON.stringify(o.dataset.slice(0, 64))}`);
    if (!preparable(d)) {
      throw new PolicyError(
        `policy ${policy.file}: datasets.${d.name}.source is neither a DuckDB file ({ duckdb: FILE, table: NAME }) nor Parquet files in place with a unit column; nothing to prepare`,
      );
    }
    list = [d];
  }
  if (list.length === 0) {
    out("no dataset of this policy reads a DuckDB file or Parquet files in place with a unit column; nothing to prepare\n");
    return;
  }
  for (const d of list) {
    const started = performance.now();
    if (d.origin.kind === "files") {
      // Opening the dataset runs the start pass and writes the start cache (or finds it current).
      const e = await DuckDBEngine.open(policy, { datasets: [d], quiet: true });
      try {
        const secs = ((performance.now() - started) / 1000).toFixed(1);
        const cache = e.startCache(d.name);
        if (cache !== "read" && cache !== "written") {
          throw new PolicyError(`dataset ${d.name}: the start cache could not be written beside the ledger (${policy.ledgerPath}); check that folder's permissions`);
        }
        out(`dataset ${d.name}: ${cache === "read" ? "start cache already current" : "per-unit order kept in the start cache"} (${e.access(d.name)}) in ${secs} s\n`);
      } finally {
        await e.close();
      }
      continue;
    }
    const r = await prepareDataset(policy, d);
    const why = Object.entries(r.reasons)
      .map(([k, v]) => `${k}: ${v}`)
      .join("; ");
    const secs = ((performance.now() - started) / 1000).toFixed(1);
    out(`dataset ${d.name}: prepared ${r.rows} rows, left out ${r.rejected}${r.rejected > 0 ? ` (${why})` : ""} in ${secs} s\n`);
  }
}
