/**
 * The PostgreSQL engine: datasets whose rows live in a PostgreSQL table or view, on one server or
 * hash-partitioned on the privacy unit across servers (postgres_fdw foreign partitions). Nothing is
 * copied: every row-level step (typing, clamping, grid rounding, category index, per-unit
 * bounding, the filter flag, grouping) runs as parameterised SQL in PostgreSQL (relation.ts), and
 * only aggregates come back, as exact integers (int8 and numeric arrive as text and become bigint,
 * never a float). The curator still draws the noise, keeps the ledger and signs.
 *
 * Connections: one pool of at most POOL_SIZE connections per server/database/user, shared by the
 * datasets that use it; every session is read-only, has standard_conforming_strings on,
 * partitionwise aggregation and joins on (so a sharded table's aggregates go to its shards), and a
 * statement_timeout equal to the policy's answering time limit: a statement still running when
 * the release runs out of time is cancelled by the server, never left to finish.
 *
 * Start: checks.ts (reachability, credentials, the relation, declared types, partitioning); the
 * per-unit rank seed is drawn from the CSPRNG here and never leaves the curator and the server.
 */
import pg from "pg";
import { Bits, cryptoBytes } from "../../../core/index.js";
import { PolicyError, UnknownDatasetError } from "../../../errors.js";
import type { DatasetPolicy, LoadedPolicy } from "../../policy.js";
import { compileGroup, compileWhere, type Dialect, Params } from "../../sql.js";
import { type TermDialect, cellsFromRows, termSql as sharedTermSql, toBigInt } from "../shapes.js";
import {
  type BucketsRequest,
  type CellTerm,
  type CellsRequest,
  type DataEngine,
  type DatasetSchema,
  type LoadReport,
  type OpenOptions,
  type SchemaColumn,
  schemaOf,
} from "../types.js";
import { type CheckedSource, checkSource } from "./checks.js";
import { type PgSourceConfig, connectError, poolConfig, readPassword } from "./connection.js";
import { type SourceShape, categoryIndex, flaggedFrom, onGrid, unitCounts } from "./relation.js";
import { BadInputError } from "../../../errors.js";

/**
 * Date literals: sql.ts writes CAST($n AS DATE) over a text placeholder; PostgreSQL takes the
 * parameter as a date directly, which postgres_fdw can send to a shard (a text-to-date cast it
 * does not send). Only our own placeholders match, never a value (values are parameters).
 */
function dateParams(sql: string): string {
  return sql.replace(/CAST\((\$\d+)::text AS DATE\)/g, "$1::date");
}

/** Most quantile candidates a buckets request may list (quantile.ts asks at most 2001). */
const MAX_BUCKETS = 100_000;

/** PostgreSQL: typed placeholders (node-postgres sends text), `/` is integer division on bigint. */
export const PG_DIALECT: Dialect = {
  placeholder: (n, type) => `$${n}::${type === "bigint" ? "bigint" : type === "integer" ? "integer" : type === "varchar" ? "text" : "boolean"}`,
  intDiv: (a, b) => `((${a}) / (${b}))`,
};

interface Opened {
  schema: DatasetSchema;
  shape: SourceShape;
  pool: pg.Pool;
  report: LoadReport;
  /** How the data is reached, in words (steward-only). */
  access: string;
}

/** The PostgreSQL source of a dataset policy, or null when the dataset lives elsewhere. */
export function pgSourceOf(d: DatasetPolicy): PgSourceConfig | null {
  const o = d.origin;
  if (o.kind !== "postgres") return null;
  return {
    host: o.host,
    port: o.port,
    database: o.database,
    user: o.user,
    table: `${o.schema}.${o.table}`,
    passwordFile: o.passwordFile ?? undefined,
    passwordEnv: o.passwordEnv ?? undefined,
    sslmode: o.sslmode ?? undefined,
  };
}

function numericColumn(t: DatasetSchema, name: string, path: string): SchemaColumn {
  const c = t.columns.get(name);
  if (c === undefined || (c.policy.type !== "integer" && c.policy.type !== "number")) {
    throw new BadInputError(`${path}: ${JSON.stringify(name.slice(0, 40))} is not a numeric column of dataset ${t.dataset.name}`);
  }
  return c;
}

