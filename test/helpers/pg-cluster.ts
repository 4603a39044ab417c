/**
 * Throwaway PostgreSQL 15 clusters for tests and benchmarks: initdb + pg_ctl from Debian's
 * `postgresql` package (/usr/lib/postgresql/15/bin), a temp data directory, a free port on
 * 127.0.0.1 only, the unix socket inside the temp directory, and password (scram-sha-256) auth for
 * every connection. Nothing is shared with a system cluster (apt may start one on 5432; we never
 * use or touch it).
 *
 * initdb refuses to run as root, so under uid 0 initdb/pg_ctl run as Debian's `postgres` system
 * user (`runuser -u postgres --`) over a directory that user owns; otherwise as the current user.
 *
 * Every started cluster is stopped and removed by stop(), and also when the process exits (a
 * synchronous `pg_ctl stop -m immediate` from an exit hook), so a failing test leaves nothing behind.
 */
import { type SpawnSyncOptions, execFile, spawnSync } from "node:child_process";
import { chownSync, existsSync, mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { randomBytes } from "node:crypto";
import { createServer } from "node:net";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { promisify } from "node:util";
import pg from "pg";

const run = promisify(execFile);

export const PG_BIN = process.env.HUSH_PG_BIN ?? "/usr/lib/postgresql/15/bin";

/** True when the PostgreSQL binaries are installed (tests skip with a reason otherwise). */
export function havePostgres(): boolean {
  return existsSync(join(PG_BIN, "initdb")) && existsSync(join(PG_BIN, "pg_ctl"));
}

export interface PgCluster {
  host: "127.0.0.1";
  port: number;
  /** Temp directory holding data/, the socket and the log. */
  dir: string;
  /** Superuser (for setting up test data). */
  admin: { user: string; password: string };
  /** An admin client on database `postgres` (or `database`), closed by the caller. */
  connect(database?: string): Promise<pg.Client>;
  /** Runs SQL as the superuser on a database (default `postgres`) and returns the rows. */
  sql(text: string, params?: unknown[], database?: string): Promise<Record<string, unknown>[]>;
  stop(): Promise<void>;
}

const live = new Set<{ dir: string; data: string }>();
let hooked = false;

function asPostgres(): boolean {
  return typeof process.getuid === "function" && process.getuid() === 0;
}

function pgUid(): { uid: number; gid: number } {
  const r = spawnSync("id", ["-u", "postgres"], { encoding: "utf8" });
  const g = spawnSync("id", ["-g", "postgres"], { encoding: "utf8" });
  if (r.status !== 0 || g.status !== 0) throw new Error("running as root, but there is no `postgres` system user to run initdb as");
  return { uid: Number(r.stdout.trim()), gid: Number(g.stdout.trim()) };
}

/** argv for a PostgreSQL binary, wrapped in runuser when we are root. */
function cmd(bin: string, args: string[]): [string, string[]] {
  const path = join(PG_BIN, bin);
  return asPostgres() ? ["runuser", ["-u", "postgres", "--", path, ...args]] : [path, args];
}

function stopSync(c: { dir: string; data: string }): void {
  const [file, args] = cmd("pg_ctl", ["-D", c.data, "-m", "immediate", "-w", "stop"]);
  const opts: SpawnSyncOptions = { stdio: "ignore", timeout: 20_000 };
  if (existsSync(join(c.data, "postmaster.pid"))) spawnSync(file, args, opts);
  rmSync(c.dir, { recursive: true, force: true });
}

function hookExit(): void {
  if (hooked) return;
  hooked = true;
  process.on("exit", () => {
    for (const c of live) stopSync(c);
    live.clear();
  });
  for (const sig of ["SIGINT", "SIGTERM"] as const) {
    process.once(sig, () => {
      for (const c of live) stopSync(c);
      live.clear();
      process.exit(130);
    });
  }
}

/** A port that was free a moment ago on 127.0.0.1 (start retries on a collision). */
async function freePort(): Promise<number> {
  return await new Promise((resolve, reject) => {
    const s = createServer();
    s.once("error", reject);
    s.listen(0, "127.0.0.1", () => {
      const a = s.address();
      const port = typeof a === "object" && a !== null ? a.port : 0;
      s.close(() => resolve(port));
    });
  });
}

export interface ClusterOptions {
  /** Extra postgresql.conf lines. */
  conf?: string[];
}

/** Starts a fresh cluster; see the file header. */
export async function startCluster(opts: ClusterOptions = {}): Promise<PgCluster> {
  hookExit();
  const dir = mkdtempSync(join(tmpdir(), "hush-pg-"));
  const data = join(dir, "data");
  const entry = { dir, data };
  live.add(entry);
  const admin = { user: "hush_admin", password: `pw-${randomBytes(12).toString("hex")}` };
  try {
    const pwfile = join(dir, "pwfile");
    writeFileSync(pwfile, `${admin.password}\n`, { mode: 0o600 });
    if (asPostgres()) {
      const { uid, gid } = pgUid();
      chownSync(dir, uid, gid);
      chownSync(pwfile, uid, gid);
    }
    const [f, a] = cmd("initdb", [
      "-D", data, "-U", admin.user, `--pwfile=${pwfile}`, "--auth=scram-sha-256", "-E", "UTF8", "--locale=C", "--no-sync",
    ]);
    await run(f, a, { timeout: 120_000 });
    let port = 0;
    let lastErr: unknown;
    for (let attempt = 0; attempt < 5; attempt++) {
      port = await freePort();
      const conf = [
        "listen_addresses = '127.0.0.1'",
        `port = ${port}`,
        `unix_socket_directories = '${dir}'`,
        "fsync = off",
        "synchronous_commit = off",
        "full_page_writes = off",
        "max_connections = 40",
        "shared_buffers = 64MB",
        "log_min_messages = warning",
        ...(opts.conf ?? []),
      ];
      writeFileSync(join(data, "postgresql.auto.conf"), `${conf.join("\n")}\n`);
      if (asPostgres()) {
        const { uid, gid } = pgUid();
        chownSync(join(data, "postgresql.auto.conf"), uid, gid);
      }
      const [sf, sa] = cmd("pg_ctl", ["-D", data, "-l", join(dir, "log"), "-w", "-t", "60", "start"]);
      try {
        await run(sf, sa, { timeout: 90_000 });
        lastErr = undefined;
        break;
      } catch (e) {
        lastErr = e;
      }
    }
    if (lastErr !== undefined) throw lastErr;
    const connect = async (database = "postgres") => {
      const c = new pg.Client({ host: "127.0.0.1", port, user: admin.user, password: admin.password, database });
      await c.connect();
      return c;
    };
    return {
      host: "127.0.0.1",
      port,
      dir,
      admin,
      connect,
      async sql(text, params = [], database = "postgres") {
        const c = await connect(database);
        try {
          return (await c.query(text, params)).rows as Record<string, unknown>[];
        } finally {
          await c.end();
        }
      },
      async stop() {
        if (!live.has(entry)) return;
        live.delete(entry);
        const [pf, pa] = cmd("pg_ctl", ["-D", data, "-m", "fast", "-w", "stop"]);
        await run(pf, pa, { timeout: 60_000 }).catch(() => undefined);
        rmSync(dir, { recursive: true, force: true });
      },
    };
  } catch (e) {
    live.delete(entry);
    stopSync(entry);
    throw e;
  }
}

/** A read-only role for the curator, with a scram password, that may read `tables` (schema public). */
export async function createReader(c: PgCluster, user = "hush_reader"): Promise<{ user: string; password: string }> {
  const password = `rd-${randomBytes(12).toString("hex")}`;
  // Identifiers and the password are ours (hex), so plain interpolation is safe here.
  await c.sql(`CREATE ROLE ${user} LOGIN PASSWORD '${password}'`);
  await c.sql(`GRANT SELECT ON ALL TABLES IN SCHEMA public TO ${user}`);
  await c.sql(`ALTER DEFAULT PRIVILEGES IN SCHEMA public GRANT SELECT ON TABLES TO ${user}`);
  return { user, password };
}

export interface ShardedSet {
  coordinator: PgCluster;
  shards: PgCluster[];
  reader: { user: string; password: string };
  stop(): Promise<void>;
}

/**
 * A coordinator and `n` shard clusters wired with postgres_fdw: one foreign server per shard
 * (use_remote_estimate, fetch_size, batch_size, async_capable), and user mappings for the admin
 * and for a reader role created on every cluster. `createSharded` then makes a hash-partitioned
 * table whose partitions are foreign tables, one per shard.
 */
export async function startShardedSet(n: number, opts: ClusterOptions = {}): Promise<ShardedSet> {
  const started: PgCluster[] = [];
  try {
    for (let i = 0; i <= n; i++) started.push(await startCluster(opts));
    const [coordinator, ...shards] = started;
    const reader = await createReader(coordinator);
    await coordinator.sql("CREATE EXTENSION postgres_fdw");
    for (const [i, s] of shards.entries()) {
      await s.sql(`CREATE ROLE ${reader.user} LOGIN PASSWORD '${reader.password}'`);
      await s.sql(`ALTER DEFAULT PRIVILEGES IN SCHEMA public GRANT SELECT ON TABLES TO ${reader.user}`);
      await coordinator.sql(
        `CREATE SERVER shard${i} FOREIGN DATA WRAPPER postgres_fdw OPTIONS (host '127.0.0.1', port '${s.port}', dbname 'postgres', ` +
          `use_remote_estimate 'true', fetch_size '50000', batch_size '1000', async_capable 'true')`,
      );
      await coordinator.sql(`CREATE USER MAPPING FOR ${coordinator.admin.user} SERVER shard${i} OPTIONS (user '${s.admin.user}', password '${s.admin.password}')`);
      await coordinator.sql(`CREATE USER MAPPING FOR ${reader.user} SERVER shard${i} OPTIONS (user '${reader.user}', password '${reader.password}')`);
      await coordinator.sql(`GRANT USAGE ON FOREIGN SERVER shard${i} TO ${reader.user}`);
    }
    return {
      coordinator,
      shards,
      reader,
      async stop() {
        await Promise.all(started.map((c) => c.stop()));
      },
    };
  } catch (e) {
    await Promise.all(started.map((c) => c.stop()));
    throw e;
  }
}

/**
 * On every shard, `CREATE TABLE <name>_p<i> (<columns>)`; on the coordinator, `<name>` partitioned
 * by `partitionBy` (e.g. "HASH (patient)") with one foreign partition per shard.
 */
export async function createSharded(set: ShardedSet, name: string, columns: string, partitionBy: string): Promise<void> {
  const n = set.shards.length;
  await set.coordinator.sql(`CREATE TABLE ${name} (${columns}) PARTITION BY ${partitionBy}`);
  for (const [i, s] of set.shards.entries()) {
    await s.sql(`CREATE TABLE ${name}_p${i} (${columns})`);
    const bound = partitionBy.startsWith("HASH") ? `FOR VALUES WITH (MODULUS ${n}, REMAINDER ${i})` : "DEFAULT";
    if (bound === "DEFAULT" && i > 0) continue;
    await set.coordinator.sql(`CREATE FOREIGN TABLE ${name}_p${i} PARTITION OF ${name} ${bound} SERVER shard${i} OPTIONS (table_name '${name}_p${i}')`);
  }
  await set.coordinator.sql(`GRANT SELECT ON ${name} TO ${set.reader.user}`);
}
