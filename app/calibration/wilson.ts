import { Z95 } from "~/sampling/interval";

/**
 * The Wilson score interval for a binomial proportion: the p for which the observed
 * proportion p̂ = x/n lies within z standard errors √(p(1 − p)/n) of p (E. B. Wilson,
 * "Probable inference, the law of succession, and statistical inference", Journal of the
 * American Statistical Association 22, 1927). Solving |p̂ − p| = z·√(p(1 − p)/n) for p gives
 *
 *   (p̂ + z²/2n ± z·√(p̂(1 − p̂)/n + z²/4n²)) / (1 + z²/n),
 *
 * which, unlike p̂ ± z·√(p̂(1 − p̂)/n), never leaves [0, 1] and is not zero-width at x = 0 or
 * x = n (Newcombe, Statistics in Medicine 17, 1998, compares the two: method 3 there).
 * Null when n = 0: no trial, no interval.
 *
 * @example wilsonInterval(81, 263) // [0.2553…, 0.3662…]
 * @example wilsonInterval(0, 20)   // [0, 0.1611…]
 */
export function wilsonInterval(successes: number, trials: number, z = Z95): [low: number, high: number] | null {
  if (trials <= 0) return null;
  const p = successes / trials;
  const z2n = (z * z) / trials;
  const centre = (p + z2n / 2) / (1 + z2n);
  const half = (z * Math.sqrt(p * (1 - p) / trials + z2n / (4 * trials))) / (1 + z2n);
  // In real arithmetic the low end is exactly 0 at x = 0 and the high end exactly 1 at x = n;
  // rounding would leave 1e-17 off.
  return [successes <= 0 ? 0 : Math.max(0, centre - half), successes >= trials ? 1 : Math.min(1, centre + half)];
}
