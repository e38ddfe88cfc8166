/**
 * What an answer asked with `unit: "rate"` needs beyond the totals: the seconds the range's
 * windows cover, each window's length, and every window's own sum for the 95th percentile of
 * the windows' rates (rate.ts).
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import { EMPTY_SUM } from "../sampling/estimate.ts";
import { largestRatio, unseenRatio, type AnswerParts } from "./answer.ts";
import { coveredSeconds, percentileOfWindows, type WindowSum } from "./rate.ts";
import type { EstimateQuery, Metric } from "./request.ts";
import { compileQuery, scan, type ScanReservoir } from "./scan.ts";

/** One reservoir row of the range: its window and exact counters. */
export interface RateRow {
  windowStart: number;
  windowSeconds: number;
  records: number;
  bytes: bigint;
  packets: bigint;
}

/**
 * The rate parts of an answer. Each window's interval context is its own: the largest τ of its
 * reservoirs times the metric's ratio to the weight (as the range's is, see estimate.server.ts),
 * and its exact total of the metric as the cap. A window of the range in which no kept record
 * matched still counts, with an estimate of 0 and a no-match interval; a window with no record
 * from any chosen collector is not among the rows and is left out.
 *
 * @example rateParts(reservoirs, rows, query, "bytes", "bytes")
 *   // { seconds: 1200, windowSeconds: Map { 1714528800000 => 300, … }, p95: { percentile: 95, unit: "bit/s", … } }
 */
export function rateParts(
  reservoirs: readonly ScanReservoir[],
  rows: readonly RateRow[],
  query: EstimateQuery,
  metric: Metric,
  weight: "bytes" | "packets",
): NonNullable<AnswerParts["rate"]> {
  const windowSeconds = new Map<number, number>();
  const cap = new Map<number, bigint>();
  for (const r of rows) {
    // A roll-up under way may leave a fine window beside the hourly one at the same start: the longer one spans both.
    windowSeconds.set(r.windowStart, Math.max(windowSeconds.get(r.windowStart) ?? 0, r.windowSeconds));
    const x = metric === "bytes" ? r.bytes : metric === "packets" ? r.packets : BigInt(r.records);
    cap.set(r.windowStart, (cap.get(r.windowStart) ?? 0n) + x);
  }
  const unseen = new Map<number, number>();
  for (const r of reservoirs) {
    if (r.tau <= 0) continue;
    const term = r.tau * unseenRatio(weight, metric, metric === weight ? null : largestRatio(r.columns, metric));
    unseen.set(r.windowStart, Math.max(unseen.get(r.windowStart) ?? 0, term));
  }
  const perWindow = scan(reservoirs, compileQuery({ ...query, groupBy: { by: "window" }, top: Number.MAX_SAFE_INTEGER }, metric)).groups;
  const sums = new Map(perWindow.map((g) => [Date.parse(g.key), g.sum]));
  const windows: WindowSum[] = [...windowSeconds].map(([start, seconds]) => ({
    windowStart: start,
    windowSeconds: seconds,
    sum: sums.get(start) ?? { ...EMPTY_SUM },
    context: { unseenTerm: unseen.get(start) ?? 0, cap: Number(cap.get(start) ?? 0n) },
  }));
  return { seconds: coveredSeconds(rows), windowSeconds, p95: percentileOfWindows(windows, metric) };
}
