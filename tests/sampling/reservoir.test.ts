import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { Reservoir } from "~/sampling/reservoir";
import { estimateSubset } from "~/sampling/estimate";
import { seededUniform } from "~/sampling/uniform";

// The definition checked throughout: a priority sample of size k keeps the k
// records of highest priority q = w/u, and τ is the (k+1)-th highest priority
// (Duffield, Lund, Thorup, J. ACM 54(6), 2007, §1).

const weightsAndDraws = fc.array(
  fc.record({ w: fc.double({ min: 1, max: 1e12, noNaN: true }), u: fc.double({ min: 1e-9, max: 1, noNaN: true }) }),
  { minLength: 0, maxLength: 300 },
);

describe("Reservoir", () => {
  it("keeps the k highest priorities and sets τ to the (k+1)-th highest (DLT 2007 §1, brute force)", () => {
    fc.assert(
      fc.property(weightsAndDraws, fc.integer({ min: 1, max: 40 }), (records, k) => {
        const r = new Reservoir<number>(k);
        records.forEach((rec, i) => r.offer(i, rec.w, rec.u));
        const byPriority = records.map((rec, i) => ({ i, q: rec.w / rec.u })).sort((a, b) => b.q - a.q);
        const expectedKept = byPriority.slice(0, k).map((e) => e.i).sort((a, b) => a - b);
        // Ties among priorities are measure-zero with continuous draws; skip the rare generated tie.
        fc.pre(byPriority.length <= k || byPriority[k - 1].q !== byPriority[k].q);
        expect(r.kept().map((e) => e.item).sort((a, b) => a - b)).toEqual(expectedKept);
        expect(r.tau).toBe(byPriority.length > k ? byPriority[k].q : 0);
        expect(r.seen).toBe(records.length);
      }),
    );
  });

  it("reports every eviction, so entered minus evicted is the kept set", () => {
    fc.assert(
      fc.property(weightsAndDraws, fc.integer({ min: 1, max: 20 }), (records, k) => {
        const present = new Set<number>();
        const r = new Reservoir<number>(k, { onEvict: (e) => present.delete(e.item) });
        records.forEach((rec, i) => {
          if (r.offer(i, rec.w, rec.u)) present.add(i);
        });
        expect([...present].sort((a, b) => a - b)).toEqual(r.kept().map((e) => e.item).sort((a, b) => a - b));
      }),
    );
  });

  it("gives exact sums and zero variance when n ≤ k (τ = 0, every p_i = 1: DLT 2007 §1)", () => {
    const u = seededUniform(7);
    const weights = Array.from({ length: 50 }, () => 1 + Math.floor(u() * 1e6));
    const r = new Reservoir<number>(50, { uniform: u });
    weights.forEach((w) => r.offer(w, w));
    expect(r.tau).toBe(0);
    const all = estimateSubset(r.tau, r.kept(), (e) => e.weight);
    expect(all.estimate).toBe(weights.reduce((s, w) => s + w, 0));
    expect(all.variance).toBe(0);
    const flows = estimateSubset(r.tau, r.kept(), (e) => e.weight, () => 1);
    expect(flows.estimate).toBe(50);
    expect(flows.variance).toBe(0);
  });

  it("restores from its state and goes on exactly as the original", () => {
    const a = new Reservoir<number>(8, { uniform: seededUniform(1) });
    for (let i = 0; i < 100; i++) a.offer(i, 1 + (i % 13));
    const b = Reservoir.restore(a.state(), { uniform: seededUniform(99) });
    const c = Reservoir.restore(a.state(), { uniform: seededUniform(99) });
    const aNext = seededUniform(99);
    for (let i = 100; i < 200; i++) {
      const w = 1 + (i % 17);
      a.offer(i, w, aNext());
      b.offer(i, w);
    }
    expect(b.state()).toEqual(a.state());
    expect(c.seen).toBe(100);
  });

  it("matches the worked example in its documentation", () => {
    const r = new Reservoir<string>(2, { uniform: () => 0.5 });
    r.offer("a", 10);
    r.offer("b", 1);
    r.offer("c", 4);
    expect(r.tau).toBe(2);
    expect(r.kept().map((e) => e.item)).toEqual(["a", "c"]);
  });

  it("rejects non-positive weights, draws outside (0, 1] and bad k with a clear error", () => {
    const r = new Reservoir<number>(2);
    expect(() => r.offer(1, 0)).toThrow(/positive/);
    expect(() => r.offer(1, -5)).toThrow(/positive/);
    expect(() => r.offer(1, Number.NaN)).toThrow(/positive/);
    expect(() => r.offer(1, 5, 0)).toThrow(/\(0, 1\]/);
    expect(() => r.offer(1, 5, 1.5)).toThrow(/\(0, 1\]/);
    expect(() => new Reservoir<number>(0)).toThrow(/positive integer/);
    expect(() => new Reservoir<number>(1, {}, { tau: 0, seen: 2, kept: [{ item: 1, weight: 1, priority: 1 }, { item: 2, weight: 1, priority: 2 }] })).toThrow(/cannot hold/);
  });

  it("draws u from the injected source (seeded: same sample on every run)", () => {
    const run = () => {
      const r = new Reservoir<number>(5, { uniform: seededUniform(2024) });
      for (let i = 0; i < 1000; i++) r.offer(i, 1 + (i % 100));
      return r.state();
    };
    expect(run()).toEqual(run());
  });
});
