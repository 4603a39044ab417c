import { test } from "vitest";
import { startShardedSet, createSharded } from "../helpers/pg-cluster.js";
import pg from "pg";
test("scratch", async () => {
  const set = await startShardedSet(3);
  try {
    await createSharded(set, "visits", "patient bigint, age integer, region text", "HASH (patient)");
    await set.coordinator.sql("INSERT INTO visits SELECT g % 100, g % 90, (ARRAY['a','b'])[1 + g % 2] FROM generate_series(1, 3000) g");
    await set.coordinator.sql("CREATE TABLE loc AS SELECT (g % 400000)::bigint AS patient, (g % 90)::int AS age, (ARRAY['a','b'])[1 + g % 2] AS region FROM generate_series(1, 2000000) g");
    await set.coordinator.sql("ANALYZE loc");
    await set.coordinator.sql("GRANT SELECT ON loc TO hush_reader");
    const c = new pg.Client({ host: "127.0.0.1", port: set.coordinator.port, user: set.reader.user, password: set.reader.password, database: "postgres", options: "-c enable_partitionwise_aggregate=on" });
    await c.connect();
    const q = async (s: string, p: unknown[] = []) => { const t0 = performance.now(); try { const r = await c.query(s, p); console.log(s.slice(0, 60), (performance.now() - t0).toFixed(0), "ms\n", r.rows.map((x) => Object.values(x).join(" ")).join("\n")); } catch (e) { console.log("ERR", s.slice(0,80), (e as Error).message); } };
    const arr = (T: string) => `SELECT g, count(*) FILTER (WHERE m), sum(a) FILTER (WHERE m) FROM (SELECT (array_agg(h ORDER BY h DESC, r, t))[1:$1::int] AS ah, (array_agg(age ORDER BY h DESC, r, t))[1:$1::int] AS aa, (array_agg(reg ORDER BY h DESC, r, t))[1:$1::int] AS ar FROM (SELECT patient, age, CASE region WHEN 'a' THEN 0 ELSE 1 END AS reg, COALESCE(age > 30, FALSE) AS h, hashtextextended(ctid::text, 5) AS r, ctid AS t FROM ${T}) s GROUP BY patient) p CROSS JOIN LATERAL unnest(ah, aa, ar) AS x(m, a, g) GROUP BY g`;
    const win = (T: string) => `SELECT reg, count(*) FILTER (WHERE m), sum(age) FILTER (WHERE m) FROM (SELECT age, reg, (h AND row_number() OVER (PARTITION BY patient ORDER BY h DESC, r) <= $1::int) AS m FROM (SELECT patient, age, CASE region WHEN 'a' THEN 0 ELSE 1 END AS reg, COALESCE(age > 30, FALSE) AS h, hashtextextended(ctid::text, 5) AS r FROM ${T}) s) w GROUP BY reg`;
    await q("EXPLAIN VERBOSE " + arr("visits"), [3]);
    await q(arr("visits"), [3]);
    await q(win("visits"), [3]);
    await q("SELECT region, count(*), sum(age) FROM loc GROUP BY 1");
    await q(arr("loc"), [3]);
    await q(win("loc"), [3]);
    await q("EXPLAIN " + arr("loc"), [3]);
    await q("EXPLAIN " + win("loc"), [3]);
    await c.end();
  } finally { await set.stop(); }
}, 300000);
