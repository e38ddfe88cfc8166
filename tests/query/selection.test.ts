import jStat from "jstat";
import { describe, expect, it } from "vitest";
import { parseEstimateRequest, parseEstimateSearchParams } from "~/query/request";
import { halfProbability, rankGroups, simultaneousInterval, splitDraws, splitHalves } from "~/query/selection";
import { scan, type ScanReservoir } from "~/query/scan";
import { toColumns, type KeptColumns } from "~/query/columns";
import { bonferroniZ, normalQuantile } from "~/sampling/normal-quantile";
import { seededUniform } from "~/sampling/uniform";
import { byPortQuery, measureBias, sampleTrial, simPopulation, T0 } from "./selection-sim";

// Top-N after a group-by: the plain ranking's winner's curse, the split ranking that corrects
// it, and the Bonferroni intervals over the groups ranked. Sources beside each check.

describe("the normal quantile (Acklam 2003) against jstat.normal.inv", () => {
  // From 1e-10 (Bonferroni over 2.5·10⁸ groups) to 1 − 1e-8; further out jstat's erfcinv loses digits (below).
  const ps = [1e-10, 1e-8, 1e-5, 0.001, 0.01, 0.02425, 0.05, 0.2, 0.5, 0.7, 0.975, 0.99, 0.9975, 1 - 1e-6, 1 - 1e-8];
  it.each(ps)("Φ⁻¹(%s) within Acklam's stated relative error 1.15e-9", (p) => {
    const reference = jStat.normal.inv(p, 0, 1);
    if (p === 0.5) expect(Math.abs(normalQuantile(p))).toBeLessThan(1e-15);
    else expect(Math.abs(normalQuantile(p) - reference) / Math.abs(reference)).toBeLessThan(1.15e-9);
  });

  it("gives the Bonferroni z = Φ⁻¹(1 − 0.025/m) for m = 1 … 1000 groups (jstat), and 1.959963984540054 for one (NIST/SEMATECH §1.3.6.7.1, to double precision)", () => {
    for (const m of [1, 2, 3, 5, 10, 37, 100, 256, 1000]) {
      const reference = jStat.normal.inv(1 - 0.025 / m, 0, 1);
      expect(Math.abs(bonferroniZ(m) - reference) / reference).toBeLessThan(1.15e-9);
    }
    expect(bonferroniZ(1)).toBeCloseTo(1.959963984540054, 8);
  });

  it("holds Acklam's bound at p = 1e-12, where jstat itself is off by 2e-7: against Φ⁻¹(1e-12) = −7.034483825301132 (mpmath erfinv at 30 digits, computed for this test)", () => {
    expect(Math.abs(normalQuantile(1e-12) / -7.034483825301132 - 1)).toBeLessThan(1.15e-9);
  });

  it("answers ±Infinity at 0 and 1 and NaN outside [0, 1] instead of throwing (house rule: nothing throws out of pure code)", () => {
    expect(normalQuantile(0)).toBe(-Infinity);
    expect(normalQuantile(1)).toBe(Infinity);
    expect(normalQuantile(1.5)).toBeNaN();
    expect(normalQuantile(Number.NaN)).toBeNaN();
  });
});

describe("the Bonferroni interval of a group", () => {
  it("is estimate ± z·SE, lifted to the certain part and 0 as the 95% interval is, and never narrower than it", () => {
    const z = bonferroniZ(10);
    // Bonferroni: each of m intervals at level 1 − 0.05/m (Bonferroni's inequality).
    expect(simultaneousInterval({ estimate: 1000, stdError: 50, ci95: [902, 1098] }, 0, z)).toEqual([1000 - z * 50, 1000 + z * 50]);
    expect(simultaneousInterval({ estimate: 1000, stdError: 400, ci95: [600, 1784] }, 600, z)[0]).toBe(600);
    // A 95% interval from another method (wider than normal) is kept where it is wider.
    expect(simultaneousInterval({ estimate: 10, stdError: 1, ci95: [0, 40] }, 0, z)).toEqual([0, 40]);
  });
});

// ---- the split ------------------------------------------------------------------------------

function oneReservoir(tau: number, weights: number[]): ScanReservoir {
  const columns = toColumns(
    weights.map((w, i) => ({
      weight: w,
      record: { src: new Uint8Array(16), dst: new Uint8Array(16), sport: 1024 + i, dport: 443, proto: 6, bytes: BigInt(w), packets: 1n, start: T0 + i },
    })),
  );
  return { tau, collector: "edge-1", windowStart: T0, columns };
}

