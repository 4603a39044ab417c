/**
 * Where the curator is and who the analyst is, from the environment or a config file.
 *
 *   HUSH_CURATOR      curator address: ipc://PATH or tcp://HOST:PORT, or `embedded`
 *   HUSH_CURATOR_KEY  the curator's CURVE public key (z85, 40 characters); needed for tcp
 *   HUSH_ANALYST      analyst name in the steward's policy
 *   HUSH_TOKEN        the analyst's token
 *   HUSH_TOKEN_FILE   instead of HUSH_TOKEN: a file holding the token, readable only by its owner
 *                     (runtime/api/token-file.ts); read each time the session connects
 *   HUSH_CONFIG       a JSON or YAML file with the same settings, as
 *                     { curator, curatorKey, analyst, token | tokenFile } (or the variable names)
 *   HUSH_DEMO_DIR     embedded mode only: where the demo data, key and ledger live
 *
 * Variables override the file; a variable set to the empty string counts as unset, which is how a
 * per-identity kernelspec (kernel/kernelspec.ts) clears any HUSH_TOKEN or HUSH_CONFIG the notebook
 * server itself was started with, so the identity the student picked in Jupyter is the only one.
 * With no curator address, or `embedded`, the session runs the embedded default: a local curator
 * on the demo policy (HUSH_ANALYST with its token, when set, pick the analyst; else researcher rowan).
 */
import { readFileSync } from "node:fs";
import { dirname, extname, isAbsolute, resolve } from "node:path";
import { parse as parseYaml } from "yaml";
import { BadInputError } from "../errors.js";
import { readTokenFile } from "./token-file.js";

export type HushConfig =
  | {
      mode: "remote";
      address: string;
      curveServerKey?: string;
      analyst: string;
      token: string;
      /** Where the settings came from, for messages ("environment", "config file /x/hush.yaml"). */
      origin: string;
    }
  | {
      mode: "embedded";
      /** Analyst and token to use instead of the demo researcher. */
      analyst?: string;
      token?: string;
      demoDir?: string;
    };

type SettingKey = "curator" | "curatorKey" | "analyst" | "token" | "tokenFile";

const FILE_KEYS: Record<string, SettingKey> = {
  curator: "curator",
  curatorKey: "curatorKey",
  analyst: "analyst",
  token: "token",
  tokenFile: "tokenFile",
  HUSH_CURATOR: "curator",
  HUSH_CURATOR_KEY: "curatorKey",
  HUSH_ANALYST: "analyst",
  HUSH_TOKEN: "token",
  HUSH_TOKEN_FILE: "tokenFile",
};

/** The curator value that asks for the embedded demo curator explicitly (a kernelspec names it). */
export const EMBEDDED_CURATOR = "embedded";

type Settings = Partial<Record<SettingKey, string>>;

function readConfigFile(file: string): Settings {
  let text: string;
  try {
    text = readFileSync(file, "utf8");
  } catch (e: unknown) {
    throw new BadInputError(`HUSH_CONFIG names ${file}, which cannot be read`, { cause: e });
  }
  let raw: unknown;
  try {
    raw = extname(file).toLowerCase() === ".json" ? JSON.parse(text) : parseYaml(text);
  } catch (e: unknown) {
    throw new BadInputError(`config file ${file} is not valid ${extname(file).toLowerCase() === ".json" ? "JSON" : "YAML"}`, { cause: e });
  }
  if (raw === null || typeof raw !== "object" || Array.isArray(raw)) {
    throw new BadInputError(`config file ${file} must hold an object with curator, curatorKey, analyst and token`);
  }
  const out: Settings = {};
  for (const [k, v] of Object.entries(raw as Record<string, unknown>)) {
    const key = FILE_KEYS[k];
    if (key === undefined) throw new BadInputError(`config file ${file}: unknown setting ${JSON.stringify(k)} (known: curator, curatorKey, analyst, token, tokenFile)`);
    if (typeof v !== "string" || v.trim() === "") throw new BadInputError(`config file ${file}: ${k} must be a non-empty string`);
    // A relative token file is read beside the config file, not wherever the kernel happens to run.
    out[key] = key === "tokenFile" && !isAbsolute(v.trim()) ? resolve(dirname(file), v.trim()) : v.trim();
  }
  return out;
}

