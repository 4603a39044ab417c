/**
 * `hush install [--user | --prefix DIR] [--analyst NAME --token-file FILE [--curator ADDR]
 * [--curator-key Z85] [--dataset NAME] [--name NAME]]`: the Jupyter kernelspec.
 *
 * Without --analyst: "TypeScript (hush)", named hush, on the embedded demo default.
 * With it: a kernelspec for that analyst (kernel/kernelspec.ts), named hush-DATASET (or
 * hush-ANALYST), which a notebook's metadata.kernelspec.name selects when it is opened.
 */
import { installKernelspec, type KernelIdentity } from "../../kernel/kernelspec.js";
import { EMBEDDED_CURATOR } from "../../runtime/api/config.js";
import { BadInputError } from "../../runtime/errors.js";

export interface InstallOptions {
  user?: boolean;
  prefix?: string;
  name?: string;
  analyst?: string;
  tokenFile?: string;
  curator?: string;
  curatorKey?: string;
  dataset?: string;
}

export function runInstall(o: InstallOptions, out: (s: string) => void): void {
  const identity = identityOf(o);
  const where = o.prefix !== undefined ? { prefix: o.prefix } : { user: true };
  const { dir, name, displayName } = installKernelspec({
    ...where,
    ...(o.name !== undefined ? { name: o.name } : {}),
    ...(identity !== undefined ? { identity } : {}),
  });
  out(`installed kernelspec "${name}" in ${dir}\n`);
  if (identity !== undefined) {
    out(`runs as analyst ${identity.analyst} on the ${identity.curator === EMBEDDED_CURATOR ? "embedded demo curator" : `curator ${identity.curator}`}; the token is read from ${identity.tokenFile} when a cell first uses hush\n`);
  }
  out(`in Jupyter pick "${displayName}" (a notebook whose kernelspec is "${name}" opens with it); headless: hush run NOTEBOOK\n`);
}

function identityOf(o: InstallOptions): KernelIdentity | undefined {
  const identityFlags = [o.tokenFile, o.curator, o.curatorKey, o.dataset];
  if (o.analyst === undefined) {
    if (identityFlags.some((f) => f !== undefined)) throw new BadInputError("--token-file, --curator, --curator-key and --dataset go with --analyst");
    return undefined;
  }
  if (o.tokenFile === undefined) {
    throw new BadInputError("--analyst needs --token-file FILE: a file holding your token, readable only by you (chmod 600)");
  }
  return {
    analyst: o.analyst,
    tokenFile: o.tokenFile,
    curator: o.curator ?? EMBEDDED_CURATOR,
    ...(o.curatorKey !== undefined ? { curatorKey: o.curatorKey } : {}),
    ...(o.dataset !== undefined ? { dataset: o.dataset } : {}),
  };
}
