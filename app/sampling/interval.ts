import type { EstimateSum } from "./estimate";
import { gammaQuantile } from "./gamma";
import { normalQuantile } from "./normal-quantile";

/**
 * z = Φ⁻¹(0.975), the standard normal quantile for a two-sided 95% interval
 * (NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.6.7.1, gives 1.96;
 * this is the value to double precision).
 */
export const Z95 = 1.959963984540054;

/**
 * Fewer uncertain terms than this and the normal approximation is poor: the gamma interval
 * answers. Chosen by measurement (tests/sampling/coverage.test.ts; README, "How good are the
 * intervals").
 */
export const ROUGH_BELOW = 20;

/**
 * One term carrying more than this share of the variance (maxTerm²/Var̂) and the sum is too
 * skewed for the normal approximation: the gamma interval answers. Chosen by measurement, as
 * ROUGH_BELOW.
 */
export const DOMINANT_SHARE = 0.05;

/** G⁻¹(0.975; 1) = −ln 0.025: Garwood's 95% upper limit for a Poisson count of 0. */
export const ZERO_COUNT_UPPER = -Math.log(0.025);

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
  /** False when no kept record matched (method `no-match`): the interval is 0 up to a bound. */
  matched: boolean;
}

/**
 * Why the normal approximation would be poor for this sum, or null when it covers: fewer than
 * ROUGH_BELOW uncertain terms, or one term carrying more than DOMINANT_SHARE of the variance
 * (maxTerm² / Var̂; the term's own variance is at most its square).
 *
 * @example roughReason({ estimate: 300, variance: 30000, certain: 0, kept: 3, uncertain: 3, maxTerm: 100 })
 *   // "the normal approximation would be poor: 3 uncertain terms"
 */
export function roughReason(sum: EstimateSum): string | null {
  if (sum.uncertain < ROUGH_BELOW) {
    return `the normal approximation would be poor: ${sum.uncertain} uncertain term${sum.uncertain === 1 ? "" : "s"}`;
  }
  const share = sum.variance > 0 ? (sum.maxTerm * sum.maxTerm) / sum.variance : 0;
  if (share > DOMINANT_SHARE) return `one record carries ${Math.round(Math.min(1, share) * 100)}% of the variance`;
  return null;
}

/**
 * The Fay–Feuer 95% gamma interval for a weighted Poisson sum y = Σ t_i with variance
 * estimate v and largest possible single term wM (Fay and Feuer, "Confidence intervals for
 * directly standardized rates: a method based on the gamma distribution", Statistics in
 * Medicine 16, 1997, eqs. 4–5): lower (v/y)·G⁻¹(0.025; y²/v), upper
 * ((v + wM²)/(y + wM))·G⁻¹(0.975; (y + wM)²/(v + wM²)), G the gamma quantile of scale 1.
 * With every t_i = w and v = Σ t_i² it is w times Garwood's exact Poisson interval
 * (Biometrika 28, 1936); with y = 0 it is [0, wM·3.689].
 *
 * @example gammaInterval(3, 3, 1) // [0.6187…, 8.7673…]: Garwood's limits for 3 events
 */
export function gammaInterval(y: number, v: number, wM: number, alpha = 0.05): [low: number, high: number] {
  const low = y > 0 && v > 0 ? (v / y) * gammaQuantile((y * y) / v, alpha / 2) : y > 0 ? y : 0;
  const yUp = y + wM;
  const vUp = v + wM * wM;
  const high = yUp > 0 && vUp > 0 ? (vUp / yUp) * gammaQuantile((yUp * yUp) / vUp, 1 - alpha / 2) : y;
  return [low, Math.max(high, y)];
}

