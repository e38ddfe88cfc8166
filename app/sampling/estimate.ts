/**
 * Subset-sum estimators over a priority sample (Duffield, Lund, Thorup,
 * J. ACM 54(6), 2007). All of them are sums of per-record terms, so the sum
 * over any subset Q chosen after sampling is the sum over the kept records in Q.
 */

/** Running totals of one estimate; add them up across records and reservoirs. */
export interface EstimateSum {
  /** Σ x̂_i: the unbiased estimate of Σ_{i∈Q} x_i. */
  estimate: number;
  /** Σ v̂_i: the unbiased estimate of the variance of `estimate`. */
  variance: number;
  /** Σ x_i over kept records with p_i = 1 (w_i ≥ τ): known exactly, no variance. */
  certain: number;
  /** Kept records that contributed. */
  kept: number;
  /** Of those, records with p_i < 1 (the ones that carry the error). */
  uncertain: number;
  /** The largest single uncertain term x_i/p_i (0 when none): how much one term can dominate. */
  maxTerm: number;
}

/** The additive identity: an empty subset. */
export const EMPTY_SUM: Readonly<EstimateSum> = Object.freeze({ estimate: 0, variance: 0, certain: 0, kept: 0, uncertain: 0, maxTerm: 0 });

/**
 * p_i = min(1, w_i/τ): the probability that record i is kept, conditioned on
 * the priorities of the other records (DLT 2007, §2; τ = 0 means every record
 * seen was kept, so p = 1).
 *
 * @example inclusionProbability(300, 1200) // 0.25
 */
export function inclusionProbability(weight: number, tau: number): number {
  return tau <= weight ? 1 : weight / tau;
}

/**
 * Adds the Horvitz–Thompson term of one kept record for an attribute x:
 * x̂ = x/p and v̂ = x²(1 − p)/p² with p = min(1, w/τ). With x = w this is
 * ŵ = max(w, τ) and v̂ = τ·max(0, τ − w) (DLT 2007, Theorem 1 and §5).
 * Mutates and returns `into` so hot loops allocate nothing.
 *
 * @example
 * addRecord({ ...EMPTY_SUM }, 1200, 300, 300)
 * // { estimate: 1200, variance: 1080000, certain: 0, kept: 1, uncertain: 1, maxTerm: 1200 }
 */
export function addRecord(into: EstimateSum, tau: number, weight: number, x: number): EstimateSum {
  into.kept++;
  if (tau <= weight) {
    into.estimate += x;
    into.certain += x;
    return into;
  }
  const p = weight / tau;
  const term = x / p;
  into.estimate += term;
  into.variance += (x * x * (1 - p)) / (p * p);
  into.uncertain++;
  if (term > into.maxTerm) into.maxTerm = term;
  return into;
}

/**
 * Sums two estimates. Valid across records of one reservoir (the ŵ_i of distinct
 * records are uncorrelated: DLT 2007, Theorem 2) and across reservoirs sampled
 * independently (collectors, windows).
 *
 * @example addSums({ estimate: 5, variance: 1, certain: 2, kept: 2, uncertain: 1, maxTerm: 3 }, EMPTY_SUM).estimate // 5
 */
export function addSums(a: EstimateSum, b: EstimateSum): EstimateSum {
  return {
    estimate: a.estimate + b.estimate,
    variance: a.variance + b.variance,
    certain: a.certain + b.certain,
    kept: a.kept + b.kept,
    uncertain: a.uncertain + b.uncertain,
    maxTerm: Math.max(a.maxTerm, b.maxTerm),
  };
}

/**
 * Estimates Σ x_i over the records of a subset from one reservoir's kept records.
 *
 * @param tau the reservoir's threshold τ
 * @param kept the kept records (any iterable)
 * @param weight the sampling weight w_i of a kept record
 * @param value the attribute x_i to sum (defaults to the weight; `() => 1` counts flows)
 * @param include the subset predicate, chosen after sampling (defaults to all)
 *
 * @example
 * const kept = [{ w: 5000 }, { w: 300 }];
 * estimateSubset(1000, kept, (r) => r.w).estimate // 5000 + 1000 = 6000
 * estimateSubset(1000, kept, (r) => r.w, () => 1).estimate // flows: 1 + 1000/300 ≈ 4.33
 */
export function estimateSubset<R>(
  tau: number,
  kept: Iterable<R>,
  weight: (record: R) => number,
  value: (record: R) => number = weight,
  include: (record: R) => boolean = () => true,
): EstimateSum {
  const sum = { ...EMPTY_SUM };
  for (const record of kept) {
    if (include(record)) addRecord(sum, tau, weight(record), value(record));
  }
  return sum;
}
