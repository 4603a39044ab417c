/**
 * The DuckDB engine: one DuckDB instance for every dataset whose source is a file copied into
 * memory (load.ts), files queried in place (in-place.ts) or a prepared DuckDB database file
 * (prepare.ts). Memory and threads are DuckDB's own limits, set from the policy's `engine:`;
 * DuckDB spills to a private temporary folder beyond the memory limit.
 */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { dirname, join } from "node:path";
import { DuckDBInstance } from "@duckdb/node-api";
import { UnknownDatasetError } from "../../../errors.js";
import { Bits, cryptoBytes } from "../../../core/index.js";
import type { DatasetPolicy, LoadedPolicy } from "../../policy.js";
import { DUCKDB_DIALECT } from "../../sql.js";
import { type Relation, bucketsStatement, cellsFromRows, cellsStatement, toBigInt } from "../shapes.js";
import { type BucketsRequest, type CellsRequest, type DataEngine, type LoadReport, type OpenOptions, type SqlParam, schemaOf } from "../types.js";
import { quoteIdent, tableKey } from "./columns.js";
import { BIG_ROWS_BOUNDING, type InPlaceSplit, type StartCache, openInPlace } from "./in-place.js";
import { LOADED_BOUNDING, loadTable } from "./load.js";
import { ConnectionPool } from "./pool.js";
import { attachPrepared } from "./prepare.js";

/** What the engine keeps per dataset: its relation and the steward's report. */
interface Opened {
  relation: Relation;
  report: LoadReport;
  /** How the data is reached, in words (steward's start line). */
  access: string;
  /** Checked before every statement (in place: the files have not changed since start). */
  check?: () => Promise<void>;
  /** In place with a unit: the statements' split path (in-place.ts InPlaceSplit). */
  split?: InPlaceSplit;
  /** In place with a unit: what the start did with the start cache. */
  startCache?: StartCache;
}

/** The three relations of a split path, with their signs: all rows, minus big rows unbounded, plus big rows bounded. */
function splitParts(r: Relation, s: InPlaceSplit): { relation: Relation; sign: bigint }[] {
  return [
    { relation: { schema: r.schema, from: s.all, ...(s.allRows === undefined ? {} : { rows: s.allRows }), bounding: null }, sign: 1n },
    { relation: { schema: r.schema, from: s.big, bounding: null }, sign: -1n },
    { relation: { schema: r.schema, from: s.big, bounding: BIG_ROWS_BOUNDING }, sign: 1n },
  ];
}

/** DuckDB configuration from the policy's engine limits. */
export function duckdbConfig(policy: LoadedPolicy, temp: string): Record<string, string> {
  const config: Record<string, string> = { temp_directory: temp };
  if (policy.engine.memoryLimit !== null) config.memory_limit = policy.engine.memoryLimit;
  if (policy.engine.threads !== null) config.threads = String(policy.engine.threads);
  return config;
}

export class DuckDBEngine implements DataEngine {
  private readonly datasets = new Map<string, Opened>();
  private readonly pool: ConnectionPool;
  private closed = false;

  private constructor(
    private readonly instance: DuckDBInstance,
    private readonly temp: string,
  ) {
    this.pool = new ConnectionPool(instance);
  }

  /** Opens the given datasets (default: every dataset of the policy that DuckDB serves). */
  static async open(policy: LoadedPolicy, opts: OpenOptions = {}): Promise<DuckDBEngine> {
    const list = opts.datasets ?? [...policy.datasets.values()].filter((d) => d.origin.kind !== "postgres");
    const temp = mkdtempSync(join(tmpdir(), "hush-duckdb-"));
    let instance: DuckDBInstance;
    try {
      instance = await DuckDBInstance.create(":memory:", duckdbConfig(policy, temp));
    } catch (e) {
      rmSync(temp, { recursive: true, force: true });
      throw e;
    }
    const engine = new DuckDBEngine(instance, temp);
    const bits = opts.bits ?? new Bits(cryptoBytes);
    const cacheDir = opts.cacheDir === undefined ? join(dirname(policy.ledgerPath), "in-place") : opts.cacheDir;
    try {
      const conn = await instance.connect();
      try {
        for (const [i, d] of list.entries()) {
          const where = `policy ${policy.file}: datasets.${d.name}`;
          // Datasets that differ only in caps or analysts (same source and kind, schema and unit) share one table.
          const same = [...engine.datasets.values()].find((o) => o.relation.schema.dataset.origin.kind === d.origin.kind && tableKey(o.relation.schema.dataset) === tableKey(d));
          let opened: Opened;
          if (same !== undefined) {
            opened = { ...same, relation: { ...same.relation, schema: schemaOf(d) } };
          } else {
            opened = await engine.openOne(conn, d, i, where, bits, cacheDir, opts.quiet === true ? null : (m) => process.stderr.write(`hush curator: dataset ${d.name}: ${m}\n`));
          }
          engine.datasets.set(d.name, opened);
          if (!opts.quiet) {
            const r = opened.report;
            const why = Object.entries(r.reasons)
              .map(([k, v]) => `${k}: ${v}`)
              .join("; ");
            const shares = same !== undefined ? `shares the table of ${same.relation.schema.dataset.name}: ` : "";
            const what = d.origin.kind === "files" ? `${opened.access}${r.rows === null ? "" : `, ${r.rows} rows in the files`}` : `loaded ${r.rows} rows, left out ${r.rejected}${r.rejected > 0 ? ` (${why})` : ""}${d.origin.kind === "duckdb" ? ` (${opened.access})` : ""}`;
            process.stderr.write(`hush curator: dataset ${d.name}: ${shares}${what}\n`);
          }
        }
      } finally {
        conn.closeSync();
      }
    } catch (e) {
      await engine.close();
      throw e;
    }
    return engine;
  }

