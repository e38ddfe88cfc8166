// Coverage of Weir's 95% intervals by Monte Carlo, with fixed seeds: heavy-tailed records
// (Pareto, shape 1.2: a few records carry most bytes, as flow sizes do — common practice to
// model them so), k = 64, 2 000 records per window, subsets chosen independently of the
// sample and binned by their true share of the bytes, metrics bytes, packets and flows, on one
// window, three windows summed, a merge of two collectors and a roll-up of twelve windows
// (app/sampling/merge.ts at k). The truth is the simulation's own full record list.
//
// Tolerance: TRIALS independent samplings. Subsets within one trial share the priorities, so
// the number of trials, not of answers, is the conservative count for the binomial standard
// error: SE = √(0.95·0.05/1000) = 0.69%, and 95% ± 2.6·SE (the normal approximation to a
// binomial proportion, two-sided 99%) is [93.2%, 96.8%]: a method that truly covers 95% stays
// inside the asserted [93%, 99%].
//
// Where 99% is not asserted: classes under 5% of the bytes rest mostly on answers with no or
// one kept record. There an interval that never claims "no traffic" must reach up to about
// 3.69·τ whatever the truth, so it covers far more than 95% (Garwood's exact Poisson interval
// covers → 100% as the mean → 0: its coverage is at least 95% by construction, Garwood,
// Biometrika 28, 1936); and Fay and Feuer (Statistics in Medicine 16, 1997, §4) report their
// gamma interval as conservative. For those classes the test asserts at least 93% only; the
// README's coverage table shows how far above 95% they are. From 5% of the bytes up it asserts
// [93%, 99%] per metric, pooled over the four scenarios, and at least 93% in each scenario.
import { beforeAll, describe, expect, it } from "vitest";
import { METRICS, normalOnly, SCENARIOS, SIZE_CLASSES, simulate, type Metric, type Outcome, type Scenario } from "./coverage-sim";

const TRIALS = 1000;
const SEED = 20_061_997;

interface Tally {
  n: number;
  covered: number;
  zeroWidthWithTau: number;
}

function tally(outcomes: (visit: (o: Outcome) => void) => void): Map<string, Tally> {
  const out = new Map<string, Tally>();
  outcomes((o) => {
    const [low, high] = o.interval.ci95;
    for (const key of [`${o.scenario}|${o.metric}|${o.sizeClass}`, `all|${o.metric}|${o.sizeClass}`]) {
      let t = out.get(key);
      if (!t) out.set(key, (t = { n: 0, covered: 0, zeroWidthWithTau: 0 }));
      t.n++;
      if (low <= o.truth && o.truth <= high) t.covered++;
      if (o.context.unseenTerm > 0 && high <= low) t.zeroWidthWithTau++;
    }
  });
  return out;
}

const label = (sizeClass: number) => `${SIZE_CLASSES[sizeClass][0] * 100}%–${SIZE_CLASSES[sizeClass][1] * 100}% of the bytes`;

describe("interval coverage over heavy-tailed data (Monte Carlo, fixed seed)", () => {
  let results: Map<string, Tally>;
  beforeAll(() => {
    results = tally((visit) => simulate(TRIALS, SEED, visit));
  });

  const cases: [Scenario | "all", Metric, number][] = [];
  for (const scenario of [...SCENARIOS, "all" as const]) for (const metric of METRICS) for (let c = 0; c < SIZE_CLASSES.length; c++) cases.push([scenario, metric, c]);

  it.each(cases)("%s, %s, size class %i: at least 93% (and at most 99% from 5% of the bytes up, pooled)", (scenario, metric, sizeClass) => {
    const t = results.get(`${scenario}|${metric}|${sizeClass}`);
    if (!t) return; // this scenario's subsets fell in no such class (a single window has few 20–50% subsets)
    const coverage = t.covered / t.n;
    expect(coverage, `${scenario} ${metric} ${label(sizeClass)}: ${t.covered}/${t.n}`).toBeGreaterThanOrEqual(0.93);
    if (scenario === "all" && SIZE_CLASSES[sizeClass][0] >= 0.05) {
      expect(coverage, `${scenario} ${metric} ${label(sizeClass)}: ${t.covered}/${t.n}`).toBeLessThanOrEqual(0.99);
    }
  });

  it("never answers a zero-width interval while τ > 0 (issue: a subset with no kept record is not proof of no traffic)", () => {
    for (const [key, t] of results) expect(t.zeroWidthWithTau, key).toBe(0);
  });

  it("is needed: the normal interval alone covers under 93% in small classes of the same simulation (the audit's finding)", () => {
    const normal = tally((visit) => simulate(200, SEED, visit, normalOnly));
    const small = normal.get("all|flows|1")!;
    expect(small.covered / small.n).toBeLessThan(0.93);
  });
});
