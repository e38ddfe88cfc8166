/**
 * The per-window time series of a Slice question, from an estimate answer grouped by window:
 * one point per window start, with the estimate and its 95% interval.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import type { EstimateAnswer } from "../query/answer.ts";
import { MAX_TOP, type Unit } from "../query/request.ts";

export interface SeriesPoint {
  /** Window start, epoch ms. */
  start: number;
  /** null: the window may hold matching records but was cut off by the top-N limit. */
  estimate: number | null;
  low: number | null;
  high: number | null;
  rough: boolean;
}

export interface Series {
  points: SeriesPoint[];
  /** More windows have data than one answer could list (top ≤ 1000): some are missing. */
  truncated: boolean;
}

// Beyond this many grid points the chart would draw more windows than it has pixels.
const MAX_GRID_POINTS = 20_000;

/**
 * Points in time order. A window of the tenant's grid with no group in the answer had no
 * matching kept record, so its estimate is 0 (the estimator sums kept records only, DLT 2007);
 * when the answer was cut at `MAX_TOP` groups that is no longer known, and such windows are
 * gaps (null) instead. Where the answer says longer windows answered (`resolution`: hourly
 * roll-ups of older data), the grid there steps by their length, so an hour is one point
 * rather than one point followed by eleven zeros. With `unit` "rate" a point is the window's
 * rate (bit/s, pkt/s, flows/s: the answer's `rate` of each group), its band scaled alike.
 *
 * @example buildSeries({ groups: [{ key: "1970-01-01T00:05:00.000Z", estimate: 10, ci95: [8, 12], rough: false, … }], from: "1970-01-01T00:00:00.000Z", to: "1970-01-01T00:10:00.000Z", windows: 1, … }, 300).points
 *   // [{ start: 0, estimate: 0, low: 0, high: 0, rough: false }, { start: 300000, estimate: 10, low: 8, high: 12, rough: false }]
 */
export function buildSeries(
  answer: Pick<EstimateAnswer, "groups" | "from" | "to" | "windows"> & Partial<Pick<EstimateAnswer, "resolution">>,
  windowSeconds: number,
  unit: Unit = "total",
): Series {
  const truncated = answer.groups.length >= MAX_TOP && answer.windows > answer.groups.length;
  const byStart = new Map<number, SeriesPoint>();
  for (const g of answer.groups) {
    const start = Date.parse(g.key);
    const shown = unit === "rate" && g.rate ? g.rate : g;
    if (Number.isFinite(start)) byStart.set(start, { start, estimate: shown.estimate, low: shown.ci95[0], high: shown.ci95[1], rough: g.rough });
  }
  const from = Date.parse(answer.from);
  const to = Date.parse(answer.to);
  const step = windowSeconds * 1000;
  const first = Math.ceil(from / step) * step;
  const coarser = (answer.resolution ?? [])
    .filter((r) => r.windowSeconds > windowSeconds)
    .map((r) => ({ from: Date.parse(r.from), to: Date.parse(r.to), step: r.windowSeconds * 1000 }));
  const offGrid = (start: number) => coarser.some((c) => start >= c.from && start < c.to && start % c.step !== 0);
  // Before the first longer window, up to the range start: the longer window holding this
  // time began before `from`, so the answer left it out (windows count by their start). What
  // happened then is unknown here, not 0.
  const leftOut = (start: number) => coarser.some((c) => start < c.from && Math.floor(start / c.step) * c.step < from && start >= from);
  if (Number.isFinite(first) && step > 0 && (to - first) / step <= MAX_GRID_POINTS) {
    for (let start = first; start < to; start += step) {
      if (!byStart.has(start) && !offGrid(start)) {
        const unknown = truncated || leftOut(start);
        byStart.set(start, unknown ? { start, estimate: null, low: null, high: null, rough: false } : { start, estimate: 0, low: 0, high: 0, rough: false });
      }
    }
  }
  return { points: [...byStart.values()].sort((a, b) => a.start - b.start), truncated };
}
