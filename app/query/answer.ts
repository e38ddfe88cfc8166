/**
 * The estimate answer as JSON: what `/api/v1/estimate` returns and the console shows.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import type { EstimateSum } from "../sampling/estimate.ts";
import { toInterval, type IntervalContext, type IntervalMethod } from "../sampling/interval.ts";
import type { Metric, Unit } from "./request.ts";
import type { ScanResult } from "./scan.ts";
import { simultaneousInterval, type SelectionJson } from "./selection.ts";
import type { RollUpDisclosure } from "./rollup-disclosure.ts";
import { rateJson, type PercentileJson, type RateJson } from "./rate.ts";
import type { CollectorRuleJson } from "./collector-rule.ts";

/** An estimate with its error: standard error, 95% interval, kept records behind it, rough flag. */
export interface IntervalJson {
  estimate: number;
  stdError: number;
  ci95: [low: number, high: number];
  kept: number;
  /**
   * The normal approximation would be poor here (fewer than 20 uncertain terms, or one term
   * carrying over 5% of the variance, or nothing matched): the gamma interval answered.
   */
  rough: boolean;
  /** How the interval was found: `exact`, `normal`, `gamma` or `no-match` (see toInterval). */
  method: IntervalMethod;
  /** Why rough, in words; null when not rough. */
  roughReason: string | null;
  /** False when no kept record matched: the interval is 0 up to a bound, never proof of no traffic. */
  matched: boolean;
  /** "no sampled record matched", only when matched is false. */
  message?: string;
}

export interface GroupJson extends IntervalJson {
  /** A prefix (`198.51.100.0/24`), a port or protocol number, a collector name, or a window start (ISO 8601). */
  key: string;
  /**
   * With a group-by: the Bonferroni interval, estimate ± z·SE with z = Φ⁻¹(1 − 0.025/m) for the
   * m groups ranked (never narrower than ci95), so all m hold together with at least 95%.
   */
  ci95Simultaneous?: [low: number, high: number];
  // Both shares are in every answer of buildAnswer; optional only so a hand-made group stays a GroupJson.
  /** The group's estimate ÷ the question's estimate (the subset asked); null when that is 0. */
  shareOfQuestion?: number | null;
  /** The group's estimate ÷ the exact total of the metric over everything in range; null when that is 0. */
  shareOfAll?: number | null;
  /** With unit "rate": per window with groupBy window, else the mean over the seconds the range's windows cover. */
  rate?: RateJson;
}

/** Exact counters: numbers up to 2^53−1, decimal strings above, where JSON numbers stop being exact. */
export type Counter = number | string;

/**
 * The windows of one length that answered: older parts of a range may come from hourly
 * windows rolled up from fine ones (same unbiased estimates, coarser time resolution).
 */
export interface ResolutionJson {
  windowSeconds: number;
  /** Distinct window starts of this length with data in range. */
  windows: number;
  /** Start of the first of these windows (ISO 8601). */
  from: string;
  /** End of the last of them (ISO 8601). */
  to: string;
  /** Hourly windows rolled up from fine ones: how much wider intervals get there (rollup-disclosure.ts). */
  rollUp?: RollUpDisclosure;
}

export interface EstimateAnswer extends IntervalJson {
  metric: Metric;
  /** Distinct window starts with data in range. */
  windows: number;
  /** Collectors with data in range, by name. */
  collectors: string[];
  /** Exact totals of every record seen in those windows and collectors, whatever the filter. */
  exact: { records: Counter; bytes: Counter; packets: Counter };
  groups: GroupJson[];
  from: string;
  to: string;
  /** The window lengths used, one entry per length, in time order of their first window. */
  resolution: ResolutionJson[];
  /** With a group-by: how the top groups were chosen, and why their estimates may be overstated (selection.ts). */
  selection?: SelectionJson;
  /** "rate" when asked for: then `rate` and `p95` stand beside the totals (rate.ts). */
  unit?: Unit;
  /** With unit "rate": the mean rate over the seconds the range's windows cover. */
  rate?: RateJson;
  /** With unit "rate" and at least one window: the 95th percentile of the windows' rates (rate.ts). */
  p95?: PercentileJson;
  /** Which collectors counted and why: copies and merges left out, or counted together on request (collector-rule.ts). */
  collectorRule?: CollectorRuleJson;
}

