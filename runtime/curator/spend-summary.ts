/**
 * What the curator tells an analyst about their spend: the cap of an account, the SpendSummary sent
 * with every open/spend/preview/release, and the over-cap refusal (which carries the same summary).
 * An account is (analyst, population): the amounts are the population's, over all its datasets.
 */
import { bestEpsilon, Rational } from "../core/index.js";
import { OverCapError } from "../errors.js";
import { formatAmount } from "../protocol/format.js";
import type { SpendSummary } from "../protocol/messages.js";
import { exactDecimal } from "./aggregates/budget.js";
import type { DatasetPolicy } from "./policy.js";

/** The cap in the accounting unit (epsilon for pure, rho for zCDP); one population's datasets agree on it. */
export function capOf(d: DatasetPolicy): Rational {
  return d.accounting.mode === "pure" ? d.accounting.capEpsilon : d.accounting.capRho;
}

/**
 * `spent` is the analyst's exact total on the dataset's population, in the accounting unit; zCDP
 * summaries also state the best valid epsilon at delta and how it was obtained (docs/methods.md
 * §22): `pure` is the plain-composition sum of the account's releases when every one of them was
 * pure epsilon-DP, null otherwise (or unknown). The cap check stays in rho (capOf): the reported
 * epsilon can be smaller than the cap's conversion would suggest, never larger than a valid bound.
 */
export function spendSummary(analyst: string, d: DatasetPolicy, spent: Rational, releases: number, pure: Rational | null = null): SpendSummary {
  const acc = d.accounting;
  const zero = Rational.ZERO;
  if (acc.mode === "pure") {
    return {
      analyst,
      dataset: d.name,
      population: d.population,
      mode: "pure",
      spentEpsilon: spent.toString(),
      capEpsilon: acc.capEpsilon.toString(),
      remainingEpsilon: acc.capEpsilon.sub(spent).max(zero).toString(),
      releases,
    };
  }
  const stated = spent.isZero() ? { epsilon: zero, by: "plain composition" as const } : bestEpsilon(spent, pure, acc.delta);
  const spentEpsilon = stated.epsilon;
  return {
    analyst,
    dataset: d.name,
    population: d.population,
    mode: "zcdp",
    spentEpsilon: spentEpsilon.toString(),
    capEpsilon: acc.capEpsilon.toString(),
    remainingEpsilon: acc.capEpsilon.sub(spentEpsilon).max(zero).toString(),
    spentRho: spent.toString(),
    capRho: acc.capRho.toString(),
    remainingRho: acc.capRho.sub(spent).max(zero).toString(),
    delta: exactDecimal(acc.delta),
    epsilonBy: stated.by,
    releases,
  };
}

/**
 * The refusal of a release that would cross the cap; names amounts, never a data value. Amounts
 * are decimals with the accounting unit's symbol, rounded so the refusal never reads as if the ask
 * fitted: the cost and the spend up, what is left down (runtime/protocol/format.ts formatAmount).
 */
export function overCapError(analyst: string, d: DatasetPolicy, cost: Rational, spent: Rational, releases: number, pure: Rational | null = null): OverCapError {
  const cap = capOf(d);
  const unit = d.accounting.mode === "pure" ? "ε" : "ρ";
  const up = (x: Rational): string => formatAmount(x.toString(), "up");
  const down = (x: Rational): string => formatAmount(x.toString(), "down");
  return new OverCapError(
    `over the cap: this query costs ${unit} ${up(cost)}, but ${analyst} has ${unit} ` +
      `${down(cap.sub(spent).max(Rational.ZERO))} left of the cap ${down(cap)} on population ${d.population} ` +
      `(dataset ${d.name} and every other dataset over the same people; spent ${up(spent)}); nothing was spent`,
    { spend: spendSummary(analyst, d, spent, releases, pure) },
  );
}
