// Edges of the sampling core that mutation testing (docs/testing.md) found no test looking at:
// a record exactly at τ, the largest term, the sum of two running totals, a merge input whose
// kept record sits exactly at another input's τ, an infinite weight, and the exact draws of the
// seeded source. Expected values are worked out by hand beside each check.
import { describe, expect, it } from "vitest";
import { addRecord, addSums, EMPTY_SUM } from "~/sampling/estimate";
import { mergeStates } from "~/sampling/merge";
import { Reservoir } from "~/sampling/reservoir";
import { defaultUniform, seededUniform } from "~/sampling/uniform";

describe("a kept record's term", () => {
  it("is certain when its weight equals τ: p = min(1, w/τ) = 1 (DLT 2007 §2), so it adds to the certain part and carries no error", () => {
    const sum = addRecord({ ...EMPTY_SUM }, 400, 400, 150);
    // By hand: x̂ = x/p = 150, v̂ = x²(1 − p)/p² = 0; the record is known exactly.
    expect(sum).toEqual({ estimate: 150, variance: 0, certain: 150, kept: 1, uncertain: 0, maxTerm: 0 });
  });

  it("keeps the largest uncertain term x/p, whatever the order the records come in", () => {
    // τ = 1000. Terms x·τ/w by hand: 100·1000/250 = 400, 300·1000/500 = 600, 40·1000/200 = 200.
    const records = [
      { weight: 250, x: 100 },
      { weight: 500, x: 300 },
      { weight: 200, x: 40 },
    ];
    for (const order of [records, [...records].reverse(), [records[1], records[0], records[2]]]) {
      const sum = order.reduce((into, r) => addRecord(into, 1000, r.weight, r.x), { ...EMPTY_SUM });
      expect(sum.maxTerm).toBe(600);
      expect(sum.uncertain).toBe(3);
      expect(sum.estimate).toBe(1200);
    }
  });
});

describe("the sum of two running totals", () => {
  it("adds every part and keeps the larger largest term (sums of uncorrelated terms, DLT 2007 Theorem 2)", () => {
    const a = { estimate: 20, variance: 4, certain: 5, kept: 3, uncertain: 2, maxTerm: 3 };
    const b = { estimate: 30, variance: 6, certain: 7, kept: 5, uncertain: 4, maxTerm: 9 };
    // By hand, part by part.
    const expected = { estimate: 50, variance: 10, certain: 12, kept: 8, uncertain: 6, maxTerm: 9 };
    expect(addSums(a, b)).toEqual(expected);
    expect(addSums(b, a)).toEqual(expected);
  });
});

describe("merging samples whose τ differ", () => {
  it("drops a record at or below the merged τ even among the top k: kept priorities are strictly above τ (DLT 2007 §2)", () => {
    const kept = (item: string, priority: number) => ({ item, weight: 1, priority });
    // An hourly roll-up above the fine k may hold fewer than k records with τ > 0 (rollup.ts): b here.
    const a = { k: 3, tau: 0, seen: 3, kept: [kept("a10", 10), kept("a8", 8), kept("a3", 3)] };
    const b = { k: 3, tau: 8, seen: 9, kept: [kept("b20", 20)] };
    // By hand: union by priority 20, 10, 8, 3; k = 3; τ = max(0, 8, the 4th priority 3) = 8;
    // of the top three, 8 is not above τ = 8.
    const merged = mergeStates([a, b]);
    expect(merged.tau).toBe(8);
    expect(merged.kept.map((r) => r.item)).toEqual(["b20", "a10"]);
    expect(merged.seen).toBe(12);
  });
});

describe("offering a record", () => {
  it("refuses an infinite weight (its priority w/u would be infinite, and τ with it)", () => {
    const reservoir = new Reservoir<string>(2);
    expect(() => reservoir.offer("x", Number.POSITIVE_INFINITY, 0.5)).toThrow(RangeError);
    expect(() => reservoir.offer("x", Number.NaN, 0.5)).toThrow(RangeError);
    expect(reservoir.offer("y", 10, 0.5)).toEqual({ item: "y", weight: 10, priority: 20 });
  });
});

/**
 * The mulberry32 generator (T. Ettinger, public domain; its published steps recalled from
 * memory), computed here with BigInt arithmetic modulo 2^32 rather than Math.imul and int32
 * operators, and mapped to (0, 1] as (x + 1)/2^32 as uniform.ts documents.
 */
function mulberry32Reference(seed: number): () => number {
  const M = (1n << 32n) - 1n;
  const mul = (a: bigint, b: bigint) => (a * b) & M;
  let state = BigInt(seed >>> 0);
  return () => {
    state = (state + 0x6d2b79f5n) & M;
    let t = state;
    t = mul(t ^ (t >> 15n), t | 1n);
    t = t ^ ((t + mul(t ^ (t >> 7n), t | 61n)) & M);
    const x = t ^ (t >> 14n);
    return Number(x + 1n) / 4294967296;
  };
}

describe("uniform sources", () => {
  it("the seeded source draws exactly mulberry32's sequence, mapped to (0, 1]", () => {
    for (const seed of [0, 42, 1729, 0xffffffff]) {
      const u = seededUniform(seed);
      const reference = mulberry32Reference(seed);
      for (let i = 0; i < 2000; i++) {
        const value = u();
        expect(value).toBe(reference());
        expect(value > 0 && value <= 1).toBe(true);
      }
    }
  });

  it("the default source stays in (0, 1] with mean near 1/2 (Math.random lies in [0, 1), ECMA-262 §21.3.2.27)", () => {
    const n = 20_000;
    let total = 0;
    for (let i = 0; i < n; i++) {
      const value = defaultUniform();
      expect(value > 0 && value <= 1).toBe(true);
      total += value;
    }
    // The mean of U(0, 1] has standard error √(1/12)/√n ≈ 0.002 at n = 20 000: 0.02 is 10 of them.
    expect(Math.abs(total / n - 0.5)).toBeLessThan(0.02);
  });
});
