/**
 * Linear regression and correlation from noisy sufficient statistics (docs/methods.md §18, §19).
 *
 * Both release the moment matrix G of a list of integer-coded factors over the kept rows that have
 * every used column (complete cases; a public rule): G[a][b] = sum z_a z_b. Factor 0 is the
 * constant 1 (so G[0][0] is the row count and G[0][a] the plain sums). The codes:
 *   numeric column x on grid g, [L, U] = [Lu g, Uu g]:  z = 2 x/g - (Lu + Uu)  (centred half-units),
 *                                                       |z| <= W = Uu - Lu,  x = (g/2) z + (g/2)(Lu + Uu)
 *   indicator of one category level (or boolean true):  z in {0, 1}
 * Sensitivity (docs/methods.md §18), under add/remove of one unit, which keeps at most k = maxRows
 * rows: each row moves G[a][b] by z_a z_b, at most B_a B_b with B = W for a numeric code and 1 for
 * the constant or an indicator, so each entry is one scalar query with L1 = L2 = k B_a B_b (in
 * units of the product of the two codes). Two indicators of one column never both hold (their
 * entry is 0 on every dataset, so it is not released), and an indicator times itself is the
 * indicator (its entry is G[0][a], released once).
 *
 * Budget: the m released entries split the ask evenly, 1/m each (sequential composition,
 * docs/methods.md §1), so a pure epsilon ask gives each entry discrete Laplace noise at scale
 * k B_a B_b m/epsilon and a rho ask discrete Gaussian noise with sigma^2 = (k B_a B_b)^2 m/(2 rho).
 *
 * The data part is the one function `fetchMoments` (an engine call, `moment` terms of
 * engines/types.ts, that returns the entries as exact integers); the CPU part (noise, exact solve, simulation) is the finisher in finishers.ts.
 */
import { Rational, simulationDraws } from "../../core/index.js";
import { BadInputError } from "../../errors.js";
import { PLAN_LIMITS } from "../../protocol/limits.js";
import type { Preview, ReleaseRow } from "../../protocol/messages.js";
import type { DataEngine, MomentCode, SchemaColumn } from "../engines/types.js";
import type { ColumnPolicy } from "../policy.js";
import { resolveColumn } from "../sql.js";
import { type Allocator, type NoisySpec, exactDecimal, halfWidthValue, mechanismRecord } from "./budget.js";
import { type Cpu, type Piece, type Source, fetchCells, rowsPerUnit } from "./common.js";
import type { MomentEntry, MomentsRecipe } from "./finishers.js";

type NumericPolicy = Extract<ColumnPolicy, { type: "integer" | "number" }>;

/** One integer-coded factor of the moment matrix. */
interface Factor {
  /** Label shown for the term: "(intercept)", a column name, or "district: Riverside". */
  label: string;
  kind: "constant" | "numeric" | "indicator";
  /** The column the code is read from (null for the constant). */
  col: SchemaColumn | null;
  /** Largest |code| over one row (B in the file header). */
  bound: bigint;
  /** Column units per unit of code, and the shift: x = scale z + shift (constant: 1, 0). */
  scale: Rational;
  shift: Rational;
  /** The integer code the engine computes per row (engines/types.ts MomentCode). */
  code: MomentCode;
  /** For indicators: which column they belong to (two of one column never both hold). */
  group?: string;
}

function shown(name: string): string {
  return JSON.stringify(name.length > 40 ? `${name.slice(0, 40)}...` : name);
}

const CONSTANT: Factor = {
  label: "(intercept)",
  kind: "constant",
  col: null,
  bound: 1n,
  scale: Rational.ONE,
  shift: Rational.ZERO,
  code: { kind: "one" },
};

function numericFactor(col: SchemaColumn): Factor {
  const c = col.policy as NumericPolicy;
  const width = c.grid.upperUnits - c.grid.lowerUnits;
  const c2 = c.grid.lowerUnits + c.grid.upperUnits;
  const half = c.grid.step.div(2n);
  return {
    label: c.name,
    kind: "numeric",
    col,
    // A range of one grid point codes every row as 0; bound 1 keeps the sensitivity positive.
    bound: width > 0n ? width : 1n,
    scale: half,
    shift: half.mul(c2),
    code: { kind: "centred", column: c.name, twiceCentre: c2 },
  };
}

