/**
 * The audit corpus: one executed notebook and every tampering a reviewer must catch. Registered
 * by each test file that brings a notebook (signed in the test, or executed by the real kernel).
 * The CLI cases spawn dist/cli/main.js, so the build (npm test does it first) must have run.
 */
import { spawnSync } from "node:child_process";
import { generateKeyPairSync, type KeyObject } from "node:crypto";
import { writeFileSync } from "node:fs";
import { join, resolve } from "node:path";
import { expect, it } from "vitest";
import { type AuditReport, type FindingKind, auditNotebook } from "../../cli/audit/checks.js";
import type { Notebook } from "../../cli/audit/notebook.js";
import { Rational } from "../../runtime/core/index.js";
import type { Receipt } from "../../runtime/protocol/messages.js";
import {
  changeCost,
  deleteReleaseCell,
  editShownValue,
  forgeSignature,
  stripReceipt,
  releaseWithSeq,
  releasesOf,
  replaceKey,
  substituteReceipt,
  swapReleaseCells,
} from "./tamper.js";

export interface CorpusFixture {
  /** The executed, untouched notebook (at least three distinct releases). */
  nb: Notebook;
  key: KeyObject;
  /** The curator's public key file (PEM), as a reviewer gets it. */
  keyFile: string;
  /** A receipt of another analyst from the same curator. */
  foreign: Receipt;
  /** A scratch directory for tampered copies. */
  dir: string;
}

const CLI = resolve(import.meta.dirname, "../../dist/cli/main.js");

export function runCli(args: string[]): { code: number | null; stdout: string; stderr: string } {
  const r = spawnSync(process.execPath, [CLI, ...args], { encoding: "utf8", timeout: 60_000, stdio: ["ignore", "pipe", "pipe"] });
  return { code: r.status, stdout: r.stdout, stderr: r.stderr };
}

function kinds(r: AuditReport): FindingKind[] {
  return r.findings.map((f) => f.kind);
}

/** The finding of `kind`, which must exist and name `cell` in its message. */
function expectFinding(r: AuditReport, kind: FindingKind, cell: number): void {
  expect(r.ok).toBe(false);
  const f = r.findings.find((x) => x.kind === kind && x.cell === cell);
  expect(f, `expected a ${kind} finding at cell ${cell}; got ${JSON.stringify(r.findings)}`).toBeDefined();
  expect(f!.message).toMatch(new RegExp(`^cell ${cell}\\b`));
}

