import { describe, expect, it } from "vitest";
import { estimateSubset } from "~/sampling/estimate";
import { toInterval } from "~/sampling/interval";
import { Reservoir } from "~/sampling/reservoir";
import { seededUniform } from "~/sampling/uniform";
import { heavyTailedPopulation, moments, trueSum, type TestRecord } from "./population";

// Monte Carlo checks of the theorems of N. Duffield, C. Lund, M. Thorup,
// "Priority sampling for estimation of arbitrary subset sums", J. ACM 54(6), 2007:
//  - Theorem 1: E[Σ_{i∈Q∩S} ŵ_i] = Σ_{i∈Q} w_i for any Q (unbiased subset sums);
//  - the variance estimator v̂_i = τ·max(0, τ − w_i) is unbiased (their §5);
//  - Theorem 2: the ŵ_i are uncorrelated, so disjoint subsets have zero covariance;
//  - Horvitz–Thompson with p_i = min(1, w_i/τ) for other attributes (their §2 view
//    of priority sampling as conditional threshold sampling; Horvitz & Thompson,
//    JASA 47(260), 1952).
// Tolerance: 4 standard errors of the Monte Carlo mean (a two-sided normal tail
// of 6e-5 per check), with fixed seeds so the runs are reproducible.

const N = 2000;
const K = 100;
const TRIALS = 4000;
const population = heavyTailedPopulation(N, 20070601);

const subsets: Record<string, (r: TestRecord) => boolean> = {
  "port 443 (about a fifth of records)": (r) => r.port === 443,
  "one block of twenty (about 5%)": (r) => r.block === 3,
  "small records (below 100 bytes)": (r) => r.bytes < 100,
  "the ten heaviest records": (r) => heaviest.has(r.id),
  everything: () => true,
};
const heaviest = new Set([...population].sort((a, b) => b.bytes - a.bytes).slice(0, 10).map((r) => r.id));

type Metric = "bytes" | "packets" | "flows";
const value: Record<Metric, (r: TestRecord) => number> = {
  bytes: (r) => r.bytes,
  packets: (r) => r.packets,
  flows: () => 1,
};

/** Runs the trials once and records, per subset and metric, every estimate and variance estimate. */
function runTrials() {
  const u = seededUniform(424242);
  const out = new Map<string, { est: number[]; varEst: number[] }>();
  for (const name of Object.keys(subsets)) for (const m of Object.keys(value)) out.set(`${name}|${m}`, { est: [], varEst: [] });
  const pairs = { a: [] as number[], b: [] as number[] };
  const coverage = { hits: 0, rough: 0 };
  const coverageSubset = (r: TestRecord) => r.port === 443 || r.port === 80;
  const coverageTruth = trueSum(population, coverageSubset, value.bytes);
  for (let t = 0; t < TRIALS; t++) {
    const res = new Reservoir<TestRecord>(K, { uniform: u });
    for (const r of population) res.offer(r, r.bytes);
    const kept = res.kept().map((e) => e.item);
    for (const [name, include] of Object.entries(subsets)) {
      for (const [m, x] of Object.entries(value)) {
        const s = estimateSubset(res.tau, kept, (r) => r.bytes, x, include);
        const slot = out.get(`${name}|${m}`)!;
        slot.est.push(s.estimate);
        slot.varEst.push(s.variance);
      }
    }
    pairs.a.push(estimateSubset(res.tau, kept, (r) => r.bytes, value.bytes, (r) => r.block < 10).estimate);
    pairs.b.push(estimateSubset(res.tau, kept, (r) => r.bytes, value.bytes, (r) => r.block >= 10).estimate);
    const iv = toInterval(estimateSubset(res.tau, kept, (r) => r.bytes, value.bytes, coverageSubset));
    if (iv.ci95[0] <= coverageTruth && coverageTruth <= iv.ci95[1]) coverage.hits++;
    if (iv.rough) coverage.rough++;
  }
  return { out, pairs, coverage };
}

const { out, pairs, coverage } = runTrials();

describe("priority-sampling estimators, Monte Carlo over a heavy-tailed population", () => {
  for (const name of Object.keys(subsets)) {
    for (const m of Object.keys(value) as Metric[]) {
      it(`${m} of ${name}: the mean estimate is within 4 standard errors of the truth (DLT 2007 Thm 1; HT for packets and flows)`, () => {
        const truth = trueSum(population, subsets[name], value[m]);
        const { mean, variance } = moments(out.get(`${name}|${m}`)!.est);
        const standardError = Math.sqrt(variance / TRIALS);
        expect(Math.abs(mean - truth)).toBeLessThanOrEqual(4 * standardError + 1e-9 * truth);
      });

      it(`${m} of ${name}: the mean variance estimate matches the empirical variance (DLT 2007 §5; HT variance)`, () => {
        const slot = out.get(`${name}|${m}`)!;
        const est = moments(slot.est);
        const vhat = moments(slot.varEst);
        // Standard error of the sample variance: √((μ4 − σ⁴)/T) (large-sample
        // result, e.g. Kendall & Stuart, The Advanced Theory of Statistics, vol. 1, §10.5; recalled from memory).
        const seEmpirical = Math.sqrt(Math.max(0, est.m4 - est.variance ** 2) / TRIALS);
        const seMean = Math.sqrt(vhat.variance / TRIALS);
        const tolerance = 4 * Math.hypot(seEmpirical, seMean);
        expect(Math.abs(vhat.mean - est.variance)).toBeLessThanOrEqual(tolerance + 1e-9 * (est.variance + 1));
      });
    }
  }

  it("estimates of two disjoint subsets have zero covariance (DLT 2007 Thm 2), within 4 standard errors", () => {
    const a = moments(pairs.a);
    const b = moments(pairs.b);
    const products = pairs.a.map((x, i) => (x - a.mean) * (pairs.b[i] - b.mean));
    const cov = moments(products);
    const standardError = Math.sqrt(cov.variance / TRIALS);
    expect(Math.abs(cov.mean)).toBeLessThanOrEqual(4 * standardError);
    // A sanity check that the test has power: the covariance scale is far from 0.
    expect(Math.sqrt(a.variance * b.variance)).toBeGreaterThan(10 * standardError);
  });

  it("the 95% interval covers the truth in 93%–97% of trials for a subset with many kept records (normal approximation)", () => {
    // Normal approximation to a sum of many uncorrelated terms; binomial standard
    // error of the rate over 4000 trials is 0.34%, so the band is about ±6 SE. Rough (one term
    // over 5% of the variance: the gamma interval answers) is rare for a subset this large.
    expect(coverage.rough).toBeLessThanOrEqual(TRIALS / 100);
    const rate = coverage.hits / TRIALS;
    expect(rate).toBeGreaterThanOrEqual(0.93);
    expect(rate).toBeLessThanOrEqual(0.97);
  });
});