function indicatorFactors(col: SchemaColumn, reference: string | undefined, path: string): Factor[] {
  const p = col.policy;
  if (p.type === "boolean") {
    if (reference !== undefined && reference !== "true" && reference !== "false") {
      throw new BadInputError(`${path}: the reference level of boolean column ${shown(p.name)} must be "true" or "false"`);
    }
    const ref = reference ?? "false";
    const level = ref === "false" ? "true" : "false";
    return [
      {
        label: `${p.name}: ${level} (vs ${ref})`,
        kind: "indicator",
        col,
        bound: 1n,
        scale: Rational.ONE,
        shift: Rational.ZERO,
        code: { kind: "truth", column: p.name, value: level === "true" },
        group: p.name,
      },
    ];
  }
  if (p.type !== "category") throw new Error("internal: indicator of a non-keyed column");
  const ref = reference ?? p.values[0];
  const refIndex = p.values.indexOf(ref);
  if (refIndex < 0) throw new BadInputError(`${path}: the reference level is not a declared value of ${shown(p.name)}`);
  return p.values.flatMap((v, i) =>
    i === refIndex
      ? []
      : [
          {
            label: `${p.name}: ${v} (vs ${ref})`,
            kind: "indicator" as const,
            col,
            bound: 1n,
            scale: Rational.ONE,
            shift: Rational.ZERO,
            code: { kind: "level", column: p.name, index: i },
            group: p.name,
          },
        ],
  );
}

/** Number of design columns a predictor adds (from the policy alone): 1, or levels - 1. */
function designWidth(p: ColumnPolicy): number {
  if (p.type === "category") return p.values.length - 1;
  return 1;
}

/**
 * The released entries of G for a factor list: every (a, b), a <= b, except the structural ones
 * (two indicators of one column: always 0; an indicator squared: equal to G[0][a]).
 */
function layout(factors: Factor[]): { released: [number, number][]; alias: { a: number; b: number; from: number }[] } {
  const released: [number, number][] = [];
  const alias: { a: number; b: number; from: number }[] = [];
  const at = new Map<string, number>();
  for (let a = 0; a < factors.length; a++) {
    for (let b = a; b < factors.length; b++) {
      const fa = factors[a];
      const fb = factors[b];
      if (fa.kind === "indicator" && fb.kind === "indicator" && fa.group === fb.group) {
        if (a === b) alias.push({ a, b, from: -1 }); // resolved below to G[0][a]
        continue; // different levels of one column: structurally 0
      }
      at.set(`${a},${b}`, released.length);
      released.push([a, b]);
    }
  }
  for (const x of alias) x.from = at.get(`0,${x.a}`)!;
  return { released, alias };
}

/** Confidence range of the simulation's error bars: a = 1 - confidence >= 0.01 keeps draws <= 10000. */
export const MOMENTS_MAX_CONFIDENCE = 0.99;

interface MomentsPlan {
  factors: Factor[];
  specs: NoisySpec[];
  recipe: Omit<MomentsRecipe, "kind" | "terms" | "response" | "pairs" | "column" | "responseScale" | "responseShift">;
  mechanisms: Piece["mechanisms"];
  cost: Rational;
  halfWidths: Preview["halfWidths"];
  steps: number;
  used: SchemaColumn[];
}

function planMoments(alloc: Allocator, src: Source, factors: Factor[], what: string): MomentsPlan {
  if (alloc.accuracyFirst) {
    throw new BadInputError(`plan.privacy.within: accuracy-first asks do not apply to ${what} (its error bars depend on the data); ask with epsilon or rho and preview the cost`);
  }
  const conf = alloc.confidence;
  if (conf > MOMENTS_MAX_CONFIDENCE) {
    throw new BadInputError(`plan.confidence: ${what} error bars come from a simulation and are offered up to ${MOMENTS_MAX_CONFIDENCE} confidence`);
  }
  const k = BigInt(rowsPerUnit(src));
  const { released, alias } = layout(factors);
  const m = BigInt(released.length);
  const share = Rational.of(1n, m);
  const specs = released.map(([a, b]) => {
    const fa = factors[a];
    const fb = factors[b];
    // L1 = L2 = k B_a B_b for this entry (file header; docs/methods.md §18).
    const target = a === 0 && b === 0 ? `count of complete rows (for the ${what})` : a === 0 ? `sum of ${fb.label} (for the ${what})` : `sum of ${fa.label} x ${fb.label} (for the ${what})`;
    return alloc.additive(target, k * fa.bound * fb.bound, share, fa.scale.mul(fb.scale));
  });
  // The confidence as written (0.9, not the binary64 below it): it sets the draws and the tail rank.
  const miss = Rational.ONE.sub(Rational.parse(String(conf)));
  const draws = simulationDraws(miss);
  const entries: MomentEntry[] = released.map(([a, b], i) => ({ a, b, law: specs[i].law }));
  const used = [...new Map(factors.filter((f) => f.col !== null).map((f) => [f.col!.ident, f.col!])).values()];
  return {
    factors,
    specs,
    recipe: { factors: factors.length, entries, alias, confidence: conf, miss, draws, countH: halfWidthValue(specs[0], conf) },
    mechanisms: specs.map(mechanismRecord),
    cost: specs.reduce((s, x) => s.add(x.cost), Rational.ZERO),
    halfWidths: specs.map((s) => ({ stat: s.target, column: null, halfWidth: exactDecimal(halfWidthValue(s, conf)) })),
    // Public size class for reply pacing (workers/pacing.ts): the simulation's work grows with
    // draws x entries; one step per 1500 of them fits the work measured on the demo data (2000
    // draws x 21 entries, SQL included: about 1 s on 2 shared cores, against a first slot of 1.4 s).
    steps: 1 + Math.ceil((draws * released.length) / 1500),
    used,
  };
}

