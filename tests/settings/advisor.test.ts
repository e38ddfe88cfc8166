import { describe, expect, it } from "vitest";
import { Reservoir, type ReservoirState } from "~/sampling/reservoir";
import { seededUniform } from "~/sampling/uniform";
import { adviseSampleSize, boundRse, empiricalRse, rollUpTradeOff, subsampleVarianceSum, varianceSum, type AdvisorWindow } from "~/settings/advisor";
import { heavyTailedPopulation, type TestRecord } from "../sampling/population";

// The sample-size advisor. Sources: the variance bound W²/(k−1) of one priority sample's total
// (Szegedy, STOC 2006; as stated in Daliri et al., arXiv:2308.05907, Var[Ŵ] = Σ Var[ŵ_i] ≤
// W²/(k−1)); v̂ = τ·max(0, τ − w) and uncorrelated ŵ_i (Duffield, Lund, Thorup, J. ACM 54(6), 2007).

function sampleOf(population: TestRecord[], k: number, seed: number): ReservoirState<TestRecord> {
  const reservoir = new Reservoir<TestRecord>(k, { uniform: seededUniform(seed) });
  for (const r of population) reservoir.offer(r, r.bytes);
  return reservoir.state();
}
const windowOf = (population: TestRecord[], s: ReservoirState<TestRecord>, windowStart = 0): AdvisorWindow => ({
  windowStart,
  windowSeconds: 300,
  k: s.k,
  tau: s.tau,
  totalWeight: population.reduce((t, r) => t + r.bytes, 0),
  kept: s.kept.map((r) => ({ weight: r.weight, priority: r.priority })),
});

describe("advisor bound (Szegedy 2006, extended to a subset)", () => {
  it("matches the formula worked by hand", () => {
    // √((1000² + 3000²)/(101 − 1)) / (0.1 · 4000) = √100000 / 400 = 0.790569…
    expect(boundRse([1000, 3000], 101, 0.1)).toBeCloseTo(Math.sqrt(100_000) / 400, 12);
    // One window: 1/(s·√(k−1)); 1% of one window at k = 10001 → 1/(0.01·100) = 1.
    expect(boundRse([5e9], 10_001, 0.01)).toBeCloseTo(1, 12);
  });

  it("is never below the spread measured over independent draws", () => {
    const population = heavyTailedPopulation(2000, 7);
    const inSubset = (r: TestRecord) => r.block < 2; // about 10% of the records
    const truth = population.reduce((s, r) => (inSubset(r) ? s + r.bytes : s), 0);
    const share = truth / population.reduce((s, r) => s + r.bytes, 0);
    const k = 64;
    const estimates = Array.from({ length: 1500 }, (_, t) => {
      const s = sampleOf(population, k, 900 + t);
      return s.kept.reduce((sum, r) => (inSubset(r.item) ? sum + Math.max(r.weight, s.tau) : sum), 0);
    });
    const mean = estimates.reduce((a, b) => a + b, 0) / estimates.length;
    const sd = Math.sqrt(estimates.reduce((a, b) => a + (b - mean) ** 2, 0) / (estimates.length - 1));
    expect(sd / truth).toBeLessThan(boundRse([population.reduce((s, r) => s + r.bytes, 0)], k, share));
  });
});

