import type { EstimateSum } from "./estimate";

/**
 * z = Φ⁻¹(0.975), the standard normal quantile for a two-sided 95% interval
 * (NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.6.7.1, gives 1.96;
 * this is the value to double precision).
 */
export const Z95 = 1.959963984540054;

/** Below this many uncertain kept records an interval is flagged `rough`. */
export const ROUGH_BELOW = 10;

/**
 * Which method gave an interval: `exact` (every record of the range was kept, τ = 0: no
 * error), `normal` (estimate ± z·SE), `gamma` (the uncertain part as a weighted Poisson sum,
 * Fay and Feuer 1997), `no-match` (no kept record matched: 0 up to a bound).
 */
export type IntervalMethod = "exact" | "normal" | "gamma" | "no-match";

/** What a sum alone does not tell about the range it was taken over (see toInterval). */
export interface IntervalContext {
  /**
   * The largest amount one record of the range that was not kept could add to the metric:
   * the largest τ of the range's windows times the most the metric can be per unit of weight
   * (1 for bytes, packets and flows under a byte weight). 0 when every window has τ = 0.
   */
  unseenTerm: number;
  /** The range's exact total of the metric, when known: no subset exceeds it. */
  cap?: number;
}

export interface Interval {
  estimate: number;
  stdError: number;
  ci95: [low: number, high: number];
  /** The normal approximation would be poor here (see roughReason). */
  rough: boolean;
  /** Why rough, in words; null when not rough. */
  roughReason: string | null;
  method: IntervalMethod;
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
export function toInterval(sum: EstimateSum, _context: IntervalContext = { unseenTerm: 0 }): Interval {
  const stdError = Math.sqrt(Math.max(0, sum.variance));
  const half = Z95 * stdError;
  const rough = sum.uncertain < ROUGH_BELOW;
  return {
    estimate: sum.estimate,
    stdError,
    ci95: [Math.max(sum.estimate - half, sum.certain, 0), sum.estimate + half],
    rough,
    roughReason: rough ? `${sum.uncertain} uncertain kept record${sum.uncertain === 1 ? "" : "s"} (fewer than ${ROUGH_BELOW})` : null,
    method: "normal",
    kept: sum.kept,
  };
}
