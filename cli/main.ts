#!/usr/bin/env node
/**
 * The `hush` command. Exit codes, the same for every subcommand:
 *   0  done, nothing wrong
 *   1  the job ran and found a problem (an audit finding, a failing cell, a demo that did not pass)
 *   2  bad input: a missing or unreadable file, bad JSON, a bad key, a bad option
 *   3  anything else (curator unreachable, internal error)
 */
import { Command, CommanderError, Option } from "commander";
import { isHushError } from "../runtime/errors.js";
import type { AuditArgs } from "./commands/audit.js";
import type { InstallOptions } from "./commands/install.js";

// Each command's module is loaded only when it runs: `hush audit` must not load the kernel client,
// the curator or DuckDB, and starts faster without them.

export const EXIT = { ok: 0, problem: 1, badInput: 2, other: 3 } as const;

const out = (s: string): void => void process.stdout.write(s);

function exitCodeOf(e: unknown): number {
  if (isHushError(e)) return e.kind === "bad-input" || e.kind === "policy" ? EXIT.badInput : EXIT.other;
  return EXIT.other;
}

function program(): Command {
  const p = new Command("hush")
    .description("Privacy-budgeted data analysis in Jupyter: sealed datasets, noisy aggregates with error bars, signed spend receipts")
    .version("0.1.0")
    .showHelpAfterError()
    .exitOverride();

  p.command("install")
    .description('install the "TypeScript (hush)" Jupyter kernelspec, or one that runs as an analyst (--analyst)')
    .addOption(new Option("--user", "install for the current user (default)").conflicts("prefix"))
    .option("--prefix <dir>", "install under this prefix (e.g. a virtualenv)")
    .option("--analyst <name>", "a kernelspec that runs as this analyst (needs --token-file)")
    .option("--token-file <file>", "the file holding the analyst's token, readable only by you (chmod 600)")
    .option("--curator <addr>", "tcp://HOST:PORT, ipc://PATH or embedded (the demo curator; the default)")
    .option("--curator-key <z85>", "the curator's CURVE public key (for tcp)")
    .option("--dataset <name>", "the dataset the notebook is for: names the kernelspec hush-NAME")
    .option("--name <name>", "the kernelspec name (default hush, or hush-DATASET / hush-ANALYST with --analyst)")
    .action(async (o: InstallOptions) => {
      const { runInstall } = await import("./commands/install.js");
      runInstall(o, out);
    });

  p.command("serve")
    .description("run a curator for a steward's policy (tcp with CURVE encryption, or ipc)")
    .requiredOption("--policy <file>", "the steward's policy (YAML)")
    .option("--listen <addr>", "tcp://HOST:PORT or ipc://PATH", "tcp://127.0.0.1:0")
    .option("--curve-key <file>", "CURVE key pair for tcp (created if missing); without it a fresh pair is made per start")
    .action(async (o: { policy: string; listen: string; curveKey?: string }) => {
      const { runServe } = await import("./commands/serve.js");
      await runServe(o, out);
    });

  p.command("prepare")
    .description("prepare the datasets whose source is a DuckDB database file, and run the start pass of Parquet in place with a unit (once, before the curator starts)")
    .requiredOption("--policy <file>", "the steward's policy (YAML)")
    .option("--dataset <name>", "only this dataset")
    .action(async (o: { policy: string; dataset?: string }) => {
      const { runPrepare } = await import("./commands/prepare.js");
      await runPrepare(o, out);
    });

  p.command("keygen")
    .description("create a curator signing key (Ed25519); the public key goes to reviewers")
    .requiredOption("--out <file>", "where to write the private key (PEM, mode 0600); the public key goes to FILE.pub")
    .action(async (o: { out: string }) => {
      const { runKeygen } = await import("./commands/keygen.js");
      runKeygen(o, out);
    });

  p.command("token")
    .description("make an analyst token and the hash line for the policy (reads a token from stdin if one is piped in)")
    .option("--analyst <name>", "analyst name for the policy line", "ANALYST")
    .action(async (o: { analyst: string }) => {
      const { runToken } = await import("./commands/token.js");
      await runToken(o, out);
    });

  p.command("run")
    .description("execute a notebook headlessly through the hush kernel and write it with outputs")
    .argument("<notebook>", "the .ipynb to run")
    .option("-o, --output <file>", "where to write the executed notebook (default: NAME.out.ipynb beside it)")
    .option("--keep-going", "run the remaining cells after a cell fails")
    .action(async (file: string, o: { output?: string; keepGoing?: boolean }) => {
      const { runNotebookCommand } = await import("./commands/run.js");
      const r = await runNotebookCommand(file, o, out);
      if (r.failed > 0) process.exitCode = EXIT.problem;
    });

  p.command("audit")
    .description("check notebooks' spend receipts without the data: signatures, chain, totals, cap, shown values; one notebook, or a class")
    .argument("<notebooks...>", "the .ipynb to audit; several, or folders of them, audit a class (one table)")
    .requiredOption("--key <pubkey>", "the curator's public key: a .pub file (PEM) or the base64 the curator prints")
    .option("--cap <epsilon>", "hold the notebooks to this epsilon cap (may be stricter than the steward's; a roster's cap wins)")
    .option("--analyst <name>", "the analyst whose notebook this should be (a copied notebook verifies under its author's name)")
    .option("--dataset <name>", "the dataset the releases should be on")
    .option("--roster <csv>", "class audit: a CSV with the header student,analyst,dataset,cap; notebooks are matched by file or folder name")
    .option("--strict", "spend the notebook does not show (cells run again) and receipts out of spend order are findings, not notes")
    .option("--json", "print the report as JSON")
    .option("--csv", "class audit: print the table as CSV (for a grade book)")
    .action(async (files: string[], o: AuditArgs) => {
      const { runAuditCommand } = await import("./commands/audit.js");
      const code = runAuditCommand(files, o, out);
      if (code !== EXIT.ok) process.exitCode = code;
    });

  p.command("ledger")
    .description("steward's view: spend per analyst and dataset, read from the ledger (read-only)")
    .requiredOption("--policy <file>", "the steward's policy (YAML); its curator.ledger is read")
    .option("--analyst <name>", "only this analyst")
    .option("--json", "print as JSON")
    .action(async (o: { policy: string; analyst?: string; json?: boolean }) => {
      const { runLedger } = await import("./commands/ledger.js");
      runLedger(o, out);
    });

  p.command("notebooks")
    .description("copy the demo notebooks into a working folder (default workspace/, ignored by git); the tracked ones stay clean templates")
    .option("--to <dir>", "the folder to copy them into (default: workspace/ in the repository)")
    .action(async (o: { to?: string }) => {
      const { runNotebooks } = await import("./commands/notebooks.js");
      runNotebooks(o, out);
    });

  p.command("demo")
    .description("the demo: invented clinic data, a local curator, run notebooks/exploration.ipynb, audit the result")
    .option("--state <dir>", "state directory for the demo run (default: .hush/demo-run in the repository)")
    .action(async (o: { state?: string }) => {
      const { runDemo } = await import("./commands/demo.js");
      const ok = await runDemo(o, out);
      if (!ok) process.exitCode = EXIT.problem;
    });
  return p;
}

async function main(): Promise<void> {
  try {
    await program().parseAsync(process.argv);
  } catch (e: unknown) {
    if (e instanceof CommanderError) {
      // help and version exit 0; usage errors are bad input
      process.exitCode = e.exitCode === 0 ? EXIT.ok : EXIT.badInput;
      return;
    }
    process.stderr.write(`hush: ${e instanceof Error ? e.message : String(e)}\n`);
    process.exitCode = exitCodeOf(e);
  }
}

await main();