describe("advisor empirical figure", () => {
  it("equals the brute-force average over every subset of a seeded sample", () => {
    // 12 kept records: all 4096 subsets, each taken with probability s^|Q|(1−s)^(n−|Q|).
    const population = heavyTailedPopulation(200, 11);
    const s = sampleOf(population, 12, 5);
    const w = windowOf(population, s);
    const share = 0.1;
    let expected = 0;
    const n = w.kept.length;
    for (let mask = 0; mask < 1 << n; mask++) {
      let p = 1;
      let v = 0;
      for (let i = 0; i < n; i++) {
        const r = w.kept[i];
        if (mask & (1 << i)) {
          p *= share;
          v += w.tau * Math.max(0, w.tau - r.weight);
        } else p *= 1 - share;
      }
      expected += p * v;
    }
    const bruteRse = Math.sqrt(expected) / (share * w.totalWeight);
    expect(empiricalRse(varianceSum(w.tau, w.kept), w.totalWeight, share)).toBeCloseTo(bruteRse, 10);
    const [row] = adviseSampleSize({ windows: [w], sampleSize: 12, sampleSizes: [], shares: [share] });
    expect(row.empirical[0]).toBeCloseTo(bruteRse, 10);
  });

  it("reads a smaller k off the stored sample exactly: the reservoir at k′ with the same draws", () => {
    const population = heavyTailedPopulation(3000, 21);
    const big = sampleOf(population, 256, 77);
    for (const k of [16, 64, 255]) {
      const small = sampleOf(population, k, 77);
      expect(subsampleVarianceSum(big, k)).toBeCloseTo(varianceSum(small.tau, small.kept), 6);
    }
    // A larger k needs records the window dropped.
    expect(subsampleVarianceSum(big, 512)).toBeNull();
  });

  it("predicts the spread of a 10% subset over independent draws within 25%", () => {
    // The empirical figure is itself an estimate from one draw per window: averaged over 48
    // windows; v̂ sums of heavy-tailed data are skewed, so one draw tends to fall below their mean
    // (0.83 of the measured spread on this seed). 25% is the tolerance (common practice for such a check).
    const windows = Array.from({ length: 48 }, (_, j) => {
      const population = heavyTailedPopulation(1500, 300 + j);
      return windowOf(population, sampleOf(population, 64, 5000 + j), j * 300_000);
    });
    const [row] = adviseSampleSize({ windows, sampleSize: 64, sampleSizes: [], shares: [0.1] });
    // Truth by simulation: a random 10% of the records of every window (fixed), 400 redraws.
    const pops = Array.from({ length: 48 }, (_, j) => heavyTailedPopulation(1500, 300 + j));
    const pick = seededUniform(99);
    const chosen = pops.map((p) => new Set(p.filter(() => pick() < 0.1).map((r) => r.id)));
    const truth = pops.reduce((t, p, j) => t + p.reduce((s, r) => (chosen[j].has(r.id) ? s + r.bytes : s), 0), 0);
    const total = pops.reduce((t, p) => t + p.reduce((s, r) => s + r.bytes, 0), 0);
    const estimates = Array.from({ length: 400 }, (_, t) =>
      pops.reduce((sum, p, j) => {
        const s = sampleOf(p, 64, 100_000 + t * 64 + j);
        return sum + s.kept.reduce((e, r) => (chosen[j].has(r.item.id) ? e + Math.max(r.weight, s.tau) : e), 0);
      }, 0),
    );
    const mean = estimates.reduce((a, b) => a + b, 0) / estimates.length;
    const sd = Math.sqrt(estimates.reduce((a, b) => a + (b - mean) ** 2, 0) / (estimates.length - 1));
    // The table's share is of the weight; this subset's is truth/total (≈ 0.1).
    const predicted = row.empirical[0] * Math.sqrt(0.1 / (truth / total));
    expect(Math.abs(predicted / (sd / truth) - 1)).toBeLessThan(0.25);
  });

  it("rolls the stored windows up to show storage against widening", () => {
    const windows = Array.from({ length: 24 }, (_, j) => {
      const population = heavyTailedPopulation(800, 600 + j);
      return windowOf(population, sampleOf(population, 32, 7000 + j), j * 300_000);
    });
    const atK = rollUpTradeOff(windows, 32, 0.01);
    const atSum = rollUpTradeOff(windows, 12 * 32, 0.01);
    expect(atK.keptPerHourFine).toBe(12 * 32);
    expect(atK.keptPerHourHourly).toBe(32);
    expect(atK.widening).toBeGreaterThan(1.5);
    expect(atSum.keptPerHourHourly).toBeGreaterThan(atK.keptPerHourHourly);
    expect(atSum.widening).toBeLessThan(atK.widening);
  });
});
