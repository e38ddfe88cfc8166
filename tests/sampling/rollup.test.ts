import { describe, expect, it } from "vitest";
import { mergeStates } from "~/sampling/merge";
import { Reservoir, type ReservoirState } from "~/sampling/reservoir";
import { maxHourlySampleSize, rollUpStates } from "~/sampling/rollup";
import { seededUniform } from "~/sampling/uniform";
import { heavyTailedPopulation, type TestRecord } from "./population";

// Roll-up of fine windows into one hourly window at a sample size K above the fine k.
// Sources: Duffield, Lund, Thorup, "Priority sampling for estimation of arbitrary subset
// sums", J. ACM 54(6), 2007 — ŵ = max(w, τ) is unbiased when τ, a kept record's inclusion
// threshold, depends on the other records' priorities only; their merge rule
// (k_m = min(k wanted, each k_j)) as the reference where K ≤ min k_j.

const K_FINE = 16;
const WINDOWS = 12;
// Windows of different volume, so their τ_j differ (as five-minute windows of real traffic do).
const populations = Array.from({ length: WINDOWS }, (_, j) => heavyTailedPopulation(120 + 40 * j, 1000 + j));
const inSubset = (r: TestRecord) => r.block < 4;
const truth = populations.flat().reduce((s, r) => (inSubset(r) ? s + r.bytes : s), 0);

function fineSamples(seed: number): ReservoirState<TestRecord>[] {
  const uniform = seededUniform(seed);
  return populations.map((population) => {
    const reservoir = new Reservoir<TestRecord>(K_FINE, { uniform });
    for (const r of population) reservoir.offer(r, r.bytes);
    return reservoir.state();
  });
}

const subsetEstimate = (s: ReservoirState<TestRecord>) => s.kept.reduce((sum, r) => (inSubset(r.item) ? sum + Math.max(r.weight, s.tau) : sum), 0);

/**
 * The rule written out independently, per record (J. ACM 2007's threshold argument): record i of
 * window j is kept when it was kept in j, its priority beats every window's τ, and fewer than K
 * such records beat it; τ is the largest of the τ_j and the (K+1)-th priority among those kept.
 */
function byHand(inputs: ReservoirState<TestRecord>[], K: number) {
  const all = inputs.flatMap((s) => s.kept.map((r) => r.priority));
  all.sort((a, b) => b - a);
  const tau = Math.max(...inputs.map((s) => s.tau), all.length > K ? all[K] : 0);
  const kept = all.filter((p) => p > tau).slice(0, K);
  return { tau, kept };
}