/**
 * An estimate sum as JSON through `toInterval` with the range's context (the lower bound is
 * never below the certain part, the upper never above the range's exact total; no zero-width
 * interval while τ > 0).
 *
 * @example intervalJson({ estimate: 1000, variance: 2500, certain: 0, kept: 40, uncertain: 40, maxTerm: 10 })
 *   // { estimate: 1000, stdError: 50, ci95: [902.0018…, 1097.998…], kept: 40, rough: false, method: "normal", roughReason: null, matched: true }
 * @example intervalJson(EMPTY_SUM, { unseenTerm: 1000 })
 *   // { estimate: 0, stdError: 0, ci95: [0, 3688.879…], kept: 0, rough: true, method: "no-match", …, matched: false, message: "no sampled record matched" }
 */
export function intervalJson(sum: EstimateSum, context?: IntervalContext): IntervalJson {
  const i = toInterval(sum, context);
  const json: IntervalJson = {
    estimate: i.estimate,
    stdError: i.stdError,
    ci95: i.ci95,
    kept: i.kept,
    rough: i.rough,
    method: i.method,
    roughReason: i.roughReason,
    matched: i.matched,
  };
  if (!i.matched) json.message = NO_MATCH_MESSAGE;
  return json;
}

export const NO_MATCH_MESSAGE = "no sampled record matched";

/**
 * The most a metric can be per unit of sampling weight, for one record: how much one record
 * that was not kept (weight below τ) could add. Under a byte weight every metric is at most the
 * weight (a packet has at least 1 byte, a flow counts 1 and has w ≥ 1). Under a packet weight,
 * packets and flows are at most 1 per packet and bytes at most 65 535 per packet, the largest
 * IPv4 Total Length (RFC 791 §3.1: a 16-bit field); an IPv6 jumbogram (RFC 2675) could exceed
 * it, which flow exporters do not report in practice (common practice).
 *
 * @example unseenPerWeight("packets", "bytes") // 65535
 */
export function unseenPerWeight(weight: "bytes" | "packets", metric: Metric): number {
  return weight === "packets" && metric === "bytes" ? 65_535 : 1;
}

/**
 * What one record left out of a reservoir could add to `metric` per unit of τ, given the largest
 * metric-to-weight ratio among that reservoir's kept records (`observedMax`, null when none were
 * read). The bound above holds for every record but is loose — a packet per byte, a flow per
 * byte — and would make packets and flows intervals many times wider than bytes ones. The
 * records left out are of the same traffic as those kept, and the records with the largest
 * ratio (the smallest flows) are the most numerous, so they are among the kept ones in
 * practice: the observed largest ratio stands in for theirs (a plug-in; the coverage
 * Monte Carlo in tests/sampling measures it), never above the bound. With the metric equal to
 * the weight the ratio is exactly 1.
 *
 * @example unseenRatio("bytes", "packets", 1 / 40) // 0.025
 * @example unseenRatio("bytes", "bytes", 0.5) // 1
 */
export function unseenRatio(weight: "bytes" | "packets", metric: Metric, observedMax: number | null): number {
  const bound = unseenPerWeight(weight, metric);
  if (metric === weight || observedMax === null) return bound;
  return Math.min(bound, observedMax);
}

/** The largest metric-to-weight ratio among kept records in columns, or null when there are none. */
export function largestRatio(columns: { length: number; weight: Float64Array; bytes: Float64Array; packets: Float64Array }, metric: Metric): number | null {
  if (columns.length === 0) return null;
  const x = metric === "bytes" ? columns.bytes : metric === "packets" ? columns.packets : null;
  let max = 0;
  for (let i = 0; i < columns.length; i++) {
    const ratio = (x === null ? 1 : x[i]) / columns.weight[i];
    if (ratio > max) max = ratio;
  }
  return max;
}

/**
 * @example counterJson(1500n) // 1500
 * @example counterJson(2n ** 64n) // "18446744073709551616"
 */
export function counterJson(value: bigint): Counter {
  return value <= BigInt(Number.MAX_SAFE_INTEGER) ? Number(value) : value.toString();
}

/** One reservoir's window, as the answer's `resolution` summarises them. */
export interface WindowSpan {
  windowStart: number;
  windowSeconds: number;
}

/**
 * The window lengths behind an answer, in time order of their first window.
 *
 * @example resolutionJson([{ windowStart: 0, windowSeconds: 3600 }, { windowStart: 3_600_000, windowSeconds: 300 }, { windowStart: 3_900_000, windowSeconds: 300 }])
 *   // [{ windowSeconds: 3600, windows: 1, from: "1970-01-01T00:00:00.000Z", to: "1970-01-01T01:00:00.000Z" },
 *   //  { windowSeconds: 300, windows: 2, from: "1970-01-01T01:00:00.000Z", to: "1970-01-01T01:10:00.000Z" }]
 */
