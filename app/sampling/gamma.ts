/**
 * The regularized incomplete gamma function and its inverse (the gamma quantile), for the
 * gamma intervals of `interval.ts`. Pure, no dependencies.
 *
 * P(a, x) = γ(a, x)/Γ(a) by its power series for x < a + 1 and Q(a, x) = 1 − P(a, x) by its
 * continued fraction otherwise (Numerical Recipes, 3rd ed., §6.2, eqs. 6.2.5 and 6.2.7, with
 * the modified Lentz method of §5.2). The common factor x^a e^(−x)/Γ(a + 1) is computed as
 * Loader's saddle-point form exp(−stirlerr(a) − bd0(a, x))/√(2πa) (C. Loader, "Fast and
 * accurate computation of binomial probabilities", 2000), which keeps ~1e-14 relative accuracy
 * for shapes up to 1e7 where a·ln x − x − lnΓ(a) would lose 8 digits to cancellation.
 * The inverse starts from the Wilson–Hilferty approximation (a > 1) or the small-x series
 * (a ≤ 1) and refines with Halley's method (Numerical Recipes §6.2.1, invgammp; DiDonato and
 * Morris, ACM TOMS 12, 1986, use the same starting points).
 */

const LN_SQRT_2PI = 0.9189385332046728; // ½·ln(2π)
const EPS = 1e-16;

// Lanczos approximation, g = 7, n = 9 (Godfrey's coefficients; Numerical Recipes §6.1 uses the same
// method): ~1e-15 relative for lnΓ at moderate arguments.
const LANCZOS = [
  0.99999999999980993, 676.5203681218851, -1259.1392167224028, 771.32342877765313, -176.61502916214059, 12.507343278686905,
  -0.13857109526572012, 9.9843695780195716e-6, 1.5056327351493116e-7,
];

/**
 * ln Γ(x) for x > 0.
 *
 * @example lnGamma(5) // ln 24 = 3.1780538303479458
 */
export function lnGamma(x: number): number {
  if (x < 0.5) return Math.log(Math.PI / Math.sin(Math.PI * x)) - lnGamma(1 - x);
  const z = x - 1;
  let s = LANCZOS[0];
  for (let i = 1; i < 9; i++) s += LANCZOS[i] / (z + i);
  const t = z + 7.5;
  return LN_SQRT_2PI + (z + 0.5) * Math.log(t) - t + Math.log(s);
}

/** stirlerr(a) = lnΓ(a + 1) − (a + ½)ln a + a − ½ln(2π), the error of Stirling's formula. */
function stirlerr(a: number): number {
  if (a <= 15) return lnGamma(a + 1) - (a + 0.5) * Math.log(a) + a - LN_SQRT_2PI;
  const a2 = a * a;
  // Asymptotic series 1/(12a) − 1/(360a³) + 1/(1260a⁵) − 1/(1680a⁷) (Abramowitz and Stegun 6.1.41).
  return (1 / 12 - (1 / 360 - (1 / 1260 - 1 / (1680 * a2)) / a2) / a2) / a;
}

/** bd0(a, x) = a·ln(a/x) + x − a, without cancellation when x is near a (Loader 2000). */
function bd0(a: number, x: number): number {
  if (Math.abs(a - x) < 0.1 * (a + x)) {
    const v = (a - x) / (a + x);
    let s = (a - x) * v;
    let ej = 2 * a * v;
    const v2 = v * v;
    for (let j = 1; j < 1000; j++) {
      ej *= v2;
      const s1 = s + ej / (2 * j + 1);
      if (s1 === s) return s1;
      s = s1;
    }
    return s;
  }
  return a * Math.log(a / x) + x - a;
}

/** x^a e^(−x)/Γ(a + 1), the Poisson-like factor shared by the series and the continued fraction. */
function factor(a: number, x: number): number {
  if (x === 0) return 0;
  if (a < 10) return Math.exp(a * Math.log(x) - x - lnGamma(a + 1));
  return Math.exp(-stirlerr(a) - bd0(a, x)) / Math.sqrt(2 * Math.PI * a);
}

/** P by the series Σ x^n/((a+1)…(a+n)), times the factor (NR 6.2.5). */
function seriesP(a: number, x: number): number {
  let term = 1;
  let sum = 1;
  for (let n = 1; n < 1_000_000; n++) {
    term *= x / (a + n);
    sum += term;
    if (term < sum * EPS) break;
  }
  return factor(a, x) * sum;
}

