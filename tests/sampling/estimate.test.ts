import { describe, expect, it } from "vitest";
import { addRecord, addSums, EMPTY_SUM, estimateSubset, inclusionProbability } from "~/sampling/estimate";

// Formulas of N. Duffield, C. Lund, M. Thorup, J. ACM 54(6), 2007:
// ŵ_i = max(w_i, τ), v̂_i = τ·max(0, τ − w_i); Horvitz–Thompson x̂ = x/p,
// v̂ = x²(1 − p)/p² with p = min(1, w/τ) (Horvitz & Thompson, JASA 1952).
describe("estimators, worked by hand from the formulas", () => {
  it("p = min(1, w/τ)", () => {
    expect(inclusionProbability(300, 1200)).toBe(0.25);
    expect(inclusionProbability(5000, 1200)).toBe(1);
    expect(inclusionProbability(5, 0)).toBe(1);
  });

  it("for x = w, x/p = max(w, τ) and x²(1−p)/p² = τ(τ − w)", () => {
    for (const [tau, w] of [[1200, 300], [1000, 999], [50, 49.5], [7, 7], [7, 70]]) {
      const s = addRecord({ ...EMPTY_SUM }, tau, w, w);
      expect(s.estimate).toBeCloseTo(Math.max(w, tau), 9);
      expect(s.variance).toBeCloseTo(tau * Math.max(0, tau - w), 6);
    }
  });

  it("packets and flows from a byte-weighted sample by Horvitz–Thompson", () => {
    const kept = [
      { bytes: 5000, packets: 4 },
      { bytes: 300, packets: 3 },
    ];
    const tau = 1000;
    const packets = estimateSubset(tau, kept, (r) => r.bytes, (r) => r.packets);
    // 4/1 + 3/0.3 = 14; variance 0 + 9·0.7/0.09 = 70
    expect(packets.estimate).toBeCloseTo(14, 12);
    expect(packets.variance).toBeCloseTo(70, 9);
    expect(packets.certain).toBe(4);
    expect(packets.uncertain).toBe(1);
    const flows = estimateSubset(tau, kept, (r) => r.bytes, () => 1);
    expect(flows.estimate).toBeCloseTo(1 + 1 / 0.3, 12);
  });

  it("applies the subset predicate after sampling and sums several reservoirs", () => {
    const a = estimateSubset(10, [{ w: 20, port: 443 }, { w: 2, port: 80 }], (r) => r.w, undefined, (r) => r.port === 443);
    const b = estimateSubset(4, [{ w: 1, port: 443 }], (r) => r.w, undefined, (r) => r.port === 443);
    const both = addSums(a, b);
    expect(both.estimate).toBe(24);
    expect(both.variance).toBe(12);
    expect(both.kept).toBe(2);
  });
});
