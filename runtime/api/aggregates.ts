/**
 * The aggregates a sealed dataset answers, written once and shared by the table (which runs them
 * and spends budget) and its `preview` (which only asks what they would cost). Each method builds
 * the protocol Measure; the subclass decides what to do with it.
 */
import { BadInputError } from "../errors.js";
import type { Measure } from "../protocol/messages.js";
import { PLAN_LIMITS } from "../protocol/limits.js";
import type { SpendOptions } from "./privacy.js";

/** Options of a histogram: the number of equal-width bins over the column's declared range, and the spend. */
export type HistogramOptions = SpendOptions & {
  /** Number of equal-width bins over the declared range (1 to 1000). */
  bins: number;
};

/**
 * Options of a regression: the spend, and optionally the reference level of category or boolean
 * predictors (`{ reference: { district: "Riverside" } }`); the default is each column's first
 * declared value, or false.
 */
/** What a regression adds to its spend: the reference level of category and boolean predictors. */
export type RegressionChoices = {
  reference?: Record<string, string | boolean>;
};
export type RegressionOptions = SpendOptions & RegressionChoices;

function columnList(v: unknown, what: string, min: number, max: number): string[] {
  const list = typeof v === "string" ? [v] : v;
  if (!Array.isArray(list) || list.length < min || list.length > max) {
    throw new BadInputError(`${what}: name ${min === max ? min : `${min} to ${max}`} columns (a list of column names)`);
  }
  return list.map((c) => columnArg(c, what));
}

function references(v: unknown): { column: string; value: string }[] | undefined {
  if (v === undefined) return undefined;
  if (v === null || typeof v !== "object" || Array.isArray(v)) {
    throw new BadInputError(`regress: reference must be an object such as { district: "Riverside" }`);
  }
  return Object.entries(v as Record<string, unknown>).map(([column, value]) => {
    if (typeof value !== "string" && typeof value !== "boolean") {
      throw new BadInputError(`regress: the reference level of ${JSON.stringify(column.slice(0, 40))} must be one of its declared values (a string, or true/false)`);
    }
    return { column, value: String(value) };
  });
}

function columnArg(v: unknown, what: string): string {
  if (typeof v !== "string" || v.trim() === "") throw new BadInputError(`${what}: name a column (a non-empty string)`);
  return v;
}

function probabilities(ps: unknown, what: string): number[] {
  const list = Array.isArray(ps) ? ps : [ps];
  if (list.length === 0) throw new BadInputError(`${what}: list at least one probability`);
  list.forEach((p) => {
    if (typeof p !== "number" || !Number.isFinite(p) || p <= 0 || p >= 1) {
      throw new BadInputError(`${what}: each probability must lie strictly between 0 and 1 (e.g. 0.5 for the median), got ${String(p)}`);
    }
  });
  if (new Set(list).size !== list.length) throw new BadInputError(`${what}: lists the same probability twice`);
  return list as number[];
}

/**
 * The options of a preview: the spend it prices, and for a mean, variance or std the count of
 * values (per group) its expected error should assume. The true count is private, so the preview
 * needs an assumption for the error of the estimate itself; without one (and without the steward's
 * public size hint) it gives only the errors of the estimate's parts.
 */
export type PreviewOptions = SpendOptions & {
  /** Assumed count of values per group (a whole number, 1 to 1e15), for a mean's, variance's or std's own expected error. */
  assumeCount?: number;
};

export abstract class Aggregates<R, O extends SpendOptions = SpendOptions> {
  /**
   * Runs (or prices) one measure. `make` builds it and may throw on bad arguments, so the subclass
   * reports every refusal the same way; `what` names the method for error messages.
   */
  protected abstract measure(make: () => Measure, spend: O, what: string): Promise<R>;

  /** Number of rows (after the filter), per group when grouped with `.by(...)`. */
  count(spend: O): Promise<R> {
    return this.measure(() => ({ kind: "count" }), spend, "count");
  }

  /** Sum of a numeric column (values clamped to its declared range). */
  sum(column: string, spend: O): Promise<R> {
    return this.measure(() => ({ kind: "sum", column: columnArg(column, "sum(column)") }), spend, "sum");
  }

  /** Mean of a numeric column; the budget is split between a noisy sum and a noisy count. */
  mean(column: string, spend: O): Promise<R> {
    return this.measure(() => ({ kind: "mean", column: columnArg(column, "mean(column)") }), spend, "mean");
  }

  /** Variance of a numeric column. */
  variance(column: string, spend: O): Promise<R> {
    return this.measure(() => ({ kind: "variance", column: columnArg(column, "variance(column)") }), spend, "variance");
  }

  /** Standard deviation of a numeric column. */
  std(column: string, spend: O): Promise<R> {
    return this.measure(() => ({ kind: "std", column: columnArg(column, "std(column)") }), spend, "std");
  }

  /** One quantile, p in (0, 1), of a numeric column (exponential mechanism on the column's grid). */
  quantile(column: string, p: number, spend: O): Promise<R> {
    return this.measure(() => ({ kind: "quantile", column: columnArg(column, "quantile(column)"), p: probabilities(p, "quantile(p)") }), spend, "quantile");
  }