/**
 * The one SQL step: every released entry of G as an exact integer, over the kept rows where every
 * used column is present. This is the only function that reads data; a port to another engine
 * replaces just this.
 */
async function fetchMoments(engine: DataEngine, src: Source, factors: Factor[], released: readonly [number, number][], used: SchemaColumn[]): Promise<bigint[]> {
  const complete = used.map((c) => c.policy.name);
  const cells = await fetchCells(
    engine,
    src,
    [],
    released.map(([a, b]) => ({ kind: "moment" as const, a: factors[a].code, b: factors[b].code, complete })),
  );
  return cells[0];
}

/** A piece's `run` for a regression or correlation: its released moments, then the finisher. */
function momentsRun(src: Source, factors: Factor[], used: SchemaColumn[], recipe: MomentsRecipe): Piece["run"] {
  return async (engine: DataEngine, cpu: Cpu): Promise<ReleaseRow[]> => {
    const data = await fetchMoments(engine, src, factors, recipe.entries.map((e) => [e.a, e.b]), used);
    return cpu.finish("moments", recipe, [data]);
  };
}

function caution(what: string): string[] {
  return [
    `The ${what} uses only rows where every column it names is present (complete cases); values are clamped to their declared ranges first, which can bias slopes and correlations towards zero when a range is too narrow.`,
    `If the noisy statistics leave no valid answer (the noisy cross-product matrix is not positive definite, or a noisy variance is not positive), the estimate is reported as unavailable: the privacy spend is already done. Ask again with a larger epsilon or rho, or with fewer columns.`,
  ];
}