  private async openOne(
    conn: import("@duckdb/node-api").DuckDBConnection,
    d: DatasetPolicy,
    i: number,
    where: string,
    bits: Bits,
    cacheDir: string | null,
    say: ((message: string) => void) | null,
  ): Promise<Opened> {
    const schema = schemaOf(d);
    const o = d.origin;
    switch (o.kind) {
      case "memory": {
        const table = quoteIdent(`d${i}`);
        const report = await loadTable(conn, d, { kind: "file", path: o.path, format: o.format }, table, i, where, bits);
        return { relation: { schema, from: table, bounding: schema.hasUnit ? LOADED_BOUNDING : null }, report, access: "in memory" };
      }
      case "files":
        return openInPlace(conn, d, o, i, where, bits, cacheDir, say);
      case "duckdb": {
        const { from, report } = await attachPrepared(conn, d, o, i, where);
        return { relation: { schema, from, bounding: schema.hasUnit ? LOADED_BOUNDING : null }, report, access: "prepared DuckDB file, read from disk" };
      }
      case "postgres":
        throw new Error("internal: a PostgreSQL source given to the DuckDB engine");
    }
  }

  private get(dataset: string): Opened {
    const o = this.datasets.get(dataset);
    if (o === undefined) throw new UnknownDatasetError(`dataset ${JSON.stringify(dataset.slice(0, 64))} is not open`);
    return o;
  }

  hasDataset(dataset: string): boolean {
    return this.datasets.has(dataset);
  }

  /** Steward-only: rows kept and why others were left out. */
  /** Steward-only: how the data is reached, in words. */
  access(dataset: string): string {
    return this.get(dataset).access;
  }

  /** Steward-only: what the start did with a dataset's start cache (null: it has none, not in place with a unit). */
  startCache(dataset: string): StartCache | null {
    return this.get(dataset).startCache ?? null;
  }

  loadReport(dataset: string): LoadReport {
    const r = this.get(dataset).report;
    return { ...r, reasons: { ...r.reasons } };
  }

  /** The relation behind a dataset (tests and the bench compare with plain SQL over it). */
  relation(dataset: string): Relation {
    return this.get(dataset).relation;
  }

  async cells(req: CellsRequest): Promise<bigint[][]> {
    const o = this.get(req.dataset);
    // Split path (in place with a unit): the same cells as the bounded relation, as a signed sum.
    const parts = o.split === undefined ? [{ relation: o.relation, sign: 1n }] : splitParts(o.relation, o.split);
    const sts = parts.map((p) => cellsStatement(p.relation, req.where, req.keys, req.terms, DUCKDB_DIALECT));
    const results = await this.checked(o, sts);
    const sum = cellsFromRows(results[0], sts[0].sizes, req.terms.length, toBigInt);
    for (let j = 1; j < parts.length; j++) {
      const cells = cellsFromRows(results[j], sts[j].sizes, req.terms.length, toBigInt);
      for (const [c, v] of sum.entries()) for (let t = 0; t < v.length; t++) v[t] += parts[j].sign * cells[c][t];
    }
    return sum;
  }

  async buckets(req: BucketsRequest): Promise<[bigint, bigint][]> {
    const o = this.get(req.dataset);
    const parts = o.split === undefined ? [{ relation: o.relation, sign: 1n }] : splitParts(o.relation, o.split);
    const sts = parts.map((p) => bucketsStatement(p.relation, req, DUCKDB_DIALECT));
    const results = await this.checked(o, sts);
    const counts = new Map<bigint, bigint>();
    for (const [j, p] of parts.entries()) {
      // The bucket of a missing value is NULL: left out.
      for (const r of results[j]) {
        if (r[0] === null) continue;
        const b = toBigInt(r[0]);
        counts.set(b, (counts.get(b) ?? 0n) + p.sign * toBigInt(r[1]));
      }
    }
    const out = [...counts].filter(([, n]) => n !== 0n).sort((x, y) => (x[0] < y[0] ? -1 : x[0] > y[0] ? 1 : 0));
    if (out.some(([, n]) => n < 0n)) throw new Error("internal: a bucket count below zero on the split path");
    return out;
  }

  /**
   * Runs a dataset's statements alongside its source check (in place: the files are unchanged);
   * a failed check drops the results and refuses, whatever the statements returned.
   */
  private async checked(o: Opened, sts: readonly { sql: string; params: readonly SqlParam[] }[]): Promise<unknown[][][]> {
    const runs = Promise.all(sts.map((st) => this.query(st.sql, st.params)));
    if (o.check === undefined) return runs;
    const [rows] = await Promise.all([runs, o.check()]);
    // Checked again after the statements, so a change while they ran is not missed.
    await o.check();
    return rows;
  }

  /**
   * Runs one parameterized statement (bound to $1, $2, ...; `sql` is built only from internal
   * identifiers and placeholders). Public for tests and the bench's plain-SQL baselines.
   */
  async query(sql: string, params: readonly SqlParam[]): Promise<unknown[][]> {
    if (this.closed) throw new Error("engine is closed");
    return this.pool.query(sql, params);
  }

  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    this.pool.close();
    this.instance.closeSync();
    rmSync(this.temp, { recursive: true, force: true });
  }
}
