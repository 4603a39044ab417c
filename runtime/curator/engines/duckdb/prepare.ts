/**
 * A DuckDB database file prepared once by the steward (`hush prepare`): the dataset's raw table in
 * the file is loaded, by the same steps as a load into memory (load.ts), into a table
 * hush."<table>" of the same file, with a row in hush.prepared that records what it was built
 * from (the declared columns and unit, tableKey). The curator then attaches the file read-only and
 * starts in seconds: DuckDB reads the prepared table from disk through its buffer manager, so
 * memory is bounded by the policy's memoryLimit, not by the data.
 *
 * The prepared table keeps the per-unit random order drawn at prepare time (from the CSPRNG); it
 * is fixed across curator restarts, which the bound does not need to change (the order is chosen
 * independently of the values either way). If the declaration changes, the curator refuses to
 * start until the file is prepared again.
 */
import { createHash } from "node:crypto";
import { existsSync } from "node:fs";
import { type DuckDBConnection, DuckDBInstance } from "@duckdb/node-api";
import { PolicyError } from "../../../errors.js";
import { Bits, cryptoBytes } from "../../../core/index.js";
import type { DatasetPolicy, LoadedPolicy } from "../../policy.js";
import type { LoadReport } from "../types.js";
import { quoteIdent, quoteString, tableKey } from "./columns.js";
import { loadTable } from "./load.js";

type DuckSource = Extract<DatasetPolicy["origin"], { kind: "duckdb" }>;

/** The raw table as a qualified name: "table" (schema main) or "schema.table". */
function rawTable(o: DuckSource, where: string): string {
  const parts = o.table.split(".");
  if (parts.length > 2 || parts.some((p) => p.length === 0)) throw new PolicyError(`${where}.source.table: must be table or schema.table`);
  return parts.length === 2 ? `${quoteIdent(parts[0])}.${quoteIdent(parts[1])}` : `main.${quoteIdent(parts[0])}`;
}

/** What the prepared table was built from: the declaration, not where the file lies. */
function preparedKey(d: DatasetPolicy, o: DuckSource): string {
  return tableKey({ ...d, source: o.table, format: "duckdb" });
}

/** Attaches a prepared file read-only; the FROM item of its prepared table and the report kept at prepare time. */
export async function attachPrepared(conn: DuckDBConnection, d: DatasetPolicy, o: DuckSource, index: number, where: string): Promise<{ from: string; report: LoadReport }> {
  if (!existsSync(o.path)) throw new PolicyError(`${where}.source.duckdb: file not found`);
  // One alias per file, so two datasets over one file share the attachment.
  const alias = quoteIdent(`p${createHash("sha256").update(o.path).digest("hex").slice(0, 16)}`);
  try {
    await conn.run(`ATTACH IF NOT EXISTS ${quoteString(o.path)} AS ${alias} (READ_ONLY)`);
  } catch (e) {
    throw new PolicyError(`${where}.source.duckdb: cannot be opened as a DuckDB database (${e instanceof Error ? e.message.split("\n")[0] : "error"})`);
  }
  const notPrepared = `${where}.source: table ${JSON.stringify(o.table)} has not been prepared for this declaration; run \`hush prepare --policy <file> --dataset ${d.name}\``;
  let rows: unknown[][];
  try {
    const stmt = await conn.prepare(`SELECT key, nrows, rejected, reasons FROM ${alias}.hush.prepared WHERE tbl = $1`);
    stmt.bindVarchar(1, o.table);
    rows = (await stmt.runAndReadAll()).getRows() as unknown[][];
    stmt.destroySync();
  } catch {
    throw new PolicyError(notPrepared);
  }
  if (rows.length !== 1) throw new PolicyError(notPrepared);
  const [key, nrows, rejected, reasons] = rows[0];
  if (key !== preparedKey(d, o)) {
    throw new PolicyError(`${where}.source: table ${JSON.stringify(o.table)} was prepared for another declaration (columns, ranges or unit changed); run \`hush prepare --policy <file> --dataset ${d.name}\` again`);
  }
  let parsed: Record<string, number> = {};
  try {
    parsed = JSON.parse(String(reasons)) as Record<string, number>;
  } catch {
    // The reasons are a steward's convenience; a damaged list is shown as empty.
  }
  const [, table] = o.table.includes(".") ? o.table.split(".") : [null, o.table];
  void index;
  return {
    from: `${alias}.hush.${quoteIdent(table ?? o.table)}`,
    report: { rows: Number(nrows), rejected: Number(rejected), reasons: parsed },
  };
}

/**
 * `hush prepare`: loads a duckdb-sourced dataset's raw table into its prepared table, in the same
 * file. Replaces an earlier preparation of the same table. Returns the load report.
 */
export async function prepareDataset(policy: LoadedPolicy, d: DatasetPolicy, bits: Bits = new Bits(cryptoBytes)): Promise<LoadReport> {
  const o = d.origin;
  const where = `policy ${policy.file}: datasets.${d.name}`;
  if (o.kind !== "duckdb") throw new PolicyError(`${where}.source: only a { duckdb: <file>, table: <name> } source is prepared`);
  if (!existsSync(o.path)) throw new PolicyError(`${where}.source.duckdb: file not found`);
  const raw = rawTable(o, where);
  const config: Record<string, string> = {};
  if (policy.engine.memoryLimit !== null) config.memory_limit = policy.engine.memoryLimit;
  if (policy.engine.threads !== null) config.threads = String(policy.engine.threads);
  const instance = await DuckDBInstance.create(o.path, config);
  try {
    const conn = await instance.connect();
    try {
      const [, name] = o.table.includes(".") ? o.table.split(".") : [null, o.table];
      const target = `hush.${quoteIdent(name ?? o.table)}`;
      await conn.run("CREATE SCHEMA IF NOT EXISTS hush");
      await conn.run("CREATE TABLE IF NOT EXISTS hush.prepared (tbl VARCHAR PRIMARY KEY, key VARCHAR, nrows BIGINT, rejected BIGINT, reasons VARCHAR)");
      await conn.run("BEGIN TRANSACTION");
      try {
        await conn.run(`DROP TABLE IF EXISTS ${target}`);
        const stmt0 = await conn.prepare("DELETE FROM hush.prepared WHERE tbl = $1");
        stmt0.bindVarchar(1, o.table);
        await stmt0.run();
        stmt0.destroySync();
        const report = await loadTable(conn, d, { kind: "table", from: raw }, target, 0, where, bits);
        const stmt = await conn.prepare("INSERT INTO hush.prepared VALUES ($1, $2, $3, $4, $5)");
        stmt.bindVarchar(1, o.table);
        stmt.bindVarchar(2, preparedKey(d, o));
        stmt.bindBigInt(3, BigInt(report.rows ?? 0));
        stmt.bindBigInt(4, BigInt(report.rejected));
        stmt.bindVarchar(5, JSON.stringify(report.reasons));
        await stmt.run();
        stmt.destroySync();
        await conn.run("COMMIT");
        return report;
      } catch (e) {
        await conn.run("ROLLBACK").catch(() => undefined);
        throw e;
      }
    } finally {
      conn.closeSync();
    }
  } finally {
    instance.closeSync();
  }
}