/**
 * PostgreSQL's terms: the shared SQL of engines/shapes.ts, with numeric for exact products and a
 * numeric column's presence read from p<i> (relation.ts), which is present exactly when c<i> is,
 * without rounding.
 */
const PG_TERMS: TermDialect = {
  wide: "numeric",
  presentIdent: (c) => (c.policy.type === "integer" || c.policy.type === "number" ? `"p${c.index}"` : c.ident),
};

/**
 * One term's aggregate, the relation columns it reads, and a whole multiplier applied after the
 * aggregate (and its FILTER). A sum over a column stored on its grid (relation.ts onGrid) adds the
 * clamped values in the column's own units, as PostgreSQL stores them, and scales once: the same
 * exact integer as the sum of grid units, without rounding and casting every row.
 */
function termSql(t: DatasetSchema, shape: SourceShape, term: CellTerm, i: number): { agg: string; cols: string[]; times?: bigint } {
  if (term.kind === "sum") {
    const c = numericColumn(t, term.column, `terms[${i}].column`);
    const pow = onGrid(shape.columns[c.index]);
    if (pow !== null) return { agg: `sum(v${c.index})`, cols: [`v${c.index}`], times: pow };
  }
  return sharedTermSql(t, term, i, PG_TERMS);
}

/**
 * An aggregate as PostgreSQL returns it: int8 and numeric arrive as text. A sum scaled by
 * onGrid's power of ten keeps the column's scale ("1234.00"); any digit after the point other
 * than zero would be a fault, never rounded away.
 */
export function pgBigInt(v: unknown): bigint {
  if (typeof v === "string") {
    const m = /^(-?[0-9]{1,40})\.0{1,1000}$/.exec(v);
    if (m !== null) return BigInt(m[1]);
  }
  return toBigInt(v);
}

export class PostgresEngine implements DataEngine {
  private readonly opened = new Map<string, Opened>();
  private readonly pools = new Map<string, pg.Pool>();
  private closed = false;

  private constructor() {}

  /** Opens (and checks) every PostgreSQL dataset given; closes what it opened on any failure. */
  static async open(policy: LoadedPolicy, opts: OpenOptions & { datasets: readonly DatasetPolicy[] }): Promise<PostgresEngine> {
    const engine = new PostgresEngine();
    const bits = opts.bits ?? new Bits(cryptoBytes);
    try {
      for (const d of opts.datasets) await engine.openOne(policy, d, bits, opts.quiet === true);
    } catch (e) {
      await engine.close();
      throw e;
    }
    return engine;
  }

  private async openOne(policy: LoadedPolicy, d: DatasetPolicy, bits: Bits, quiet: boolean): Promise<void> {
    const cfg = pgSourceOf(d);
    const where = `policy ${policy.file}: datasets.${d.name}.source.postgres`;
    if (cfg === null) throw new PolicyError(`policy ${policy.file}: datasets.${d.name}: not a PostgreSQL source`);
    const password = readPassword(cfg, where, policy.dir);
    const key = JSON.stringify([cfg.host, cfg.port, cfg.database, cfg.user, password ?? null, cfg.sslmode ?? null]);
    let pool = this.pools.get(key);
    if (pool === undefined) {
      pool = new pg.Pool(poolConfig(cfg, password, policy.answering.timeLimitMs));
      // An idle connection that drops (server restart) must not crash the curator; the next query reconnects.
      pool.on("error", () => undefined);
      this.pools.set(key, pool);
    }
    let client: pg.PoolClient;
    try {
      client = await pool.connect();
    } catch (e) {
      throw connectError(e, cfg, where);
    }
    let checked: CheckedSource;
    try {
      // A signed 64-bit seed for hashtextextended.
      const seed = bits.uniformInt(1n << 64n) - (1n << 63n);
      checked = await checkSource(client, d, cfg, where, seed);
    } finally {
      client.release();
    }
    const access =
      checked.partitions > 0
        ? `PostgreSQL ${cfg.host}:${cfg.port}/${cfg.database} ${cfg.table}, hash-partitioned in ${checked.partitions} partitions (${checked.foreign} foreign)`
        : `PostgreSQL ${cfg.host}:${cfg.port}/${cfg.database} ${cfg.table}`;
    this.opened.set(d.name, { schema: schemaOf(d), shape: checked.shape, pool, report: { rows: null, rejected: 0, reasons: {} }, access });
    if (!quiet) process.stderr.write(`hush curator: dataset ${d.name}: ${access}; values that do not fit the schema are missing at query time\n`);
  }

