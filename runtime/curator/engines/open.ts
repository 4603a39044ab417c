/**
 * Opening the engines a policy needs: each dataset goes to the engine of its source kind (DuckDB
 * for files in memory or in place and prepared DuckDB files; PostgreSQL for postgres sources),
 * one engine instance per kind, behind one DataEngine that routes by dataset name.
 *
 * To add an engine: give its source kind an opener in OPENERS (a dynamic import, so a curator
 * without such datasets never loads the client library).
 */
import { UnknownDatasetError } from "../../errors.js";
import type { DatasetPolicy, LoadedPolicy, SourcePolicy } from "../policy.js";
import type { BucketsRequest, CellsRequest, DataEngine, EngineOpener, LoadReport, OpenOptions } from "./types.js";

type Family = "duckdb" | "postgres";

const FAMILY: Record<SourcePolicy["kind"], Family> = { memory: "duckdb", files: "duckdb", duckdb: "duckdb", postgres: "postgres" };

const OPENERS: Record<Family, () => Promise<EngineOpener>> = {
  duckdb: async () => {
    const { DuckDBEngine } = await import("./duckdb/engine.js");
    return (policy, opts) => DuckDBEngine.open(policy, opts);
  },
  postgres: async () => {
    const { openPostgres } = await import("./postgres/engine.js");
    return openPostgres;
  },
};

/** Routes each request to the engine that opened its dataset. */
class Routed implements DataEngine {
  constructor(private readonly byDataset: Map<string, DataEngine>, private readonly engines: DataEngine[]) {}

  private of(dataset: string): DataEngine {
    const e = this.byDataset.get(dataset);
    if (e === undefined) throw new UnknownDatasetError(`dataset ${JSON.stringify(dataset.slice(0, 64))} is not open`);
    return e;
  }
  hasDataset(dataset: string): boolean {
    return this.byDataset.has(dataset);
  }
  loadReport(dataset: string): LoadReport {
    return this.of(dataset).loadReport(dataset);
  }
  cells(req: CellsRequest): Promise<bigint[][]> {
    return this.of(req.dataset).cells(req);
  }
  buckets(req: BucketsRequest): Promise<[bigint, bigint][]> {
    return this.of(req.dataset).buckets(req);
  }
  async close(): Promise<void> {
    for (const e of this.engines) await e.close();
  }
}

/** Opens every dataset of the policy (or the named ones), each in the engine of its source kind. */
export async function openEngines(policy: LoadedPolicy, opts: Omit<OpenOptions, "datasets"> & { datasets?: readonly string[] } = {}): Promise<DataEngine> {
  const names = opts.datasets ?? [...policy.datasets.keys()];
  const groups = new Map<Family, DatasetPolicy[]>();
  for (const n of names) {
    const d = policy.datasets.get(n);
    if (d === undefined) throw new UnknownDatasetError(`no dataset named ${JSON.stringify(n.slice(0, 64))} in the policy`);
    const f = FAMILY[d.origin.kind];
    groups.set(f, [...(groups.get(f) ?? []), d]);
  }
  const byDataset = new Map<string, DataEngine>();
  const engines: DataEngine[] = [];
  try {
    for (const [family, list] of groups) {
      const open = await OPENERS[family]();
      const e = await open(policy, { ...opts, datasets: list });
      engines.push(e);
      for (const d of list) byDataset.set(d.name, e);
    }
  } catch (err) {
    for (const e of engines) await e.close().catch(() => undefined);
    throw err;
  }
  return engines.length === 1 ? engines[0] : new Routed(byDataset, engines);
}