/**
 * The 95% interval of a subset sum over priority samples (Duffield, Lund, Thorup, J. ACM
 * 54(6), 2007). The certain part (kept records with w ≥ τ) is exact; the uncertain part is
 * y = Σ t_i over kept records below τ, t_i = x_i/p_i with p_i = w_i/τ, and Var̂ = Σ t_i²(1 − p_i).
 *
 * - `normal`: estimate ± z·√Var̂ where the normal approximation covers: at least ROUGH_BELOW
 *   uncertain terms and none carrying more than DOMINANT_SHARE of the variance.
 * - `gamma`: otherwise, the uncertain part as a weighted Poisson sum (each record of the subset
 *   below τ enters with probability p_i and then adds t_i), by Fay and Feuer's gamma interval
 *   with v = Var̂ and wM = max(maxTerm, unseenTerm): a record that was not kept had w < τ and so
 *   would have added at most unseenTerm had it been kept. Rough, with the reason.
 * - `no-match`: no kept record matched but τ > 0: [0, min(cap, 3.689·unseenTerm)].
 * - `exact`: nothing uncertain and unseenTerm = 0 (every record of the range was kept).
 *
 * Combining windows (why one unseenTerm = max τ·bound serves a range of many): in window j each
 * record of the subset that was not kept has w < τ_j and would have been kept with probability
 * w/τ_j, so the expected number of kept uncertain records is Λ = Σ_j W_j/τ_j, W_j the subset's
 * weight below τ_j in window j, and the count is approximately Poisson(Λ) (DLT 2007: given τ the
 * inclusions are independent Bernoulli draws). A count of 0 rejects Λ > 3.689 at 97.5%, and
 * W = Σ_j W_j ≤ max_j τ_j · Σ_j W_j/τ_j = max τ·Λ ≤ 3.689·max τ. A metric x with x ≤ b·w per
 * record scales the bound by b; the same argument with the terms t_i ≤ unseenTerm is why wM is
 * at least unseenTerm in the gamma upper bound.
 *
 * Upper bounds are never above `context.cap`, lower bounds never below the certain part.
 *
 * `alpha` other than 0.05 gives the same interval at level 1 − alpha (z = Φ⁻¹(1 − alpha/2),
 * the gamma quantiles alpha/2 and 1 − alpha/2, the no-match bound −ln(alpha/2)·unseenTerm), for
 * Bonferroni-adjusted intervals over many windows; `ci95` then holds that interval.
 *
 * @example
 * toInterval({ estimate: 1000, variance: 2500, certain: 0, kept: 40, uncertain: 40, maxTerm: 10 })
 * // { estimate: 1000, stdError: 50, ci95: [902.0018…, 1097.998…], rough: false, method: "normal", … }
 * @example
 * toInterval({ estimate: 0, variance: 0, certain: 0, kept: 0, uncertain: 0, maxTerm: 0 }, { unseenTerm: 1000 })
 * // { ci95: [0, 3688.879…], method: "no-match", matched: false, rough: true, … }
 */

export function toInterval(sum: EstimateSum, context: IntervalContext = { unseenTerm: 0 }, alpha = 0.05): Interval {
  const unseen = Math.max(0, context.unseenTerm);
  const cap = context.cap ?? Infinity;
  const certain = sum.certain;
  if (sum.uncertain === 0 && unseen === 0) return result(sum, [sum.estimate, sum.estimate], null, "exact");
  const at95 = alpha === 0.05;
  if (sum.kept === 0) {
    const zeroUpper = at95 ? ZERO_COUNT_UPPER : -Math.log(alpha / 2);
    return result(sum, bounded(0, zeroUpper * unseen, certain, cap), "no sampled record matched", "no-match");
  }
  const reason = roughReason(sum);
  if (reason === null) {
    const half = (at95 ? Z95 : normalQuantile(1 - alpha / 2)) * Math.sqrt(Math.max(0, sum.variance));
    return result(sum, bounded(sum.estimate - half, sum.estimate + half, certain, cap), null, "normal");
  }
  const y = Math.max(0, sum.estimate - certain);
  const [low, high] = gammaInterval(y, Math.max(0, sum.variance), Math.max(sum.maxTerm, unseen), alpha);
  return result(sum, bounded(certain + low, certain + high, certain, cap), reason, "gamma");
}

/** Lower bound at least the certain part and 0, upper at most the cap (a lower bound above the cap contradicts it: keep only what is certain). */
function bounded(low: number, high: number, certain: number, cap: number): [number, number] {
  let lo = Math.max(low, certain, 0);
  if (lo > cap) lo = Math.min(Math.max(certain, 0), cap);
  return [lo, Math.max(lo, Math.min(high, cap))];
}

function result(sum: EstimateSum, ci95: [number, number], reason: string | null, method: IntervalMethod): Interval {
  return {
    estimate: sum.estimate,
    stdError: Math.sqrt(Math.max(0, sum.variance)),
    ci95,
    rough: method === "no-match" || reason !== null,
    roughReason: reason,
    method,
    kept: sum.kept,
    matched: sum.kept > 0,
  };
}
