/**
 * A steward's workspace made in a folder for benches and tests: an Ed25519 curator key, one random
 * token per analyst (stored hashed in the policy), and the policy YAML pointing at data files.
 * Built with the curator's own key and token functions, so the policy is what `hush keygen` and
 * `hush token` would produce.
 */
import { randomBytes } from "node:crypto";
import fs from "node:fs";
import path from "node:path";
import { stringify } from "yaml";
import { generateCuratorKey } from "../runtime/curator/keys.js";
import { hashToken } from "../runtime/curator/tokens.js";

export interface DatasetSpec {
  description: string;
  /** Absolute path, or relative to the workspace folder. */
  source: string;
  unit?: { column?: string; maxRows: number; maxGroups: number };
  accounting: { mode: "pure"; cap: { epsilon: string } } | { mode: "zcdp"; cap: { epsilon: string; delta: string } };
  analysts: string[];
  columns: Record<string, unknown>;
}

export interface WorkspaceSpec {
  analysts: string[];
  datasets: Record<string, DatasetSpec>;
}

export interface Workspace {
  dir: string;
  policyFile: string;
  ledgerFile: string;
  keyFile: string;
  publicKeyB64: string;
  /** Plain tokens by analyst: what each analyst would be handed. */
  tokens: Record<string, string>;
}

export function writeWorkspace(dir: string, spec: WorkspaceSpec): Workspace {
  fs.mkdirSync(dir, { recursive: true });
  const keyFile = path.join(dir, "keys", "curator.key");
  const ledgerFile = path.join(dir, "state", "ledger.sqlite");
  const { publicKeyB64 } = generateCuratorKey(keyFile);
  const tokens: Record<string, string> = {};
  const analysts: Record<string, { token: string }> = {};
  for (const a of spec.analysts) {
    tokens[a] = randomBytes(24).toString("base64url");
    analysts[a] = { token: hashToken(tokens[a]) };
  }
  const policy = {
    curator: { key: "keys/curator.key", ledger: "state/ledger.sqlite" },
    analysts,
    datasets: spec.datasets,
  };
  const policyFile = path.join(dir, "policy.yaml");
  fs.writeFileSync(policyFile, stringify(policy));
  return { dir, policyFile, ledgerFile, keyFile, publicKeyB64, tokens };
}
