/**
 * Start checks of a PostgreSQL source, run as the configured user before the curator answers
 * anything. Each failure is a PolicyError naming the dataset and the problem; the checks read
 * catalog rows only (names and types), never a data value.
 *
 *   - the relation exists and the user may read it (pg_class, has_table_privilege)
 *   - every declared column and the unit column exist, with a PostgreSQL type that fits the
 *     declared type (pg_attribute; a domain as its base type):
 *       integer / number -> smallint, integer, bigint, numeric, real, double precision
 *       category         -> text, varchar, char, an enum type, or an integer type (compared as text)
 *       date             -> date;   boolean -> boolean;   unit column -> any type
 *   - a partitioned table (relkind p): with a unit column, it must be HASH-partitioned on exactly
 *     the unit column (pg_partitioned_table, pg_get_partkeydef), so that every unit's rows sit in
 *     one partition and the per-unit window can run per partition; every partition must be a leaf
 *     (a plain or foreign table), not partitioned again
 *   - a plain table with inheritance children is refused (its rows' ctids would not be unique)
 *   - the scale of each numeric(p, s) column, trusted only where PostgreSQL stores the rows
 *     itself (a plain table, a materialized view, a partitioned table without foreign
 *     partitions): relation.ts then sums values on the declared grid without rounding each row
 *   - the full source expression plans and runs on zero rows (catches anything the type map missed)
 *
 * What the curator CANNOT check (the steward's responsibility, stated in DEVELOPERS.md): that the
 * remote tables behind foreign partitions hold only their partition's rows (postgres_fdw does not
 * enforce the partition bound on remote data), that the shards are consistent with each other and
 * do not change while the curator runs, and that a view's definition means what the policy says.
 */
import type pg from "pg";
import { PolicyError } from "../../../errors.js";
import type { DatasetPolicy } from "../../policy.js";
import { type PgSourceConfig, connectError, splitTable } from "./connection.js";
import { type PgKind, type SourceColumn, type SourceShape, quoteIdent, sourceSelect } from "./relation.js";

const KINDS: Record<string, PgKind> = {
  smallint: "int",
  integer: "int",
  bigint: "int",
  numeric: "numeric",
  real: "float",
  "double precision": "float",
  text: "text",
  "character varying": "text",
  character: "text",
  date: "date",
  boolean: "boolean",
};

const FITS: Record<DatasetPolicy["columns"][number]["type"], PgKind[]> = {
  integer: ["int", "numeric", "float"],
  number: ["int", "numeric", "float"],
  category: ["text", "enum", "int"],
  date: ["date"],
  boolean: ["boolean"],
};

export interface CheckedSource {
  shape: SourceShape;
  /** Partition count of a partitioned source (0 otherwise) and how many are foreign tables. */
  partitions: number;
  foreign: number;
}