  /** Several quantiles at once, e.g. `[0.25, 0.5, 0.75]`; the budget is split evenly between them. */
  quantiles(column: string, ps: number[], spend: O): Promise<R> {
    return this.measure(() => ({ kind: "quantile", column: columnArg(column, "quantiles(column)"), p: probabilities(ps, "quantiles(ps)") }), spend, "quantiles");
  }

  /** The median (the 0.5 quantile) of a numeric column. */
  median(column: string, spend: O): Promise<R> {
    return this.measure(() => ({ kind: "quantile", column: columnArg(column, "median(column)"), p: [0.5] }), spend, "median");
  }

  /** Counts in equal-width bins over a numeric column's declared range: `histogram("age", { bins: 10, epsilon: 0.2 })`. */
  histogram(column: string, opts: O & { bins: number }): Promise<R> {
    return this.measure(
      () => {
        const bins = (opts as { bins?: unknown } | undefined)?.bins;
        if (typeof bins !== "number" || !Number.isInteger(bins) || bins < 1 || bins > PLAN_LIMITS.maxBins) {
          throw new BadInputError(`histogram: bins must be a whole number from 1 to ${PLAN_LIMITS.maxBins}, got ${String(bins)}`);
        }
        return { kind: "histogram", column: columnArg(column, "histogram(column)"), bins };
      },
      opts,
      "histogram",
    );
  }

  /** Counts for every pair of declared values of two category (or boolean) columns. */
  crosstab(rows: string, cols: string, spend: O): Promise<R> {
    return this.measure(() => ({ kind: "crosstab", rows: columnArg(rows, "crosstab(rows)"), cols: columnArg(cols, "crosstab(cols)") }), spend, "crosstab");
  }

  /**
   * Linear regression of a numeric column on numeric, category and boolean columns, with an
   * intercept: `regress("wait_minutes", ["age", "district"], { epsilon: 1 })`. Coefficients (in the
   * columns' units per unit of each predictor; for a category level, the difference from the
   * reference level), R² and the rows used, each with an error bar from a simulation of the noise
   * (docs/methods.md §18). The budget is split evenly over the noisy sums of products.
   */
  regress(response: string, predictors: string | string[], opts: O & RegressionChoices): Promise<R> {
    return this.measure(
      () => {
        const reference = references((opts as { reference?: unknown } | undefined)?.reference);
        return {
          kind: "regression",
          response: columnArg(response, "regress(response)"),
          predictors: columnList(predictors, "regress(predictors)", 1, PLAN_LIMITS.maxDesignColumns - 1),
          ...(reference && reference.length ? { reference } : {}),
        };
      },
      opts,
      "regress",
    );
  }

  /** Pearson correlations of every pair of 2 to 12 numeric columns, each with an error bar (docs/methods.md §19). */
  correlate(columns: string[], spend: O): Promise<R> {
    return this.measure(() => ({ kind: "correlation", columns: columnList(columns, "correlate(columns)", 2, PLAN_LIMITS.maxCorrelationColumns) }), spend, "correlate");
  }

  /**
   * A summary of every column (count; mean, std and median of numbers; counts of categories), budget
   * split evenly. `{ clampedShares: true }` adds, as one more part, how many values of each numeric
   * column were clamped at its declared bounds (see clampedShares).
   */
  describe(spend: O & { clampedShares?: boolean }): Promise<R> {
    return this.measure(
      () => {
        const flag = (spend as { clampedShares?: unknown } | undefined)?.clampedShares;
        if (flag !== undefined && typeof flag !== "boolean") throw new BadInputError(`describe: clampedShares must be true or false, got ${String(flag)}`);
        return flag ? { kind: "describe", clamped: true } : { kind: "describe" };
      },
      spend,
      "describe",
    );
  }

  /**
   * How many values of numeric columns were clamped at their declared bounds: noisy counts of rows
   * whose raw value lay below the lower bound and above the upper bound, the noisy number of rows
   * with a value, and the two shares with error bars. A separate release with its own cost, e.g.
   * `clampedShares(["age", "wait_minutes"], { epsilon: 0.2 })`; a large share says the declared
   * range is too narrow and the other answers are biased by clamping.
   */
  clampedShares(columns: string | string[], spend: O): Promise<R> {
    return this.measure(
      () => {
        const list = Array.isArray(columns) ? columns : [columns];
        if (list.length === 0) throw new BadInputError("clampedShares(columns): name at least one numeric column");
        if (list.length > PLAN_LIMITS.maxClampedColumns) throw new BadInputError(`clampedShares(columns): at most ${PLAN_LIMITS.maxClampedColumns} columns`);
        const names = list.map((c) => columnArg(c, "clampedShares(columns)"));
        if (new Set(names).size !== names.length) throw new BadInputError("clampedShares(columns): lists the same column twice");
        return { kind: "clamped", columns: names };
      },
      spend,
      "clampedShares",
    );
  }
}