describe("the two halves (derivation in app/query/selection.ts)", () => {
  it("a = 1 − √(1 − p) makes two independent halves of probability a cover probability p: 1 − (1 − a)² = p", () => {
    for (const p of [1e-9, 0.001, 0.1, 0.5, 0.75, 0.99, 1]) {
      const a = halfProbability(p);
      expect(1 - (1 - a) ** 2).toBeCloseTo(p, 12);
    }
    expect(halfProbability(0.75)).toBe(0.5);
  });

  it("puts a kept record of p = w/τ in A with probability a/p, in B with a/p and in both with a²/p, so that with p its halves are independent Bernoulli(a)", () => {
    const tau = 1000;
    const w = 400; // p = 0.4, a = 1 − √0.6
    const p = w / tau;
    const a = halfProbability(p);
    const reservoir = oneReservoir(tau, [w]);
    const u = seededUniform(31);
    const trials = 20_000;
    let inA = 0;
    let inB = 0;
    let both = 0;
    for (let t = 0; t < trials; t++) {
      const v = u();
      const h = splitHalves([reservoir], (c) => new Float64Array(c.length).fill(v));
      const A = h.a[0].columns.length === 1;
      const B = h.b[0].columns.length === 1;
      if (A) inA++;
      if (B) inB++;
      if (A && B) both++;
    }
    // Binomial tolerance: 4 standard errors of a proportion over 20 000 draws.
    const tol = (q: number) => 4 * Math.sqrt((q * (1 - q)) / trials);
    expect(Math.abs(inA / trials - a / p)).toBeLessThan(tol(a / p));
    expect(Math.abs(inB / trials - a / p)).toBeLessThan(tol(a / p));
    expect(Math.abs(both / trials - (a * a) / p)).toBeLessThan(tol((a * a) / p));
  });

  it("keeps certain records (w ≥ τ) in both halves as they are, and with τ = 0 both halves are the whole sample", () => {
    const h = splitHalves([oneReservoir(1000, [5000, 1000, 10])]);
    expect(h.certainInBoth).toBe(2);
    expect(Array.from(h.a[0].columns.weight.slice(0, 2))).toEqual([5000, 1000]);
    expect(Array.from(h.b[0].columns.weight.slice(0, 2))).toEqual([5000, 1000]);
    const exact = splitHalves([oneReservoir(0, [5, 6, 7])]);
    expect(exact.a[0].columns.length).toBe(3);
    expect(exact.b[0].columns.length).toBe(3);
  });

  it("half B is unbiased given the sample: over many draws its mean is the full sample's Horvitz–Thompson estimate, and its variance estimate averages to the split's variance plus the sample's (DLT 2007 §5; Horvitz–Thompson 1952)", () => {
    const reservoir = oneReservoir(1000, [5000, 900, 600, 300, 120, 40, 40, 10]);
    const q = byPortQuery(10);
    const full = scan([reservoir], q).total;
    const u = seededUniform(77);
    const trials = 40_000;
    const estimates: number[] = [];
    let meanVariance = 0;
    for (let t = 0; t < trials; t++) {
      const h = splitHalves([reservoir], (c) => Float64Array.from({ length: c.length }, () => u()));
      const b = scan(h.b, q).total;
      estimates.push(b.estimate);
      meanVariance += b.variance / trials;
    }
    const mean = estimates.reduce((s, x) => s + x, 0) / trials;
    const spread = estimates.reduce((s, x) => s + (x - mean) ** 2, 0) / (trials - 1);
    // 4 Monte Carlo standard errors of the mean.
    expect(Math.abs(mean - full.estimate)).toBeLessThan(4 * Math.sqrt(spread / trials));
    // Half B's variance estimate covers both parts: given the sample, E[Var̂_B] = Var(B | sample) + Σ v̂_i, the split's
    // own variance plus the sample's (algebra in app/query/selection.ts; v̂_i of DLT 2007 §5). Tolerance 5%: the Monte
    // Carlo spread of a variance over 40 000 draws is about 1% here.
    expect(Math.abs(meanVariance - (spread + full.variance))).toBeLessThan(0.05 * (spread + full.variance));
  });

  it("draws the same halves whatever order the records are stored in (a hash of the record, not of its position)", () => {
    const reservoir = oneReservoir(1000, [900, 600, 300, 120, 40, 40, 10]);
    const c = reservoir.columns;
    const reversed: KeptColumns = toColumns(
      Array.from({ length: c.length }, (_, j) => c.length - 1 - j).map((i) => ({
        weight: c.weight[i],
        record: { src: c.src.slice(16 * i, 16 * i + 16), dst: c.dst.slice(16 * i, 16 * i + 16), sport: c.sport[i], dport: c.dport[i], proto: c.proto[i], bytes: BigInt(c.bytes[i]), packets: BigInt(c.packets[i]), start: c.start[i] },
      })),
    );
    const forward = Array.from(splitDraws(c));
    const backward = Array.from(splitDraws(reversed)).reverse();
    expect(backward).toEqual(forward);
    // Draws spread over [0, 1), not one value.
    expect(new Set(forward).size).toBe(forward.length);
  });
});