function fromEnv(env: NodeJS.ProcessEnv, name: string): string | undefined {
  const v = env[name];
  return v === undefined || v.trim() === "" ? undefined : v.trim();
}

/**
 * The token, or the file holding it: from the environment if either variable is set there, else
 * from the config file. Both at one level is ambiguous and refused.
 */
function tokenSetting(env: NodeJS.ProcessEnv, fromFile: Settings): Pick<Settings, "token" | "tokenFile"> {
  const token = fromEnv(env, "HUSH_TOKEN");
  const tokenFile = fromEnv(env, "HUSH_TOKEN_FILE");
  if (token !== undefined && tokenFile !== undefined) throw new BadInputError("set HUSH_TOKEN or HUSH_TOKEN_FILE, not both");
  if (token !== undefined) return { token };
  if (tokenFile !== undefined) return { tokenFile: resolve(tokenFile) };
  if (fromFile.token !== undefined && fromFile.tokenFile !== undefined) throw new BadInputError("the config file sets token and tokenFile; keep one");
  return fromFile.token !== undefined ? { token: fromFile.token } : fromFile.tokenFile !== undefined ? { tokenFile: fromFile.tokenFile } : {};
}

/** The connection settings from environment variables and the optional HUSH_CONFIG file. */
export function resolveConfig(env: NodeJS.ProcessEnv = process.env): HushConfig {
  const file = fromEnv(env, "HUSH_CONFIG");
  const fromFile = file ? readConfigFile(file) : {};
  const s: Settings = {
    curator: fromEnv(env, "HUSH_CURATOR") ?? fromFile.curator,
    curatorKey: fromEnv(env, "HUSH_CURATOR_KEY") ?? fromFile.curatorKey,
    analyst: fromEnv(env, "HUSH_ANALYST") ?? fromFile.analyst,
    ...tokenSetting(env, fromFile),
  };
  const demoDir = fromEnv(env, "HUSH_DEMO_DIR");
  if (s.curator === undefined || s.curator === EMBEDDED_CURATOR) {
    if ((s.analyst === undefined) !== (s.token === undefined && s.tokenFile === undefined)) {
      throw new BadInputError(
        `set both HUSH_ANALYST and a token (HUSH_TOKEN or HUSH_TOKEN_FILE), or neither (got only ${s.analyst !== undefined ? "HUSH_ANALYST" : "a token"})`,
      );
    }
    const token = s.tokenFile !== undefined ? readTokenFile(s.tokenFile) : s.token;
    return { mode: "embedded", ...(s.analyst ? { analyst: s.analyst, token } : {}), ...(demoDir ? { demoDir } : {}) };
  }
  const origin = fromEnv(env, "HUSH_CURATOR") !== undefined ? "environment" : `config file ${file}`;
  if (!/^(ipc:\/\/.+|tcp:\/\/[^/]+:\d+)$/.test(s.curator)) {
    throw new BadInputError(`curator address ${JSON.stringify(s.curator)} (${origin}) must be ipc://PATH or tcp://HOST:PORT`);
  }
  const missing = [
    s.analyst === undefined ? "HUSH_ANALYST (analyst)" : "",
    s.token === undefined && s.tokenFile === undefined ? "HUSH_TOKEN or HUSH_TOKEN_FILE (token)" : "",
  ].filter(Boolean);
  if (missing.length) throw new BadInputError(`a curator address is configured (${origin}) but ${missing.join(" and ")} ${missing.length > 1 ? "are" : "is"} missing`);
  if (s.curator.startsWith("tcp://") && s.curatorKey === undefined) {
    throw new BadInputError(`the tcp curator address ${s.curator} needs HUSH_CURATOR_KEY (curatorKey): the curator's CURVE public key, z85`);
  }
  return {
    mode: "remote",
    address: s.curator,
    ...(s.curatorKey !== undefined ? { curveServerKey: s.curatorKey } : {}),
    analyst: s.analyst!,
    token: s.tokenFile !== undefined ? readTokenFile(s.tokenFile) : s.token!,
    origin,
  };
}
