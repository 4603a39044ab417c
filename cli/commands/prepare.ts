/**
 * `hush prepare --policy FILE [--dataset NAME]`: the steward's one-time step for datasets whose
 * source is a table in a DuckDB database file (`source: { duckdb: FILE, table: NAME }`). Each such
 * dataset's raw table is loaded, with every row-level step the curator needs (typing, clamping,
 * grid units, per-unit order), into a prepared table of the same file
 * (runtime/curator/engines/duckdb/prepare.ts); the curator then starts on it in seconds. Prints
 * the steward's load report (rows kept, rows left out by reason; never a value).
 */
import { PolicyError } from "../../runtime/errors.js";
import { prepareDataset } from "../../runtime/curator/engines/duckdb/prepare.js";
import { loadPolicy } from "../../runtime/curator/policy.js";

export async function runPrepare(o: { policy: string; dataset?: string }, out: (s: string) => void): Promise<void> {
  const policy = loadPolicy(o.policy);
  const all = [...policy.datasets.values()].filter((d) => d.origin.kind === "duckdb");
  let list = all;
  if (o.dataset !== undefined) {
    const d = policy.datasets.get(o.dataset);
    if (d === undefined) throw new PolicyError(`policy ${policy.file}: no dataset named ${JSON.stringify(o.dataset.slice(0, 64))}`);
    if (d.origin.kind !== "duckdb") throw new PolicyError(`policy ${policy.file}: datasets.${d.name}.source is not a DuckDB file ({ duckdb: FILE, table: NAME }); nothing to prepare`);
    list = [d];
  }
  if (list.length === 0) {
    out("no dataset of this policy reads a DuckDB file; nothing to prepare\n");
    return;
  }
  for (const d of list) {
    const started = performance.now();
    const r = await prepareDataset(policy, d);
    const why = Object.entries(r.reasons)
      .map(([k, v]) => `${k}: ${v}`)
      .join("; ");
    const secs = ((performance.now() - started) / 1000).toFixed(1);
    out(`dataset ${d.name}: prepared ${r.rows} rows, left out ${r.rejected}${r.rejected > 0 ? ` (${why})` : ""} in ${secs} s\n`);
  }
}