/** Q by the continued fraction 1/(x+1−a− 1(1−a)/(x+3−a− …)), times a·factor (NR 6.2.7, modified Lentz). */
function fractionQ(a: number, x: number): number {
  const tiny = 1e-300;
  let b = x + 1 - a;
  let c = 1 / tiny;
  let d = 1 / b;
  let h = d;
  for (let i = 1; i < 1_000_000; i++) {
    const an = -i * (i - a);
    b += 2;
    d = an * d + b;
    if (Math.abs(d) < tiny) d = tiny;
    c = b + an / c;
    if (Math.abs(c) < tiny) c = tiny;
    d = 1 / d;
    const delta = d * c;
    h *= delta;
    if (Math.abs(delta - 1) < EPS) break;
  }
  return a * factor(a, x) * h;
}

/**
 * The regularized lower incomplete gamma P(a, x) = γ(a, x)/Γ(a): the probability that a
 * gamma variable of shape a (scale 1) is at most x.
 *
 * @example gammaP(1, 2) // 1 − e^(−2) = 0.8646647167633873
 */
export function gammaP(a: number, x: number): number {
  if (!(a > 0) || Number.isNaN(x)) return NaN;
  if (x <= 0) return 0;
  if (x === Infinity) return 1;
  return x < a + 1 ? seriesP(a, x) : 1 - fractionQ(a, x);
}

/**
 * The regularized upper incomplete gamma Q(a, x) = 1 − P(a, x), accurate in the upper tail.
 *
 * @example gammaQ(3, 1) // e^(−1)(1 + 1 + ½) = 0.9196986029286058 (A&S 6.5.13: P(x ≥ n) for Poisson)
 */
export function gammaQ(a: number, x: number): number {
  if (!(a > 0) || Number.isNaN(x)) return NaN;
  if (x <= 0) return 1;
  if (x === Infinity) return 0;
  return x < a + 1 ? 1 - seriesP(a, x) : fractionQ(a, x);
}

/**
 * The gamma quantile: the x with P(a, x) = p (shape a, scale 1).
 *
 * @example gammaQuantile(1, 0.95) // −ln 0.05 = 2.995732273553991
 * @example gammaQuantile(1, 0.975) // 3.6888794541139363: Garwood's 95% upper limit for 0 Poisson events
 */
export function gammaQuantile(a: number, p: number): number {
  if (!(a > 0) || !(p >= 0 && p <= 1)) return NaN;
  if (p === 0) return 0;
  if (p === 1) return Infinity;
  let x: number;
  if (a > 1) {
    // Wilson–Hilferty: x ≈ a(1 − 1/(9a) + z/(3√a))³ with z the normal quantile (NR §6.2.1).
    const pp = p < 0.5 ? p : 1 - p;
    const t = Math.sqrt(-2 * Math.log(pp));
    let z = (2.30753 + t * 0.27061) / (1 + t * (0.99229 + t * 0.04481)) - t;
    if (p < 0.5) z = -z;
    x = Math.max(1e-3, a * Math.pow(1 - 1 / (9 * a) - z / (3 * Math.sqrt(a)), 3));
  } else {
    const t = 1 - a * (0.253 + a * 0.12);
    x = p < t ? Math.pow(p / t, 1 / a) : 1 - Math.log(1 - (p - t) / (1 - t));
  }
  const a1 = a - 1;
  for (let j = 0; j < 100; j++) {
    if (x <= 0) return 0;
    // Work on whichever tail is smaller, so a quantile near 1 keeps its relative accuracy.
    const err = p < 0.5 ? gammaP(a, x) - p : 1 - p - gammaQ(a, x);
    const density = (factor(a, x) * a) / x;
    if (density === 0 || !Number.isFinite(density)) break;
    const u = err / density;
    // Halley's correction: f'' / f' of the gamma density is (a − 1)/x − 1.
    const step = u / (1 - 0.5 * Math.min(1, u * (a1 / x - 1)));
    x -= step;
    if (x <= 0) x = 0.5 * (x + step);
    if (Math.abs(step) < 1e-14 * x) break;
  }
  return x;
}
