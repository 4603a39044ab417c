/**
 * Where the curator is and who the analyst is, from the environment or a config file.
 *
 *   HUSH_CURATOR      curator address: ipc://PATH or tcp://HOST:PORT
 *   HUSH_CURATOR_KEY  the curator's CURVE public key (z85, 40 characters); needed for tcp
 *   HUSH_ANALYST      analyst name in the steward's policy
 *   HUSH_TOKEN        the analyst's token
 *   HUSH_CONFIG       a JSON or YAML file with the same four settings, as
 *                     { curator, curatorKey, analyst, token } (or the variable names above)
 *   HUSH_DEMO_DIR     embedded mode only: where the demo data, key and ledger live
 *
 * Variables override the file. With no curator address at all, the session runs the embedded
 * default: a local curator on the demo policy (HUSH_ANALYST/HUSH_TOKEN, when set, pick the analyst).
 */
import { readFileSync } from "node:fs";
import { extname } from "node:path";
import { parse as parseYaml } from "yaml";
import { BadInputError } from "../errors.js";

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

const FILE_KEYS: Record<string, "curator" | "curatorKey" | "analyst" | "token"> = {
  curator: "curator",
  curatorKey: "curatorKey",
  analyst: "analyst",
  token: "token",
  HUSH_CURATOR: "curator",
  HUSH_CURATOR_KEY: "curatorKey",
  HUSH_ANALYST: "analyst",
  HUSH_TOKEN: "token",
};

type Settings = Partial<Record<"curator" | "curatorKey" | "analyst" | "token", string>>;

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
    if (key === undefined) throw new BadInputError(`config file ${file}: unknown setting ${JSON.stringify(k)} (known: curator, curatorKey, analyst, token)`);
    if (typeof v !== "string" || v.trim() === "") throw new BadInputError(`config file ${file}: ${k} must be a non-empty string`);
    out[key] = v.trim();
  }
  return out;
}

function fromEnv(env: NodeJS.ProcessEnv, name: string): string | undefined {
  const v = env[name];
  return v === undefined || v.trim() === "" ? undefined : v.trim();
}

/** The connection settings from environment variables and the optional HUSH_CONFIG file. */
export function resolveConfig(env: NodeJS.ProcessEnv = process.env): HushConfig {
  const file = fromEnv(env, "HUSH_CONFIG");
  const fromFile = file ? readConfigFile(file) : {};
  const s: Settings = {
    curator: fromEnv(env, "HUSH_CURATOR") ?? fromFile.curator,
    curatorKey: fromEnv(env, "HUSH_CURATOR_KEY") ?? fromFile.curatorKey,
    analyst: fromEnv(env, "HUSH_ANALYST") ?? fromFile.analyst,
    token: fromEnv(env, "HUSH_TOKEN") ?? fromFile.token,
  };
  const demoDir = fromEnv(env, "HUSH_DEMO_DIR");
  if (s.curator === undefined) {
    if ((s.analyst === undefined) !== (s.token === undefined)) {
      throw new BadInputError(`set both HUSH_ANALYST and HUSH_TOKEN, or neither (got only ${s.analyst !== undefined ? "HUSH_ANALYST" : "HUSH_TOKEN"})`);
    }
    return { mode: "embedded", ...(s.analyst ? { analyst: s.analyst, token: s.token } : {}), ...(demoDir ? { demoDir } : {}) };
  }
  const origin = fromEnv(env, "HUSH_CURATOR") !== undefined ? "environment" : `config file ${file}`;
  if (!/^(ipc:\/\/.+|tcp:\/\/[^/]+:\d+)$/.test(s.curator)) {
    throw new BadInputError(`curator address ${JSON.stringify(s.curator)} (${origin}) must be ipc://PATH or tcp://HOST:PORT`);
  }
  const missing = [s.analyst === undefined ? "HUSH_ANALYST (analyst)" : "", s.token === undefined ? "HUSH_TOKEN (token)" : ""].filter(Boolean);
  if (missing.length) throw new BadInputError(`a curator address is configured (${origin}) but ${missing.join(" and ")} ${missing.length > 1 ? "are" : "is"} missing`);
  if (s.curator.startsWith("tcp://") && s.curatorKey === undefined) {
    throw new BadInputError(`the tcp curator address ${s.curator} needs HUSH_CURATOR_KEY (curatorKey): the curator's CURVE public key, z85`);
  }
  return {
    mode: "remote",
    address: s.curator,
    ...(s.curatorKey !== undefined ? { curveServerKey: s.curatorKey } : {}),
    analyst: s.analyst!,
    token: s.token!,
    origin,
  };
}