export function auditCorpus(get: () => CorpusFixture): void {
  const audit = (nb: Notebook, cap?: string): AuditReport => auditNotebook(nb, get().key, cap === undefined ? {} : { cap: Rational.parse(cap) });
  const save = (name: string, nb: Notebook): string => {
    const file = join(get().dir, name);
    writeFileSync(file, JSON.stringify(nb));
    return file;
  };

  it("passes the untouched notebook (library and CLI, exit 0)", () => {
    const { nb, keyFile } = get();
    const r = audit(nb);
    expect(r.findings).toEqual([]);
    expect(r.receipts).toBeGreaterThanOrEqual(3);
    const cli = runCli(["audit", save("clean.ipynb", nb), "--key", keyFile]);
    expect(cli.stderr).toBe("");
    expect(cli.stdout).toMatch(/^verdict: PASS/m);
    expect(cli.code).toBe(0);
  });

  it("catches a shown value edited away from the signed one", () => {
    const bad = editShownValue(get().nb, 2);
    expectFinding(audit(bad), "shown-value", releaseWithSeq(bad, 2).cell);
  });

  it("catches a deleted release cell as a gap in the chain", () => {
    const bad = deleteReleaseCell(get().nb, 2);
    const r = audit(bad);
    expectFinding(r, "gap", releaseWithSeq(bad, 3).cell);
    expect(r.findings.find((f) => f.kind === "gap")!.message).toContain("release 2 is missing");
  });

  it("catches a deleted first release: the chain does not start at seq 1", () => {
    const bad = deleteReleaseCell(get().nb, 1);
    const r = audit(bad);
    expectFinding(r, "chain-start", releaseWithSeq(bad, 2).cell);
  });

  it("catches a release output whose receipt was removed", () => {
    const cell = releaseWithSeq(get().nb, 2).cell;
    const r = audit(stripReceipt(get().nb, 2));
    expectFinding(r, "no-receipt", cell);
  });

  it("catches reordered cells", () => {
    const bad = swapReleaseCells(get().nb, 2, 3);
    const r = audit(bad);
    expectFinding(r, "reordered", releaseWithSeq(bad, 2).cell);
    expect(r.findings.find((f) => f.kind === "reordered")!.message).toMatch(/seq 2 is shown after seq 3/);
  });

  it("catches a receipt from another analyst", () => {
    const bad = substituteReceipt(get().nb, 3, get().foreign);
    const at = releasesOf(bad).find((x) => x.meta.receipt.analyst === get().foreign.analyst)!.cell;
    const r = audit(bad);
    expectFinding(r, "mixed", at);
    expect(r.findings.find((f) => f.kind === "mixed")!.message).toContain(`analyst "${get().foreign.analyst}"`);
  });

  it("catches a forged signature", () => {
    const bad = forgeSignature(get().nb, 2);
    const r = audit(bad);
    expectFinding(r, "signature", releaseWithSeq(bad, 2).cell);
    // Only the signature was touched: nothing else is reported at that receipt.
    expect(r.findings.filter((f) => f.kind !== "signature" && f.kind !== "prev-link")).toEqual([]);
  });

  it("catches a changed cost (signature and running total)", () => {
    const bad = changeCost(get().nb, 2);
    const r = audit(bad);
    const cell = releaseWithSeq(bad, 2).cell;
    expectFinding(r, "signature", cell);
    expectFinding(r, "total", cell);
  });

  it("catches a replaced key even when the chain was re-signed consistently", () => {
    const other = generateKeyPairSync("ed25519");
    const bad = replaceKey(get().nb, other);
    const r = audit(bad);
    expectFinding(r, "key", releaseWithSeq(bad, 1).cell);
    expect(kinds(r).every((k) => k === "key")).toBe(true);
    const cli = runCli(["audit", save("rekeyed.ipynb", bad), "--key", get().keyFile, "--json"]);
    expect(cli.code).toBe(1);
    const json = JSON.parse(cli.stdout) as AuditReport;
    expect(json.ok).toBe(false);
    expect(json.findings.some((f) => f.kind === "key" && /key was replaced/.test(f.message))).toBe(true);
  });

  it("fails a notebook over a stricter review cap (--cap below the total), exit 1", () => {
    const { nb, keyFile } = get();
    const total = Rational.parse(audit(nb).total!);
    const under = total.mul(Rational.of(1, 2)).toDecimal(12);
    const file = save("capped.ipynb", nb);
    const cli = runCli(["audit", file, "--key", keyFile, "--cap", under]);
    expect(cli.code).toBe(1);
    expect(cli.stdout).toMatch(/over the review cap/);
    expect(cli.stdout).toMatch(/^verdict: FAIL/m);
    // The same cap at the total itself passes: the bound is "at most".
    expect(runCli(["audit", file, "--key", keyFile, "--cap", total.toString()]).code).toBe(0);
  });

  it("exits 2 on unreadable input: missing notebook, bad JSON, bad key", () => {
    const { keyFile } = get();
    const good = save("good.ipynb", get().nb);
    const badJson = join(get().dir, "bad.ipynb");
    writeFileSync(badJson, "{ not json");
    const badKey = join(get().dir, "bad.pub");
    writeFileSync(badKey, "-----BEGIN PUBLIC KEY-----\nAAAA\n-----END PUBLIC KEY-----\n");
    const missing = runCli(["audit", join(get().dir, "nope.ipynb"), "--key", keyFile]);
    expect(missing.code).toBe(2);
    expect(missing.stderr).toMatch(/cannot be read/);
    const json = runCli(["audit", badJson, "--key", keyFile]);
    expect(json.code).toBe(2);
    expect(json.stderr).toMatch(/not valid JSON/);
    const key = runCli(["audit", good, "--key", badKey]);
    expect(key.code).toBe(2);
    expect(key.stderr).toMatch(/public key/);
  });
}
