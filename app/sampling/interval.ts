import type { EstimateSum } from "./estimate";

/**
 * z = Φ⁻¹(0.975), the standard normal quantile for a two-sided 95% interval
 * (NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.6.7.1, gives 1.96;
 * this is the value to double precision).
 */
export const Z95 = 1.959963984540054;

/** Below this many uncertain kept records an interval is flagged `rough`. */
export const ROUGH_BELOW = 10;

export interface Interval {
  estimate: number;
  stdError: number;
  ci95: [low: number, high: number];
  /** Fewer than ROUGH_BELOW uncertain records: the normal approximation is weak. */
  rough: boolean;
  kept: number;
}

/**
 * The 95% interval estimate ± z·√Var̂ of a subset sum, by the normal
 * approximation (the estimate is a sum of many independent-ish terms; DLT 2007
 * show the terms are uncorrelated). The lower bound is never below the part known
 * for certain (kept records with w ≥ τ) nor below 0; it is flagged rough when
 * fewer than 10 uncertain kept records contribute, where the approximation is poor.
 *
 * @example
 * toInterval({ estimate: 1000, variance: 2500, certain: 0, kept: 40, uncertain: 40 })
 * // { estimate: 1000, stdError: 50, ci95: [902.0018…, 1097.998…], rough: false, kept: 40 }
 */
export function toInterval(sum: EstimateSum): Interval {
  const stdError = Math.sqrt(Math.max(0, sum.variance));
  const half = Z95 * stdError;
  return {
    estimate: sum.estimate,
    stdError,
    ci95: [Math.max(sum.estimate - half, sum.certain, 0), sum.estimate + half],
    rough: sum.uncertain < ROUGH_BELOW,
    kept: sum.kept,
  };
}