describe("rollUpStates", () => {
  it("equals the DLT 2007 merge when K is at most every input's k", () => {
    for (let seed = 1; seed <= 20; seed++) {
      const inputs = fineSamples(seed);
      for (const K of [8, K_FINE]) {
        const rolled = rollUpStates(inputs, K);
        const merged = mergeStates(inputs, K);
        expect(rolled.tau).toBe(merged.tau);
        expect(rolled.kept.map((r) => r.priority)).toEqual(merged.kept.map((r) => r.priority));
      }
    }
  });

  it("keeps the records and τ of the rule computed independently, for K above the inputs' k", () => {
    for (let seed = 1; seed <= 20; seed++) {
      const inputs = fineSamples(seed);
      for (const K of [48, WINDOWS * K_FINE]) {
        const rolled = rollUpStates(inputs, K);
        const hand = byHand(inputs, K);
        expect(rolled.tau).toBe(hand.tau);
        expect(rolled.kept.map((r) => r.priority)).toEqual(hand.kept);
        expect(rolled.seen).toBe(populations.reduce((n, p) => n + p.length, 0));
      }
    }
  });

  // 3000 independent draws; the mean of an unbiased estimator lies within 4 Monte Carlo
  // standard errors of the truth except with probability about 6e-5 (normal tail, CLT).
  const TRIALS = 3000;
  function monteCarlo(estimate: (inputs: ReservoirState<TestRecord>[]) => { value: number; kept: number }) {
    let sum = 0;
    let sumSq = 0;
    let kept = 0;
    for (let t = 0; t < TRIALS; t++) {
      const e = estimate(fineSamples(50_000 + t));
      sum += e.value;
      sumSq += e.value * e.value;
      kept += e.kept;
    }
    const mean = sum / TRIALS;
    const se = Math.sqrt((sumSq / TRIALS - mean * mean) / TRIALS);
    return { mean, se, meanKept: kept / TRIALS };
  }

  it("stays unbiased at K = 4k and K = Σ k_j, and keeps more records than the merge at k", () => {
    const atK = monteCarlo((inputs) => {
      const s = rollUpStates(inputs, K_FINE);
      return { value: subsetEstimate(s), kept: s.kept.length };
    });
    expect(Math.abs(atK.mean - truth)).toBeLessThan(4 * atK.se);
    for (const K of [4 * K_FINE, WINDOWS * K_FINE]) {
      const above = monteCarlo((inputs) => {
        const s = rollUpStates(inputs, K);
        return { value: subsetEstimate(s), kept: s.kept.length };
      });
      expect(Math.abs(above.mean - truth)).toBeLessThan(4 * above.se);
      expect(above.meanKept).toBeGreaterThan(atK.meanKept * 1.5);
      // More kept records, narrower spread than the hourly window at k.
      expect(above.se).toBeLessThan(atK.se);
    }
  });

  it("would overstate if every input's kept record stayed under the largest τ_j (why the rule drops some)", () => {
    // The tempting rule "K ≥ Σ k_j keeps everything, τ = max τ_j": a record kept with chance
    // w/τ_j is then weighted by max τ_j ≥ τ_j, so its expectation exceeds w.
    const naive = monteCarlo((inputs) => {
      const tau = Math.max(...inputs.map((s) => s.tau));
      const all = inputs.flatMap((s) => s.kept);
      return { value: all.reduce((sum, r) => (inSubset(r.item) ? sum + Math.max(r.weight, tau) : sum), 0), kept: all.length };
    });
    expect(naive.mean - truth).toBeGreaterThan(4 * naive.se);
  });

  it("bounds the hourly K by the sum of the fine windows' k", () => {
    expect(maxHourlySampleSize(1024, 300)).toBe(12 * 1024);
    expect(maxHourlySampleSize(1024, 60)).toBe(60 * 1024);
    expect(maxHourlySampleSize(1024, 3600)).toBe(1024);
  });

  it("stays a valid input of a later merge: nothing at or below the merged τ is kept, and the merge stays unbiased", () => {
    // An hourly window at K = Σ k_j holds fewer than K records with τ > 0 (records between the
    // windows' τ_j are dropped); merged (DLT 2007) with windows of k = K, the merge's common τ
    // must then drop the other inputs' records at or below it.
    const K = WINDOWS * K_FINE;
    const other = populations.slice(6).map((p) => p.map((r) => ({ ...r, id: r.id + 1_000_000 })));
    const otherTruth = other.flat().reduce((s, r) => (inSubset(r) ? s + r.bytes : s), 0);
    const uniform = seededUniform(8_000_000);
    const r = monteCarlo((inputs) => {
      const hourly = rollUpStates(inputs, K);
      const fine = other.map((p) => {
        const reservoir = new Reservoir<TestRecord>(K, { uniform });
        for (const x of p.concat(p, p)) reservoir.offer(x, x.bytes);
        return reservoir.state();
      });
      const merged = mergeStates([hourly, ...fine], K);
      expect(merged.kept.every((x) => x.priority > merged.tau)).toBe(true);
      return { value: subsetEstimate(merged), kept: merged.kept.length };
    });
    expect(Math.abs(r.mean - (truth + 3 * otherTruth))).toBeLessThan(4 * r.se);
  });
});