/** Runs every start check over one connection; returns the shape queries are built from. */
export async function checkSource(
  client: pg.PoolClient,
  d: DatasetPolicy,
  cfg: PgSourceConfig,
  where: string,
  seed: bigint,
): Promise<CheckedSource> {
  let schema: string;
  let name: string;
  try {
    [schema, name] = splitTable(cfg.table);
  } catch {
    throw new PolicyError(`${where}.table: must be \`name\` or \`schema.name\``);
  }
  const q = async (text: string, params: unknown[]) => {
    try {
      return (await client.query(text, params)).rows as Record<string, unknown>[];
    } catch (e) {
      throw connectError(e, cfg, where);
    }
  };
  const rel = await q(
    `SELECT c.oid::bigint AS oid, c.relkind::text AS kind, has_table_privilege(c.oid, 'SELECT') AS readable,
            EXISTS (SELECT 1 FROM pg_inherits i WHERE i.inhparent = c.oid) AS children
       FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace
      WHERE n.nspname = $1 AND c.relname = $2`,
    [schema, name],
  );
  if (rel.length === 0) throw new PolicyError(`${where}.table: no table or view ${cfg.table} in database ${cfg.database}`);
  const kind = String(rel[0].kind);
  if (!["r", "p", "f", "v", "m"].includes(kind)) throw new PolicyError(`${where}.table: ${cfg.table} is not a table or view`);
  if (rel[0].readable !== true) throw new PolicyError(`${where}.table: user ${cfg.user} may not read ${cfg.table}`);
  const oid = String(rel[0].oid);

  // pg_attribute rather than information_schema.columns, which leaves out materialized views. A
  // domain reads as its base type and typmod; a numeric typmod holds (precision << 16 | scale) + 4,
  // the scale in the low bits (a negative scale reads as a large number: no on-grid sum, see
  // relation.ts onGrid).
  const cols = await q(
    `SELECT a.attname::text AS name, format_type(b.oid, NULL) AS type, b.typtype::text AS typtype,
            CASE WHEN b.oid = 'numeric'::regtype AND m.typmod >= 4 THEN (m.typmod - 4) & 65535 END AS scale
       FROM pg_attribute a
       JOIN pg_type t ON t.oid = a.atttypid
      CROSS JOIN LATERAL (SELECT CASE WHEN t.typtype = 'd' THEN t.typbasetype ELSE t.oid END AS base,
                                 CASE WHEN t.typtype = 'd' THEN t.typtypmod ELSE a.atttypmod END AS typmod) m
       JOIN pg_type b ON b.oid = m.base
      WHERE a.attrelid = $1::bigint::oid AND a.attnum > 0 AND NOT a.attisdropped`,
    [oid],
  );
  const types = new Map<string, PgKind | null>();
  for (const c of cols) {
    const t = String(c.type);
    types.set(String(c.name), KINDS[t] ?? (c.typtype === "e" ? "enum" : null));
  }
  const columns: SourceColumn[] = d.columns.map((c) => {
    if (!types.has(c.from)) throw new PolicyError(`${where}: ${cfg.table} has no column ${JSON.stringify(c.from)} (declared as column ${c.name})`);
    const k = types.get(c.from) ?? null;
    const row = cols.find((x) => x.name === c.from)!;
    if (k === null || !FITS[c.type].includes(k)) {
      throw new PolicyError(
        `${where}: column ${JSON.stringify(c.from)} of ${cfg.table} has PostgreSQL type ${String(row.type)}, which does not fit declared type ${c.type} of column ${c.name}`,
      );
    }
    const scale = k === "numeric" && typeof row.scale === "number" ? row.scale : null;
    return { policy: c, kind: k, scale };
  });
  const unit = d.unit.column;
  if (unit !== null && !types.has(unit)) throw new PolicyError(`${where}: ${cfg.table} has no column ${JSON.stringify(unit)} (the privacy unit column)`);

  let partitions = 0;
  let foreign = 0;
  if (kind === "p") {
    const part = await q(
      `SELECT p.partstrat::text AS strat, p.partnatts::int AS natts, pg_get_partkeydef(p.partrelid) AS keydef,
              (SELECT a.attname::text FROM pg_attribute a WHERE a.attrelid = p.partrelid AND a.attnum = p.partattrs[0]) AS keycol
         FROM pg_partitioned_table p WHERE p.partrelid = $1::bigint::oid`,
      [oid],
    );
    if (unit !== null) {
      const p = part[0];
      if (p === undefined || p.strat !== "h" || p.natts !== 1 || p.keycol !== unit) {
        const keydef = p === undefined ? "unknown" : String(p.keydef);
        throw new PolicyError(
          `${where}.table: ${cfg.table} is partitioned by ${keydef}, but a partitioned source must be partitioned by HASH on exactly the privacy unit column ${unit}, so that every unit's rows sit in one partition`,
        );
      }
    }
    const leaves = await q(
      `SELECT c.relkind::text AS kind FROM pg_inherits i JOIN pg_class c ON c.oid = i.inhrelid WHERE i.inhparent = $1::bigint::oid`,
      [oid],
    );
    for (const l of leaves) {
      if (l.kind !== "r" && l.kind !== "f") throw new PolicyError(`${where}.table: a partition of ${cfg.table} is partitioned again; use one level of partitions`);
      if (l.kind === "f") foreign++;
    }
    partitions = leaves.length;
  } else if (rel[0].children === true) {
    throw new PolicyError(`${where}.table: ${cfg.table} has inheritance children; use declarative partitioning (PARTITION BY HASH on the unit column)`);
  }

  // PostgreSQL keeps stored values to a numeric(p, s) typmod only where it stores them itself.
  const typmodKept = kind === "r" || kind === "m" || (kind === "p" && foreign === 0);
  if (!typmodKept) for (const c of columns) c.scale = null;

  const shape: SourceShape = {
    relation: `${quoteIdent(schema)}.${quoteIdent(name)}`,
    hasCtid: kind !== "v",
    dataset: d,
    columns,
    seed,
  };
  try {
    await client.query(`SELECT count(*), min($1::bigint) FROM (${sourceSelect(shape, "$1::bigint")} LIMIT 0) AS __z`, [seed.toString()]);
  } catch (e) {
    const code = e instanceof Error && "code" in e ? String((e as { code: unknown }).code) : "";
    throw new PolicyError(`${where}: the declared schema cannot be applied to ${cfg.table}${code !== "" ? ` (SQLSTATE ${code})` : ""}`);
  }
  return { shape, partitions, foreign };
}