/** Linear regression of `response` on `predictors` (numeric columns, category and boolean columns as indicators). */
export function regressionPiece(
  alloc: Allocator,
  src: Source,
  response: string,
  predictors: readonly string[],
  references: readonly { column: string; value: string }[],
): Piece {
  const t = src.t;
  const refs = new Map<string, string>();
  references.forEach((r, i) => {
    if (!predictors.includes(r.column)) throw new BadInputError(`plan.measure.reference[${i}].column: names a column that is not a predictor`);
    if (refs.has(r.column)) throw new BadInputError(`plan.measure.reference[${i}]: gives a reference level for the same column twice`);
    refs.set(r.column, r.value);
  });
  const y = resolveColumn(t, response, "plan.measure.response");
  if (y.policy.type !== "integer" && y.policy.type !== "number") {
    throw new BadInputError(`plan.measure.response: regression needs a numeric response; ${shown(response)} is ${y.policy.type}`);
  }
  const seen = new Set<string>([response]);
  const cols = predictors.map((p, i) => {
    const path = `plan.measure.predictors[${i}]`;
    if (seen.has(p)) throw new BadInputError(`${path}: names the response or another predictor again`);
    seen.add(p);
    const col = resolveColumn(t, p, path);
    const type = col.policy.type;
    if (type === "date") throw new BadInputError(`${path}: date columns cannot be predictors; ${shown(p)} is a date`);
    if (type === "category" && (col.policy as Extract<ColumnPolicy, { type: "category" }>).values.length < 2) {
      throw new BadInputError(`${path}: category column ${shown(p)} declares fewer than two values, so it adds no indicator`);
    }
    return { col, path, type };
  });
  // The limit on design columns, from the policy alone, before any factor, SQL or debit.
  const width = 1 + cols.reduce((n, c) => n + designWidth(c.col.policy), 0);
  if (width > PLAN_LIMITS.maxDesignColumns) {
    throw new BadInputError(
      `plan.measure.predictors: the design has ${width} columns (intercept, numeric predictors and one indicator per non-reference category level), above the curator's limit of ${PLAN_LIMITS.maxDesignColumns} (maxDesignColumns)`,
    );
  }
  const factors: Factor[] = [CONSTANT];
  for (const c of cols) {
    if (c.type === "integer" || c.type === "number") factors.push(numericFactor(c.col));
    else factors.push(...indicatorFactors(c.col, refs.get(c.col.policy.name), `plan.measure.reference`));
  }
  const yf = numericFactor(y);
  factors.push(yf);
  const plan = planMoments(alloc, src, factors, "regression");
  const design = factors.slice(0, -1);
  const recipe: MomentsRecipe = {
    ...plan.recipe,
    kind: "regression",
    column: response,
    response: factors.length - 1,
    terms: design.map((f) => ({ label: f.label, scale: f.scale, shift: f.shift })),
    responseScale: yf.scale,
    responseShift: yf.shift,
    pairs: [],
  };
  const refNotes = cols
    .filter((c) => c.type === "category" || c.type === "boolean")
    .map((c) => {
      const p = c.col.policy;
      const ref = refs.get(p.name) ?? (p.type === "category" ? p.values[0] : "false");
      return `${p.name} enters as indicators, one per declared value other than the reference level ${ref}; each coefficient is the difference from ${ref}.`;
    });
  const m = plan.specs.length;
  return {
    mechanisms: plan.mechanisms,
    cost: plan.cost,
    halfWidths: plan.halfWidths,
    previewNotes: [
      `A regression's error bars depend on the noisy statistics, so they are given with the release; the half-widths shown are those of its ${m} noisy sums (numeric columns centred at the middle of their ranges).`,
    ],
    notes: [
      `Linear regression of ${response} on ${predictors.join(", ")} with an intercept, from ${m} noisy sums of products (the sufficient statistics), each given 1/${m} of the budget.`,
      ...refNotes,
      ...caution("regression"),
    ],
    methods: [
      `regression: coefficients solve the noisy normal equations exactly; error bars by parametric simulation (${plan.recipe.draws} redraws of the known noise laws around the released sums, exact re-solve, percentile interval from order statistics; docs/methods.md §18)`,
    ],
    size: design.length + 2,
    steps: plan.steps,
    run: momentsRun(src, factors, plan.used, recipe),
  };
}

/** Pearson correlation matrix (each pair once) of 2 or more numeric columns. */
export function correlationPiece(alloc: Allocator, src: Source, columns: readonly string[]): Piece {
  const t = src.t;
  const seen = new Set<string>();
  const cols = columns.map((name, i) => {
    const path = `plan.measure.columns[${i}]`;
    if (seen.has(name)) throw new BadInputError(`${path}: names a column twice`);
    seen.add(name);
    const col = resolveColumn(t, name, path);
    if (col.policy.type !== "integer" && col.policy.type !== "number") {
      throw new BadInputError(`${path}: correlation needs numeric columns; ${shown(name)} is ${col.policy.type}`);
    }
    return col;
  });
  const factors: Factor[] = [CONSTANT, ...cols.map(numericFactor)];
  const plan = planMoments(alloc, src, factors, "correlation");
  const pairs: { i: number; j: number; a: string; b: string }[] = [];
  for (let i = 1; i < factors.length; i++) for (let j = i + 1; j < factors.length; j++) pairs.push({ i, j, a: factors[i].label, b: factors[j].label });
  const recipe: MomentsRecipe = { ...plan.recipe, kind: "correlation", column: null, response: -1, terms: [], responseScale: Rational.ONE, responseShift: Rational.ZERO, pairs };
  const m = plan.specs.length;
  return {
    mechanisms: plan.mechanisms,
    cost: plan.cost,
    halfWidths: plan.halfWidths,
    previewNotes: [
      `A correlation's error bars depend on the noisy statistics, so they are given with the release; the half-widths shown are those of its ${m} noisy sums (columns centred at the middle of their ranges).`,
    ],
    notes: [
      `Pearson correlations of ${columns.join(", ")} (each pair once), from ${m} noisy sums, squares and cross-products, each given 1/${m} of the budget.`,
      ...caution("correlation"),
    ],
    methods: [
      `correlation: from the noisy sums; error bars by parametric simulation (${plan.recipe.draws} redraws of the known noise laws around the released sums, percentile interval from order statistics, clamped to [-1, 1]; docs/methods.md §19)`,
    ],
    size: pairs.length + 1,
    steps: plan.steps,
    run: momentsRun(src, factors, plan.used, recipe),
  };
}
