/**
 * Project rule (issue: "Nothing in the noise path uses Math.random or floating-point arithmetic"):
 * no source file under runtime/ calls Math.random, and the core's sampler files use no
 * transcendental float function. A static scan, so a regression shows up as a failing test.
 */
import { readdirSync, readFileSync, statSync } from "node:fs";
import { join } from "node:path";
import { fileURLToPath } from "node:url";
import { describe, expect, it } from "vitest";

const root = fileURLToPath(new URL("../../", import.meta.url));

function sources(dir: string): string[] {
  const out: string[] = [];
  for (const name of readdirSync(dir)) {
    const p = join(dir, name);
    if (statSync(p).isDirectory()) out.push(...sources(p));
    else if (name.endsWith(".ts") && !name.endsWith(".test.ts")) out.push(p);
  }
  return out;
}

describe("no float randomness under runtime/", () => {
  it("no runtime source calls Math.random", () => {
    const offenders = sources(join(root, "runtime")).filter((f) => /Math\.random/.test(readFileSync(f, "utf8")));
    expect(offenders).toEqual([]);
  });
  it("the samplers and the byte source use no float math functions", () => {
    for (const f of ["runtime/core/samplers.ts", "runtime/core/random.ts"]) {
      const text = readFileSync(join(root, f), "utf8");
      expect(text, f).not.toMatch(/Math\.(random|exp|log|sqrt|pow|sin|cos)\b/);
    }
  });
});
