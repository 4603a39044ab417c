/**
 * DuckDB connections kept for reuse, each with its prepared statements. A fresh DuckDB connection
 * costs milliseconds on its first statement, and every plan of one shape has the same SQL text
 * (all values are bound), so DuckDB parses and plans it once per connection, not per release.
 */
import type { DuckDBConnection, DuckDBInstance, DuckDBPreparedStatement } from "@duckdb/node-api";
import type { SqlParam } from "../types.js";

/** Idle connections kept for reuse. */
const MAX_IDLE = 4;
/** Prepared statements kept per connection (least recently used dropped first). */
const MAX_STATEMENTS = 64;

interface PooledConnection {
  conn: DuckDBConnection;
  statements: Map<string, DuckDBPreparedStatement>;
}

function closePooled(p: PooledConnection): void {
  for (const s of p.statements.values()) s.destroySync();
  p.statements.clear();
  p.conn.closeSync();
}

export function bindAll(stmt: DuckDBPreparedStatement, params: readonly SqlParam[]): void {
  params.forEach((p, i) => {
    const at = i + 1;
    switch (p.type) {
      case "bigint":
        stmt.bindBigInt(at, p.value);
        break;
      case "integer":
        stmt.bindInteger(at, p.value);
        break;
      case "varchar":
        stmt.bindVarchar(at, p.value);
        break;
      case "boolean":
        stmt.bindBoolean(at, p.value);
        break;
    }
  });
}

export class ConnectionPool {
  private readonly idle: PooledConnection[] = [];
  private closed = false;

  constructor(private readonly instance: DuckDBInstance) {}

  /**
   * Runs one parameterized statement and returns all rows. Every value comes in through `params`
   * (bound to $1, $2, ...); `sql` is built only from internal identifiers and placeholders.
   */
  async query(sql: string, params: readonly SqlParam[]): Promise<unknown[][]> {
    if (this.closed) throw new Error("engine is closed");
    const pooled = this.idle.pop() ?? { conn: await this.instance.connect(), statements: new Map<string, DuckDBPreparedStatement>() };
    let healthy = false;
    try {
      let stmt = pooled.statements.get(sql);
      if (stmt === undefined) {
        stmt = await pooled.conn.prepare(sql);
        if (pooled.statements.size >= MAX_STATEMENTS) {
          const [oldest, old] = pooled.statements.entries().next().value!;
          pooled.statements.delete(oldest);
          old.destroySync();
        }
      } else {
        pooled.statements.delete(sql); // re-inserted below: Map order is least recently used first
      }
      pooled.statements.set(sql, stmt);
      stmt.clearBindings();
      bindAll(stmt, params);
      const reader = await stmt.runAndReadAll();
      healthy = true;
      return reader.getRows() as unknown[][];
    } finally {
      if (healthy && !this.closed && this.idle.length < MAX_IDLE) this.idle.push(pooled);
      else closePooled(pooled);
    }
  }

  close(): void {
    this.closed = true;
    for (const c of this.idle.splice(0)) closePooled(c);
  }
}
