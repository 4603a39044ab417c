/** `hush install [--user | --prefix DIR]`: the Jupyter kernelspec "TypeScript (hush)". */
import { installKernelspec } from "../../kernel/kernelspec.js";

export function runInstall(o: { user?: boolean; prefix?: string }, out: (s: string) => void): void {
  const { dir } = installKernelspec(o.prefix !== undefined ? { prefix: o.prefix } : { user: true });
  out(`installed kernelspec "hush" in ${dir}\n`);
  out(`in JupyterLab pick "TypeScript (hush)"; headless: hush run NOTEBOOK\n`);
}
