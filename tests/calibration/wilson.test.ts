import jStat from "jstat";
import { describe, expect, it } from "vitest";
import { wilsonInterval } from "~/calibration/wilson";

// Wilson's score interval for a binomial proportion (E. B. Wilson, JASA 22, 1927), checked
// against a published worked example and against its defining equation solved independently.

/**
 * The score interval by its definition, without the closed form: the set of p with
 * |p̂ − p| ≤ z·√(p(1 − p)/n), found by bisection on each side of p̂ (the set is an interval
 * because (p̂ − p)² − z²p(1 − p)/n is a convex quadratic in p). z from the jstat reference
 * library (npm jstat), not from the project.
 */
function scoreIntervalByBisection(x: number, n: number): [number, number] {
  const z = jStat.normal.inv(0.975, 0, 1);
  const p̂ = x / n;
  const inside = (p: number) => (p̂ - p) ** 2 <= (z * z * p * (1 - p)) / n;
  const edge = (inner: number, outer: number) => {
    // inner is inside the set, outer is not (or is the end of [0, 1]).
    if (inside(outer)) return outer;
    for (let i = 0; i < 200; i++) {
      const mid = (inner + outer) / 2;
      if (inside(mid)) inner = mid;
      else outer = mid;
    }
    return (inner + outer) / 2;
  };
  return [edge(p̂, 0), edge(p̂, 1)];
}

describe("wilsonInterval", () => {
  // Newcombe, "Two-sided confidence intervals for the single proportion: comparison of seven
  // methods", Statistics in Medicine 17 (1998), Table I, method 3 (score method without
  // continuity correction), 95% limits to four decimals. The four examples and their limits are
  // recalled from memory; the formula below reproduces all eight figures to the last digit.
  const newcombe: [x: number, n: number, low: string, high: string][] = [
    [81, 263, "0.2553", "0.3662"],
    [15, 148, "0.0624", "0.1605"],
    [0, 20, "0.0000", "0.1611"],
    [1, 29, "0.0061", "0.1718"],
  ];
  for (const [x, n, low, high] of newcombe) {
    it(`gives Newcombe's (1998, Table I, method 3) limits ${low}–${high} for ${x}/${n}`, () => {
      const [l, h] = wilsonInterval(x, n)!;
      expect(l.toFixed(4)).toBe(low);
      expect(h.toFixed(4)).toBe(high);
    });
  }

  it("equals the defining equation |p̂ − p| = z·√(p(1 − p)/n) solved by bisection (Wilson 1927), for many x and n", () => {
    for (const n of [1, 2, 5, 17, 100, 288, 2016, 8640]) {
      for (const x of new Set([0, 1, Math.floor(n / 2), Math.floor(0.95 * n), n - 1, n].filter((v) => v >= 0 && v <= n))) {
        const [l, h] = wilsonInterval(x, n)!;
        const [bl, bh] = scoreIntervalByBisection(x, n);
        expect(l, `${x}/${n} low`).toBeCloseTo(bl, 10);
        expect(h, `${x}/${n} high`).toBeCloseTo(bh, 10);
      }
    }
  });

  it("is never zero-width and stays in [0, 1] at x = 0 and x = n, where p̂ ± z·SE collapses to a point (Wilson 1927)", () => {
    const [l0, h0] = wilsonInterval(0, 10)!;
    expect(l0).toBe(0);
    expect(h0).toBeGreaterThan(0);
    const [ln, hn] = wilsonInterval(10, 10)!;
    expect(hn).toBe(1);
    expect(ln).toBeLessThan(1);
  });

  it("has no interval without trials", () => {
    expect(wilsonInterval(0, 0)).toBeNull();
  });
});
