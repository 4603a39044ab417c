/**
 * The budget overview without opening a dataset (issue 11): after a kernel restart, `hush.budget()`
 * shows the analyst's spend and cap on every dataset they may use, grouped by population, from
 * the curator's ledger (the `accounts` message) — instead of "no dataset opened". A real curator
 * process (built dist/) over ipc; two kernel sessions one after the other stand for the restart.
 */
import { rmSync } from "node:fs";
import { afterAll, beforeAll, describe, expect, test } from "vitest";
import { HushSession } from "../../kernel/hush-session.js";
import { BudgetReport } from "../../runtime/api/budget.js";
import { CuratorClient } from "../../runtime/client/client.js";
import { type EmbeddedCurator, startEmbeddedCurator } from "../../runtime/client/embedded.js";
import { makeWorkspace, requireBuild, type Workspace } from "../integration/helpers.js";

let ws: Workspace;
let curator: EmbeddedCurator;
const sessions: HushSession[] = [];

function session(analyst: "ada" | "ben"): HushSession {
  const s = HushSession.create({ display: () => {} }, { HUSH_CURATOR: curator.address, HUSH_ANALYST: analyst, HUSH_TOKEN: ws.tokens[analyst] });
  sessions.push(s);
  return s;
}

beforeAll(async () => {
  requireBuild();
  ws = makeWorkspace("overview", "2");
  curator = await startEmbeddedCurator({ policyFile: ws.policyFile, stateDir: ws.dir });
});

afterAll(async () => {
  for (const s of sessions) await s.close().catch(() => {});
  await curator?.stop();
  if (ws) rmSync(ws.dir, { recursive: true, force: true });
});

describe("hush.budget() before any dataset is opened", () => {
  test("a fresh kernel shows every dataset the analyst may use, nothing spent", async () => {
    const b = await session("ada").api.budget();
    expect(b).toBeInstanceOf(BudgetReport);
    expect(b.overview).toBe(true);
    // ada is granted clinic and clinic_z; "hidden" is ben's and is not named to ada.
    expect(b.datasets.map((d) => d.dataset)).toEqual(["clinic", "clinic_z"]);
    expect(b.of("clinic")!.spend).toMatchObject({ spentEpsilon: "0", capEpsilon: "2", releases: 0 });
    expect(String(b)).not.toMatch(/no dataset opened yet/);
    expect(String(b)).not.toContain("hidden");
  });

  test("after a restart it shows what earlier sessions spent, per population, from the ledger", async () => {
    const first = session("ada");
    const clinic = await first.api.open("clinic");
    await clinic.count({ epsilon: 0.25 });
    await clinic.by("district").mean("wait_minutes", { epsilon: "0.5" });
    const z = await first.api.open("clinic_z");
    await z.count({ rho: "0.01" });
    await first.close(); // the kernel restarts

    const again = session("ada");
    const b = await again.api.budget();
    expect(b.overview).toBe(true);
    expect(b.of("clinic")!.spend).toMatchObject({ analyst: "ada", spentEpsilon: "3/4", remainingEpsilon: "5/4", releases: 2 });
    expect(b.of("clinic")!.sessionSpent).toBe("0");
    expect(b.of("clinic")!.queries).toEqual([]);
    expect(b.of("clinic_z")!.spend).toMatchObject({ mode: "zcdp", spentRho: "1/100", releases: 1 });
    const text = String(b);
    expect(text).toMatch(/^privacy budget of ada: your spend so far, from the curator's ledger \(no dataset opened in this session\)/);
    expect(text).toMatch(/clinic \(population clinic\.csv\)\s+ε 0\.75 of 2 used · 1\.25 remaining · 2 releases/);
    expect(text).toMatch(/clinic_z \(population clinic-z\.csv\)\s+ρ 0\.01 of /);
    // The display renders it (text and HTML), with the same amounts.
    const bundle = (await again.render(b))!;
    expect(bundle.data["text/plain"]).toBe(text);
    expect(String(bundle.data["text/html"])).toContain("0.75 of 2");

    // Once a dataset is opened, the report is this session's again, as before.
    await again.api.open("clinic");
    const after = await again.api.budget();
    expect(after.overview).toBe(false);
    expect(after.datasets.map((d) => d.dataset)).toEqual(["clinic"]);
  });

  test("another analyst sees only their own accounts", async () => {
    const b = await session("ben").api.budget();
    expect(b.datasets.map((d) => d.dataset)).toEqual(["clinic", "hidden"]);
    expect(b.of("clinic")!.spend).toMatchObject({ analyst: "ben", spentEpsilon: "0", releases: 0 });
  });

  test("the accounts message over the real client: strict reply, bad tokens refused", async () => {
    const c = await CuratorClient.connect({ address: curator.address, analyst: "ben", token: ws.tokens.ben });
    try {
      const accounts = await c.accounts();
      expect(accounts.map((a) => [a.dataset, a.population])).toEqual([
        ["clinic", "clinic.csv"],
        ["hidden", "hidden.csv"],
      ]);
    } finally {
      await c.close();
    }
    const bad = await CuratorClient.connect({ address: curator.address, analyst: "ben", token: "not-the-token" });
    try {
      await expect(bad.accounts()).rejects.toMatchObject({ kind: "unauthorized" });
    } finally {
      await bad.close();
    }
  });
});
