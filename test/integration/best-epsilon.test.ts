/**
 * The best accounting bound through a real curator process (docs/methods.md §22): on the zCDP
 * dataset clinic_z (cap epsilon 1 at delta 1e-6), pure epsilon releases are stated by plain
 * composition; the cap check stays in rho, so plain composition reports less than the conversion
 * but never lets more through; a Gaussian release switches the statement to the conversion; a
 * restarted curator states the same from its ledger.
 */
import { rmSync } from "node:fs";
import { join } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import { CuratorClient } from "../../runtime/client/client.js";
import { Rational, epsilonFromRho } from "../../runtime/core/index.js";
import { OverCapError } from "../../runtime/errors.js";
import type { QueryPlan } from "../../runtime/protocol/messages.js";
import { makeWorkspace, requireBuild, startCuratorChild, type CuratorChild, type Workspace } from "./helpers.js";

const count = (privacy: QueryPlan["privacy"], age: number): QueryPlan => ({
  v: 1,
  dataset: "clinic_z",
  measure: { kind: "count" },
  where: { op: "lt", column: "age", value: age },
  privacy,
});

describe("best epsilon at delta on a zCDP dataset, real curator", () => {
  let ws: Workspace;
  let cur: CuratorChild | undefined;
  afterAll(async () => {
    await cur?.stop();
    if (ws) rmSync(ws.dir, { recursive: true, force: true });
  });

  it("states plain composition for pure releases, the conversion after a Gaussian one, the same after a restart", async () => {
    requireBuild();
    ws = makeWorkspace("besteps", "1");
    const args = ["--policy", ws.policyFile, "--listen", `ipc://${join(ws.dir, "c.sock")}`];
    const session = async <T>(fn: (c: CuratorClient) => Promise<T>): Promise<T> => {
      const c = await CuratorClient.connect({ address: cur!.ready.address, analyst: "ada", token: ws.tokens.ada, timeoutMs: 60_000 });
      try {
        return await fn(c);
      } finally {
        await c.close();
      }
    };
    cur = await startCuratorChild(args);
    await session(async (ada) => {
      expect(await ada.spend("clinic_z")).toMatchObject({ spentEpsilon: "0", releases: 0 });
      for (let i = 1; i <= 3; i++) {
        const r = await ada.ask(count({ epsilon: "0.1" }, 90 + i));
        // three pure 0.1: plain composition 3/10; the conversion of rho 3/200 is about 0.83
        expect(r.spend.epsilonBy).toBe("plain composition");
        expect(Rational.parse(r.spend.spentRho!).eq(Rational.of(BigInt(i), 200n))).toBe(true);
        expect(Rational.parse(r.spend.spentEpsilon).eq(Rational.parse("0.1").mul(BigInt(i)))).toBe(true);
      }
      const conv = epsilonFromRho(Rational.parse("3/200"), Rational.parse("0.000001"));
      expect(conv.gt(Rational.parse("0.3"))).toBe(true);
      // The cap (epsilon 1 at delta 1e-6) is held in rho: a fourth 0.1 and a fifth would take rho
      // past it although plain composition would still be under 1. The refusal names rho and spends nothing.
      const spend = await ada.spend("clinic_z");
      const capRho = Rational.parse(spend.capRho!);
      let refused = 0;
      for (let i = 4; i <= 8; i++) {
        try {
          await ada.ask(count({ epsilon: "0.1" }, 90 + i));
        } catch (e) {
          expect(e).toBeInstanceOf(OverCapError);
          expect((e as Error).message).toMatch(/this query costs ρ 0\.005,/);
          refused++;
        }
      }
      const after = await ada.spend("clinic_z");
      expect(refused).toBeGreaterThan(0);
      expect(Rational.parse(after.spentRho!).le(capRho)).toBe(true);
      expect(after.epsilonBy).toBe("plain composition");
      expect(Rational.parse(after.spentEpsilon).le(Rational.parse("1"))).toBe(true);
    });
    // A new curator process reads the tally back from its ledger.
    await cur.stop();
    cur = await startCuratorChild(args);
    await session(async (ada) => {
      const again = await ada.spend("clinic_z");
      expect(again.epsilonBy).toBe("plain composition");
      expect(Rational.parse(again.spentEpsilon).eq(Rational.of(BigInt(again.releases), 10n))).toBe(true);
      // A Gaussian release: plain composition no longer applies.
      const g = await ada.ask(count({ rho: "0.0001" }, 50));
      expect(g.spend.epsilonBy).toBe("zCDP conversion");
      expect(Rational.parse(g.spend.spentEpsilon).eq(epsilonFromRho(Rational.parse(g.spend.spentRho!), Rational.parse("0.000001")))).toBe(true);
      expect((await ada.spend("clinic_z")).epsilonBy).toBe("zCDP conversion");
    });
  }, 300_000);
});