  private get(dataset: string): Opened {
    if (this.closed) throw new Error("engine is closed");
    const o = this.opened.get(dataset);
    if (o === undefined) throw new UnknownDatasetError(`dataset ${JSON.stringify(dataset.slice(0, 64))} is not loaded`);
    return o;
  }

  hasDataset(dataset: string): boolean {
    return this.opened.has(dataset);
  }

  /** Steward-only: how a dataset's data is reached (server, table, partitions). */
  access(dataset: string): string {
    return this.get(dataset).access;
  }

  loadReport(dataset: string): LoadReport {
    const r = this.get(dataset).report;
    return { ...r, reasons: { ...r.reasons } };
  }

  /** The SQL and parameters of a cells request (exported for tests and EXPLAIN). */
  cellsStatement(req: CellsRequest): { sql: string; params: unknown[]; sizes: number[] } {
    const o = this.get(req.dataset);
    const t = o.schema;
    const ps = new Params(PG_DIALECT);
    const where = req.where === undefined ? "TRUE" : compileWhere(req.where, t, ps);
    const groups = req.keys.map((k, i) => compileGroup(k, t, ps, `plan.groupBy[${i}]`));
    const parts = req.terms.map((term, i) => termSql(t, o.shape, term, i));
    if (groups.length === 0 && parts.length > 0 && req.terms.every((x) => x.kind === "count") && o.shape.dataset.unit.column !== null) {
      // Ungrouped counts: sum over units of min(matching rows, k), the kept count whichever k rows a
      // window would keep. Grouped by the unit (the partition key of a sharded table), so
      // PostgreSQL aggregates per partition and postgres_fdw runs that aggregate on the shards.
      const per = unitCounts(o.shape, where, ps);
      return { sql: dateParams(`SELECT ${parts.map(() => "sum(__n)").join(", ")} FROM ${per}`), params: ps.values().map((p) => String(p.value)), sizes: [] };
    }
    // A category key is grouped on its stored value first, then mapped to its declared index in a
    // second, small aggregate: hashing the stored value is cheaper than running the CASE of the
    // declared list over every row. Every term is a count or a sum, so the second level adds up.
    const raw = req.keys.map((k, i) => {
      const c = t.columns.get(k.column);
      return c !== undefined && c.policy.type === "category" && groups[i].ident === c.ident ? c.index : null;
    });
    // The kept relation carries what the aggregates read: a category key's stored value (r<i>), not
    // its index, which a window subquery would otherwise compute for every row.
    const read = [...groups.flatMap((g, i) => (raw[i] === null ? [g.ident] : [`r${raw[i]}`])), ...parts.flatMap((p) => p.cols)];
    const from = flaggedFrom(o.shape, where, read, ps);
    const flagged = where !== "TRUE" || o.shape.dataset.unit.column !== null;
    const inner = parts.map((p) => (flagged ? `${p.agg} FILTER (WHERE __m)` : p.agg));
    const scaled = (a: string, j: number) => (parts[j].times === undefined ? a : `(${a}) * ${parts[j].times}`);
    let sql: string;
    if (groups.length === 0) sql = `SELECT ${inner.map(scaled).join(", ")} FROM ${from}`;
    else if (raw.every((r) => r === null)) {
      const keySel = groups.map((g, i) => `${g.expr} AS __g${i}`).join(", ");
      sql = `SELECT ${keySel}, ${inner.map(scaled).join(", ")} FROM ${from} GROUP BY ${groups.map((_, i) => String(i + 1)).join(", ")}`;
    } else {
      const byPlace = groups.map((_, i) => String(i + 1)).join(", ");
      const keySel = groups.map((g, i) => `${raw[i] === null ? g.expr : `r${raw[i]}`} AS __k${i}`).join(", ");
      const first = `SELECT ${keySel}, ${inner.map((a, j) => `${a} AS __a${j}`).join(", ")} FROM ${from} GROUP BY ${byPlace}`;
      const outerKeys = groups.map((_, i) => `${raw[i] === null ? `__i.__k${i}` : categoryIndex(o.shape.columns[raw[i]!], `__i.__k${i}`)} AS __g${i}`);
      sql = `SELECT ${outerKeys.join(", ")}, ${parts.map((_, j) => scaled(`sum(__i.__a${j})`, j)).join(", ")} FROM (${first}) AS __i GROUP BY ${byPlace}`;
    }
    return { sql: dateParams(sql), params: ps.values().map((p) => String(p.value)), sizes: groups.map((g) => g.labels.length) };
  }

