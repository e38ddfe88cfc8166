// Monte Carlo harness for interval coverage (tests/sampling/coverage.test.ts). Invented,
// heavy-tailed data; the checks compare each interval with the true subset sum, which the
// simulation knows because it keeps every record.
import { addRecord, EMPTY_SUM, type EstimateSum } from "~/sampling/estimate";
import { type Interval, type IntervalContext, toInterval, Z95 } from "~/sampling/interval";
import { mergeStates } from "~/sampling/merge";
import type { ReservoirState } from "~/sampling/reservoir";
import { seededUniform, type UniformSource } from "~/sampling/uniform";
import { unseenRatio } from "~/query/answer";
import { heavyTailedPopulation, type TestRecord } from "./population";

export type Metric = "bytes" | "packets" | "flows";
export const METRICS: readonly Metric[] = ["bytes", "packets", "flows"];
export type Scenario = "single window" | "3 windows summed" | "merge of 2 collectors" | "roll-up of 12 windows";
export const SCENARIOS: readonly Scenario[] = ["single window", "3 windows summed", "merge of 2 collectors", "roll-up of 12 windows"];

/** Size classes by the subset's true share of the range's bytes: [from, to). */
export const SIZE_CLASSES: readonly [from: number, to: number][] = [
  [0.0005, 0.002],
  [0.002, 0.01],
  [0.01, 0.05],
  [0.05, 0.2],
  [0.2, 0.5],
];

export const K = 64;
export const RECORDS_PER_WINDOW = 2000;
const SUBSETS = 48;

function value(r: TestRecord, metric: Metric): number {
  return metric === "bytes" ? r.bytes : metric === "packets" ? r.packets : 1;
}

/** One reservoir per window, by the method's definition: the k highest priorities w/u, τ the (k+1)-th. */
function sample(records: TestRecord[], u: UniformSource): ReservoirState<TestRecord> {
  const priorities = new Float64Array(records.length);
  for (let i = 0; i < records.length; i++) priorities[i] = records[i].bytes / u();
  const sorted = Float64Array.from(priorities).sort();
  const tau = records.length > K ? sorted[records.length - K - 1] : 0;
  const kept = [];
  for (let i = 0; i < records.length; i++) if (priorities[i] > tau) kept.push({ item: records[i], weight: records[i].bytes, priority: priorities[i] });
  return { k: K, tau, seen: records.length, kept };
}

interface Setup {
  scenario: Scenario;
  /** Populations of the windows (or collectors) sampled each trial. */
  windows: TestRecord[][];
  /** How the windows' samples become the reservoirs a query reads. */
  combine: (states: ReservoirState<TestRecord>[]) => ReservoirState<TestRecord>[];
  /** Subset membership: member(record id) per subset, ids unique over the setup's records. */
  members: Uint8Array[];
  /** True sums per subset and metric, and the subset's share of all bytes. */
  truth: Record<Metric, number>[];
  share: number[];
  totals: Record<Metric, number>;
}

function setup(scenario: Scenario, seed: number): Setup {
  const count = scenario === "single window" ? 1 : scenario === "3 windows summed" ? 3 : scenario === "merge of 2 collectors" ? 2 : 12;
  let nextId = 0;
  const windows = Array.from({ length: count }, (_, j) =>
    heavyTailedPopulation(RECORDS_PER_WINDOW, seed * 100 + j, 1.2).map((r) => ({ ...r, id: nextId++ })),
  );
  const all = windows.flat();
  const u = seededUniform(seed * 7919 + 1);
  const members: Uint8Array[] = [];
  // Membership probabilities log-spaced over 0.02% … 60%: the realized byte shares spread over every class.
  for (let s = 0; s < SUBSETS; s++) {
    const q = 0.0002 * Math.pow(3000, (s % 24) / 23);
    const m = new Uint8Array(nextId);
    for (const r of all) m[r.id] = u() < q ? 1 : 0;
    members.push(m);
  }
  const totals = { bytes: 0, packets: 0, flows: 0 };
  for (const r of all) for (const metric of METRICS) totals[metric] += value(r, metric);
  const truth = members.map((m) => {
    const t = { bytes: 0, packets: 0, flows: 0 };
    for (const r of all) if (m[r.id]) for (const metric of METRICS) t[metric] += value(r, metric);
    return t;
  });
  const combine =
    scenario === "merge of 2 collectors" || scenario === "roll-up of 12 windows"
      ? (states: ReservoirState<TestRecord>[]) => [mergeStates(states, K)]
      : (states: ReservoirState<TestRecord>[]) => states;
  return { scenario, windows, combine, members, truth, share: truth.map((t) => t.bytes / totals.bytes), totals };
}

export interface Outcome {
  scenario: Scenario;
  metric: Metric;
  sizeClass: number;
  truth: number;
  sum: EstimateSum;
  context: IntervalContext;
  interval: Interval;
}

export function sizeClassOf(share: number): number {
  return SIZE_CLASSES.findIndex(([from, to]) => share >= from && share < to);
}

/**
 * Runs `trials` independent samplings of every scenario and hands each (subset, metric)
 * answer to `visit`. The context is what the query path gives: unseenTerm = the largest τ
 * of the reservoirs read times the metric's unseen ratio (app/query/answer.ts unseenRatio),
 * cap = the exact total of the metric over the range.
 */
export function simulate(trials: number, seed: number, visit: (o: Outcome) => void, interval = toInterval): void {
  const setups = SCENARIOS.map((s, i) => setup(s, seed + i));
  const u = seededUniform(seed);
  for (let t = 0; t < trials; t++) {
    for (const s of setups) {
      const reservoirs = s.combine(s.windows.map((w) => sample(w, u)));
      // As the query path does (app/query/answer.ts unseenRatio): per reservoir, τ times the largest
      // metric-to-weight ratio among its kept records (at most 1 under a byte weight).
      const unseen = (metric: Metric) =>
        Math.max(0, ...reservoirs.map((r) => (r.tau > 0 ? r.tau * unseenRatio("bytes", metric, r.kept.length === 0 ? null : Math.max(...r.kept.map((k) => value(k.item, metric) / k.weight))) : 0)));
      const unseenByMetric = { bytes: unseen("bytes"), packets: unseen("packets"), flows: unseen("flows") };
      for (let j = 0; j < s.members.length; j++) {
        const sizeClass = sizeClassOf(s.share[j]);
        if (sizeClass < 0) continue;
        const m = s.members[j];
        for (const metric of METRICS) {
          const unseenTerm = unseenByMetric[metric];
          const sum = { ...EMPTY_SUM };
          for (const r of reservoirs) for (const kept of r.kept) if (m[kept.item.id]) addRecord(sum, r.tau, kept.weight, value(kept.item, metric));
          const context = { unseenTerm, cap: s.totals[metric] };
          visit({ scenario: s.scenario, metric, sizeClass, truth: s.truth[j][metric], sum, context, interval: interval(sum, context) });
        }
      }
    }
  }
}

/** The interval Weir gave before gamma intervals: estimate ± z·SE, never below the certain part. */
export function normalOnly(sum: EstimateSum): Interval {
  const stdError = Math.sqrt(sum.variance);
  return {
    estimate: sum.estimate,
    stdError,
    ci95: [Math.max(sum.estimate - Z95 * stdError, sum.certain, 0), sum.estimate + Z95 * stdError],
    rough: false,
    roughReason: null,
    method: "normal",
    kept: sum.kept,
    matched: sum.kept > 0,
  };
}
