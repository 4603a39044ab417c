/**
 * Connecting to a dataset's PostgreSQL server: the policy's connection settings, the password
 * (only from a file or an environment variable, never from the policy text), the pool options,
 * and start errors in words that name the dataset and the problem and carry no data value.
 */
import { readFileSync } from "node:fs";
import { isAbsolute, resolve } from "node:path";
import type pg from "pg";
import { PolicyError } from "../../../errors.js";

/** `source: { postgres: {...} }` of a dataset (parsed by policy.ts). */
export interface PgSourceConfig {
  host: string;
  port: number;
  database: string;
  user: string;
  /** `table` or `schema.table` (a view is accepted too). */
  table: string;
  passwordFile?: string;
  passwordEnv?: string;
  sslmode?: "disable" | "prefer" | "require" | "verify-ca" | "verify-full";
}

/** Connections per dataset pool: a release runs one statement at a time, the pool bounds concurrency. */
export const POOL_SIZE = 4;

/** The password file may be at most this long (bytes); its first line is the password. */
const MAX_PASSWORD_FILE = 4096;

/** `schema.table` -> [schema, table]; a bare name is in `public`. Quoted names are not parsed: use plain identifiers. */
export function splitTable(name: string): [string, string] {
  const parts = name.split(".");
  if (parts.length === 1) return ["public", parts[0]];
  if (parts.length === 2 && parts[0] !== "" && parts[1] !== "") return [parts[0], parts[1]];
  throw new Error("table must be `name` or `schema.name`");
}

/** Reads the password from passwordFile (first line) or passwordEnv; errors name where, not what. */
export function readPassword(cfg: PgSourceConfig, where: string, baseDir: string): string | undefined {
  if (cfg.passwordFile !== undefined) {
    const file = isAbsolute(cfg.passwordFile) ? cfg.passwordFile : resolve(baseDir, cfg.passwordFile);
    let text: string;
    try {
      const buf = readFileSync(file);
      if (buf.length > MAX_PASSWORD_FILE) throw new PolicyError(`${where}.passwordFile: longer than ${MAX_PASSWORD_FILE} bytes`);
      text = buf.toString("utf8");
    } catch (e) {
      if (e instanceof PolicyError) throw e;
      const code = e instanceof Error && "code" in e ? String(e.code) : "error";
      throw new PolicyError(`${where}.passwordFile: cannot be read (${code})`);
    }
    const line = text.split(/\r?\n/)[0];
    if (line === "") throw new PolicyError(`${where}.passwordFile: the first line is empty`);
    return line;
  }
  if (cfg.passwordEnv !== undefined) {
    const v = process.env[cfg.passwordEnv];
    if (v === undefined || v === "") throw new PolicyError(`${where}.passwordEnv: environment variable ${cfg.passwordEnv} is not set`);
    return v;
  }
  return undefined;
}

/** node-postgres pool options for one dataset. statement_timeout follows the answering time limit. */
export function poolConfig(cfg: PgSourceConfig, password: string | undefined, timeLimitMs: number): pg.PoolConfig {
  // node-postgres cannot fall back from TLS to plain text, so `prefer` asks for TLS like `require`
  // (encrypted, certificate not checked); verify-ca and verify-full both check the certificate
  // chain and the host name (node's TLS checks the name whenever it checks the chain).
  const mode = cfg.sslmode ?? "disable";
  const ssl = mode === "disable" ? false : { rejectUnauthorized: mode === "verify-ca" || mode === "verify-full" };
  return {
    host: cfg.host,
    port: cfg.port,
    database: cfg.database,
    user: cfg.user,
    password,
    ssl,
    max: POOL_SIZE,
    idleTimeoutMillis: 60_000,
    connectionTimeoutMillis: 10_000,
    // A statement running past the release's time limit is cancelled by the server itself.
    statement_timeout: Math.max(1, Math.ceil(timeLimitMs)),
    application_name: "hush-curator",
    // Literals we write use standard quoting; the session is read-only; over a partitioned table
    // aggregates and joins are planned per partition, which is what lets postgres_fdw send an
    // aggregate grouped by the partition key to the shard that holds the partition.
    options:
      "-c standard_conforming_strings=on -c default_transaction_read_only=on " +
      "-c enable_partitionwise_aggregate=on -c enable_partitionwise_join=on",
  };
}

/**
 * A start error in words: which server problem, never the server's own message (which could
 * quote a value). `where` names the dataset's source in the policy.
 */
export function connectError(e: unknown, cfg: PgSourceConfig, where: string): PolicyError {
  const at = `${cfg.host}:${cfg.port}`;
  const code = e instanceof Error && "code" in e ? String((e as { code: unknown }).code) : "";
  switch (code) {
    case "ECONNREFUSED":
      return new PolicyError(`${where}: cannot reach the PostgreSQL server at ${at} (connection refused)`);
    case "ENOTFOUND":
    case "EAI_AGAIN":
      return new PolicyError(`${where}: cannot reach the PostgreSQL server at ${at} (host name not found)`);
    case "ETIMEDOUT":
    case "EHOSTUNREACH":
    case "ENETUNREACH":
      return new PolicyError(`${where}: cannot reach the PostgreSQL server at ${at} (${code})`);
    case "28P01":
    case "28000":
      return new PolicyError(`${where}: the PostgreSQL server at ${at} refused the credentials of user ${cfg.user}`);
    case "3D000":
      return new PolicyError(`${where}: the PostgreSQL server at ${at} has no database ${cfg.database}`);
    case "42P01":
      return new PolicyError(`${where}.table: no table or view ${cfg.table} in database ${cfg.database}`);
    case "42501":
      return new PolicyError(`${where}.table: user ${cfg.user} may not read ${cfg.table}`);
  }
  if (e instanceof Error && /timeout/i.test(e.message)) {
    return new PolicyError(`${where}: cannot reach the PostgreSQL server at ${at} (connection timed out)`);
  }
  if (e instanceof Error && /SSL/i.test(e.message)) {
    return new PolicyError(`${where}: TLS with the PostgreSQL server at ${at} failed (sslmode ${cfg.sslmode ?? "disable"})`);
  }
  return new PolicyError(`${where}: the PostgreSQL server at ${at} failed at start${code !== "" ? ` (SQLSTATE ${code})` : ""}`);
}
