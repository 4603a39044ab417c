/**
 * Which datasets are about the same people. Spend is accounted per (analyst, population), not per
 * dataset name: two datasets over one source file are two views of the same patients, and a cap per
 * view would let one analyst spend the cap once per view on the same people.
 *
 * The rules (documented in DEVELOPERS.md, "Policy format"):
 * - A dataset's `population` names its population explicitly (a name of our own choosing, e.g.
 *   `clinic-patients`); several source files may be named into one population.
 * - A dataset without one joins the population named by the other datasets over the same file; if
 *   none names one, the file itself is the population, named after the file (`visits.csv`).
 * - An analyst's datasets of one population share that analyst's one cap, so they must agree on the
 *   accounting (mode, epsilon cap, delta): otherwise the shared account would have no single cap.
 *   Different analysts may hold different caps on the same people (a researcher and a student).
 */
import { realpathSync } from "node:fs";
import { basename } from "node:path";
import { exactDecimal } from "./aggregates/budget.js";
import type { DatasetPolicy } from "./policy.js";

type Fail = (path: string, what: string) => never;

/** The file behind a source path: a symlink or a second path to one file is the same people. */
function fileOf(source: string): string {
  try {
    return realpathSync(source);
  } catch (e: unknown) {
    // Missing or unreadable (the engine refuses such a source when it loads, naming the problem):
    // its path stands for it here.
    if (e instanceof Error && "code" in e && typeof e.code === "string") return source;
    throw e;
  }
}

function sameAccounting(a: DatasetPolicy, b: DatasetPolicy): boolean {
  const x = a.accounting;
  const y = b.accounting;
  if (x.mode !== y.mode || !x.capEpsilon.eq(y.capEpsilon)) return false;
  return x.mode === "pure" || (y.mode === "zcdp" && x.delta.eq(y.delta));
}

function accountingText(d: DatasetPolicy): string {
  const a = d.accounting;
  return a.mode === "pure" ? `pure, epsilon ${a.capEpsilon.toString()}` : `zcdp, epsilon ${a.capEpsilon.toString()} at delta ${exactDecimal(a.delta)}`;
}

/**
 * Sets `population` on every dataset (in place) and returns population -> dataset names.
 * `named` holds each dataset's explicit `population` field (undefined when absent).
 */
export function assignPopulations(datasets: Map<string, DatasetPolicy>, named: Map<string, string | undefined>, fail: Fail): Map<string, string[]> {
  // Explicit names over each source file; a file may be named into one population only.
  const namedOfFile = new Map<string, { population: string; dataset: string }>();
  const files = new Map([...datasets.values()].map((d) => [d.name, fileOf(d.source)]));
  for (const d of datasets.values()) {
    const p = named.get(d.name);
    if (p === undefined) continue;
    const earlier = namedOfFile.get(files.get(d.name)!);
    if (earlier !== undefined && earlier.population !== p) {
      fail(
        `datasets.${d.name}.population`,
        `is "${p}", but dataset ${earlier.dataset} reads the same file ${d.source} as population "${earlier.population}"; one file is one set of people`,
      );
    }
    namedOfFile.set(files.get(d.name)!, { population: p, dataset: d.name });
  }
  const explicitNames = new Set([...named.values()].filter((p): p is string => p !== undefined));
  // Default names come from the file name; two files of one name, or a file name equal to an
  // explicit population, would silently merge accounts of different people: refused instead.
  const fileOfDefault = new Map<string, { source: string; dataset: string }>();
  for (const d of datasets.values()) {
    const file = files.get(d.name)!;
    const p = named.get(d.name) ?? namedOfFile.get(file)?.population;
    if (p !== undefined) {
      d.population = p;
      continue;
    }
    const name = basename(file);
    const earlier = fileOfDefault.get(name);
    if (earlier !== undefined && earlier.source !== file) {
      fail(
        `datasets.${d.name}.source`,
        `reads ${d.source}, and dataset ${earlier.dataset} reads ${earlier.source}: two files named ${name}; give each dataset a population name (population: ...)`,
      );
    }
    if (explicitNames.has(name)) {
      fail(`datasets.${d.name}.source`, `the file name ${name} is also an explicit population name; give this dataset a population name (population: ...)`);
    }
    fileOfDefault.set(name, { source: file, dataset: d.name });
    d.population = name;
  }

  const members = new Map<string, string[]>();
  // (analyst, population) -> the first dataset granting that account.
  const accounts = new Map<string, DatasetPolicy>();
  for (const d of datasets.values()) {
    const list = members.get(d.population) ?? [];
    list.push(d.name);
    members.set(d.population, list);
    for (const analyst of d.analysts) {
      const key = `${analyst}\u0000${d.population}`;
      const head = accounts.get(key);
      if (head === undefined) {
        accounts.set(key, d);
      } else if (!sameAccounting(head, d)) {
        fail(
          `datasets.${d.name}.accounting`,
          `datasets ${head.name} and ${d.name} are one population ("${d.population}", the same people) and ${analyst} is granted both, ` +
            `so they share ${analyst}'s one cap and their accounting must agree: ${head.name} has ${accountingText(head)}, ${d.name} has ${accountingText(d)}`,
        );
      }
    }
  }
  return members;
}