export function resolutionJson(spans: readonly WindowSpan[]): ResolutionJson[] {
  const byLength = new Map<number, { starts: Set<number>; from: number; to: number }>();
  for (const { windowStart, windowSeconds } of spans) {
    const end = windowStart + windowSeconds * 1000;
    const seen = byLength.get(windowSeconds);
    if (!seen) byLength.set(windowSeconds, { starts: new Set([windowStart]), from: windowStart, to: end });
    else {
      seen.starts.add(windowStart);
      seen.from = Math.min(seen.from, windowStart);
      seen.to = Math.max(seen.to, end);
    }
  }
  return [...byLength]
    .sort(([lengthA, a], [lengthB, b]) => a.from - b.from || lengthB - lengthA)
    .map(([windowSeconds, s]) => ({ windowSeconds, windows: s.starts.size, from: new Date(s.from).toISOString(), to: new Date(s.to).toISOString() }));
}

export interface AnswerParts {
  metric: Metric;
  result: ScanResult;
  windows: number;
  collectors: string[];
  /** Every reservoir's window, for `resolution`; none when absent. */
  spans?: readonly WindowSpan[];
  exact: { records: bigint; bytes: bigint; packets: bigint };
  from: number;
  to: number;
  /**
   * What the intervals may use about the range: unseenTerm = the largest τ of the reservoirs
   * covered times unseenPerWeight, cap = the range's exact total of the metric. Without it,
   * τ is taken as 0 (every record kept), as in tests of the answer's shape.
   */
  context?: IntervalContext;
  /** With a group-by: how the groups were chosen (selection.ts). */
  selection?: SelectionJson | null;
  /** The groups are windows: each group's rate is over its own window's length. */
  groupByWindow?: boolean;
  /**
   * With unit "rate": the seconds the range's windows cover (rate.ts coveredSeconds), each
   * window's length by its start for groupBy window, and the p95 of the windows' rates.
   */
  rate?: { seconds: number; windowSeconds: ReadonlyMap<number, number>; p95: PercentileJson | null };
}

/** The exact total of the metric over everything in range, whatever the filter: what `shareOfAll` is a share of. */
export function exactTotal(metric: Metric, exact: { records: bigint; bytes: bigint; packets: bigint }): number {
  return Number(metric === "bytes" ? exact.bytes : metric === "packets" ? exact.packets : exact.records);
}

/**
 * One group with its interval, and with a selection its Bonferroni interval. A group of a split
 * ranking is estimated from half B, where a record below τ is in the half with probability
 * about w/(2τ): a record the half left out may stand for up to 2τ, hence the doubled unseenTerm.
 */
function groupJson(key: string, sum: EstimateSum, parts: AnswerParts): GroupJson {
  const { context, selection } = parts;
  const halfContext = selection?.rankedBy === "split" && context ? { ...context, unseenTerm: 2 * context.unseenTerm } : context;
  const all = exactTotal(parts.metric, parts.exact);
  const question = parts.result.total.estimate;
  const json: GroupJson = {
    key,
    ...intervalJson(sum, halfContext),
    shareOfQuestion: question > 0 ? sum.estimate / question : null,
    shareOfAll: all > 0 ? sum.estimate / all : null,
  };
  if (selection) json.ci95Simultaneous = simultaneousInterval(json, sum.certain, selection.simultaneousZ);
  if (parts.rate) {
    const windowSeconds = parts.rate.windowSeconds.get(Date.parse(key));
    const seconds = parts.groupByWindow && windowSeconds !== undefined ? windowSeconds : parts.rate.seconds;
    json.rate = rateJson(json, parts.metric, seconds);
  }
  return json;
}

/** Assembles the answer, fields in the documented order. */
export function buildAnswer(parts: AnswerParts): EstimateAnswer {
  const { metric, result, exact } = parts;
  const total = intervalJson(result.total, parts.context);
  return {
    metric,
    ...total,
    windows: parts.windows,
    collectors: parts.collectors,
    exact: { records: counterJson(exact.records), bytes: counterJson(exact.bytes), packets: counterJson(exact.packets) },
    groups: result.groups.map((g) => groupJson(g.key, g.sum, parts)),
    ...(parts.selection ? { selection: parts.selection } : {}),
    from: new Date(parts.from).toISOString(),
    to: new Date(parts.to).toISOString(),
    resolution: resolutionJson(parts.spans ?? []),
    ...(parts.rate ? rateFields(total, parts) : {}),
  };
}

/** unit, rate and p95 of an answer asked with unit "rate"; no rate over no seconds. */
function rateFields(total: IntervalJson, parts: AnswerParts): Pick<EstimateAnswer, "unit" | "rate" | "p95"> {
  const { seconds, p95 } = parts.rate!;
  return {
    unit: "rate",
    ...(seconds > 0 ? { rate: rateJson(total, parts.metric, seconds) } : {}),
    ...(p95 ? { p95 } : {}),
  };
}