  async cells(req: CellsRequest): Promise<bigint[][]> {
    const { sql, params, sizes } = this.cellsStatement(req);
    const rows = await this.run(req.dataset, sql, params);
    return cellsFromRows(rows, sizes, req.terms.length, pgBigInt);
  }

  /** The SQL and parameters of a buckets request. */
  bucketsStatement(req: BucketsRequest): { sql: string; params: unknown[] } {
    const o = this.get(req.dataset);
    const t = o.schema;
    const ps = new Params(PG_DIALECT);
    const where = req.where === undefined ? "TRUE" : compileWhere(req.where, t, ps);
    const id = numericColumn(t, req.column, "column").ident;
    const from = flaggedFrom(o.shape, where, [id], ps);
    const flagged = where !== "TRUE" || o.shape.dataset.unit.column !== null;
    // b(x) = number of candidates <= x: width_bucket over the sorted candidate list (a binary
    // search; NULL for a missing value), reading the column once per row.
    if (req.count < 1n || req.count > BigInt(MAX_BUCKETS)) throw new BadInputError(`column: ${req.count} quantile candidates, above the engine's limit of ${MAX_BUCKETS}`);
    const cand: bigint[] = [];
    for (let j = 0n; j < req.count - 1n; j++) cand.push(req.lowerUnits + j * req.stride);
    cand.push(req.upperUnits);
    const list = ps.add({ type: "varchar", value: `{${cand.join(",")}}` }).replace(/::text$/, "::bigint[]");
    const b = `width_bucket(${id}, ${list})`;
    const sql = `SELECT ${b} AS __b, count(*)${flagged ? " FILTER (WHERE __m)" : ""} FROM ${from} GROUP BY 1 ORDER BY 1`;
    return { sql: dateParams(sql), params: ps.values().map((p) => String(p.value)) };
  }

  async buckets(req: BucketsRequest): Promise<[bigint, bigint][]> {
    const { sql, params } = this.bucketsStatement(req);
    const rows = await this.run(req.dataset, sql, params);
    return rows.filter((r) => r[0] !== null).map((r) => [toBigInt(r[0]), toBigInt(r[1])]);
  }

  /**
   * Runs one statement on a pooled connection and returns its rows as arrays. A failure is
   * reported in words without the server's message (which could quote a value).
   */
  private async run(dataset: string, sql: string, params: unknown[]): Promise<unknown[][]> {
    const o = this.get(dataset);
    try {
      const r = await o.pool.query({ text: sql, values: params, rowMode: "array" });
      return r.rows as unknown[][];
    } catch (e) {
      const code = e instanceof Error && "code" in e ? String((e as { code: unknown }).code) : "";
      if (code === "57014") throw new Error(`dataset ${dataset}: PostgreSQL cancelled the statement at the answering time limit`);
      throw new Error(`dataset ${dataset}: the PostgreSQL statement failed${code !== "" ? ` (SQLSTATE ${code})` : ""}`);
    }
  }

  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    const pools = [...this.pools.values()];
    this.pools.clear();
    await Promise.all(pools.map((p) => p.end().catch(() => undefined)));
  }
}

/** EngineOpener for engines/open.ts. */
export async function openPostgres(policy: LoadedPolicy, opts: OpenOptions & { datasets: readonly DatasetPolicy[] }): Promise<DataEngine> {
  return await PostgresEngine.open(policy, opts);
}
