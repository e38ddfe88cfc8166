/**
 * The estimate answer as JSON: what `/api/v1/estimate` returns and the console shows.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import type { EstimateSum } from "../sampling/estimate.ts";
import { toInterval } from "../sampling/interval.ts";
import type { Metric } from "./request.ts";
import type { ScanResult } from "./scan.ts";

/** An estimate with its error: standard error, 95% interval, kept records behind it, rough flag. */
export interface IntervalJson {
  estimate: number;
  stdError: number;
  ci95: [low: number, high: number];
  kept: number;
  /** Fewer than 10 uncertain kept records: the normal interval is a poor guide. */
  rough: boolean;
}

export interface GroupJson extends IntervalJson {
  /** A prefix (`198.51.100.0/24`), a port or protocol number, a collector name, or a window start (ISO 8601). */
  key: string;
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
}

/**
 * An estimate sum as JSON through `toInterval` (the lower bound is never below the certain
 * part nor below 0; rough under 10 uncertain records).
 *
 * @example intervalJson({ estimate: 1000, variance: 2500, certain: 0, kept: 40, uncertain: 40 })
 *   // { estimate: 1000, stdError: 50, ci95: [902.0018…, 1097.998…], kept: 40, rough: false }
 */
export function intervalJson(sum: EstimateSum): IntervalJson {
  const i = toInterval(sum);
  return { estimate: i.estimate, stdError: i.stdError, ci95: i.ci95, kept: i.kept, rough: i.rough };
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
}

/** Assembles the answer, fields in the documented order. */
export function buildAnswer(parts: AnswerParts): EstimateAnswer {
  const { metric, result, exact } = parts;
  return {
    metric,
    ...intervalJson(result.total),
    windows: parts.windows,
    collectors: parts.collectors,
    exact: { records: counterJson(exact.records), bytes: counterJson(exact.bytes), packets: counterJson(exact.packets) },
    groups: result.groups.map((g) => ({ key: g.key, ...intervalJson(g.sum) })),
    from: new Date(parts.from).toISOString(),
    to: new Date(parts.to).toISOString(),
    resolution: resolutionJson(parts.spans ?? []),
  };
}