// ---- selection bias, measured -----------------------------------------------------------------

describe("selection bias of the first-ranked group (simulation: 20 close groups, 4 windows of k = 64, heavy-tailed flows)", () => {
  const population = simPopulation(20, 150, 20240501);

  it("the plain ranking overstates the first-ranked group: the winner's curse the answer discloses", () => {
    const run = measureBias(population, { k: 64, top: 5, trials: 1000, seed: 7, rank: "estimate" });
    console.log("rank=estimate", JSON.stringify(run));
    // Overstated by far more than Monte Carlo noise (4 standard errors of the mean, one-sided).
    expect(run.meanError).toBeGreaterThan(4 * run.meanErrorSe);
    expect(run.meanRelativeError).toBeGreaterThan(0.1);
  });

  it("the split ranking's estimate of the first-ranked group is unbiased: mean error within 3 Monte Carlo standard errors of 0", () => {
    const run = measureBias(population, { k: 64, top: 5, trials: 3000, seed: 11, rank: "split" });
    console.log("rank=split", JSON.stringify(run));
    // 3 standard errors: a two-sided normal tail of 0.27% if the estimator is unbiased.
    expect(Math.abs(run.meanError)).toBeLessThan(3 * run.meanErrorSe);
    expect(Math.abs(run.meanRelativeError)).toBeLessThan(0.02);
  });

  it("answers the same for the same query (the halves are a function of the stored records)", () => {
    const reservoirs = sampleTrial(population, 64, seededUniform(5), 0);
    const q = byPortQuery(5);
    expect(rankGroups(reservoirs, q, "split")).toEqual(rankGroups(reservoirs, q, "split"));
    const selection = rankGroups(reservoirs, q, "split").selection!;
    expect(selection.rankedBy).toBe("split");
    expect(selection.groupsRanked).toBe(20);
    expect(selection.halves).toMatchObject({ rankedOn: "A", estimatedOn: "B" });
    expect(selection.note).toMatch(/half A/);
    expect(selection.simultaneousZ).toBeCloseTo(jStat.normal.inv(1 - 0.025 / 20, 0, 1), 8);
  });

  it("the plain ranking's note names the winner's curse and the number of groups ranked", () => {
    const selection = rankGroups(sampleTrial(population, 64, seededUniform(5), 0), byPortQuery(5), "estimate").selection!;
    expect(selection).toMatchObject({ rankedBy: "estimate", groupsRanked: 20 });
    expect(selection.note).toMatch(/overstated/);
    expect(selection.note).toMatch(/winner's curse/);
    expect(selection.note).toMatch(/true top groups may differ/);
  });
});

// ---- the request ---------------------------------------------------------------------------------

describe("rank in the request", () => {
  const DAY = { from: "2024-05-01T00:00:00Z", to: "2024-05-02T00:00:00Z" };

  it("takes rank=split or estimate with a group-by, in JSON and in the query string; estimate by default", () => {
    const json = parseEstimateRequest({ ...DAY, groupBy: "dst", rank: "split" });
    expect(json.ok && json.query.rank).toBe("split");
    const search = parseEstimateSearchParams(new URLSearchParams("from=2024-05-01&to=2024-05-02&groupBy=dport&rank=split"));
    expect(search.ok && search.query.rank).toBe("split");
    const plain = parseEstimateRequest({ ...DAY, groupBy: "dst" });
    expect(plain.ok && plain.query.rank).toBe("estimate");
  });

  it("refuses an unknown rank, and rank without a group-by, naming the field", () => {
    const bad = parseEstimateRequest({ ...DAY, groupBy: "dst", rank: "halves" });
    expect(bad.ok).toBe(false);
    if (!bad.ok) expect(bad.details).toEqual([{ path: "rank", message: "must be one of estimate, split (split: rank on one half of the kept records, estimate on the other)" }]);
    const alone = parseEstimateSearchParams(new URLSearchParams("from=2024-05-01&to=2024-05-02&rank=split"));
    expect(alone.ok).toBe(false);
    if (!alone.ok) expect(alone.message).toBe("Invalid query: rank: applies only with groupBy: it says how the top groups are chosen.");
    const twice = parseEstimateSearchParams(new URLSearchParams("from=2024-05-01&to=2024-05-02&groupBy=dst&rank=split&rank=estimate"));
    expect(twice.ok).toBe(false);
  });
});
