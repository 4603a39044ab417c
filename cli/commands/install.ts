/** `hush install [--user | --prefix DIR]`: the Jupyter kernelspec "TypeScript (hush)". */
import { installKernelspec } from "../../kernel/kernelspec.js";

export async function runInstall(o: { user?: boolean; prefix?: string }, out: (s: string) => void): Promise<void> {
  const { dir } = await installKernelspec(o.prefix !== undefined ? { prefix: o.prefix } : { user: true });
  out(`installed kernelspec "hush" in ${dir}\n`);
  out(`in JupyterLab pick "TypeScript (hush)"; headless: hush run NOTEBOOK\n`);
}
