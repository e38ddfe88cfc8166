/**
 * Volumes as rates, the way network engineers read traffic: bit/s for bytes, packets/s and
 * flows/s for the others, and the 95th percentile of the windows' rates over a range.
 *
 * A window's rate is its estimate × 8 / its seconds for bytes (8 bits per octet: RFC 791 §3.1
 * counts Total Length in octets) and estimate / seconds for packets and flows. The window's
 * length is known exactly, so the rate is the estimate times a constant: it stays unbiased, and
 * its standard error and every bound of its intervals scale by the same constant. A range's
 * mean rate is its total over the seconds its windows cover.
 *
 * The 95th percentile of the windows' rates ("p95") is how traffic engineering and transit
 * billing read a month of 5-minute rates (common practice; no RFC defines it). Weir takes it by
 * nearest rank: sorted ascending, the value of rank ⌈0.95·n⌉ (Hyndman and Fan, "Sample
 * quantiles in statistical packages", The American Statistician 50(4), 1996, definition 1, the
 * inverse of the empirical distribution function; recalled from memory).
 *
 * Its interval: each window j gets an interval [L_j, U_j] at level 1 − 0.05/n, so that all n hold
 * together with probability at least 95% (Bonferroni's inequality). The windows are separate
 * reservoirs, but the argument needs no independence. A percentile by nearest rank is an order
 * statistic, non-decreasing in each of its arguments: whenever every true rate r_j lies in
 * [L_j, U_j], the true p95 lies between the p95 of the L_j and the p95 of the U_j. So that pair
 * covers the true p95 with at least 95%. It is conservative (wide), and honest only for the
 * windows read: windows in which no chosen collector sent anything are left out, not taken as 0.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import type { EstimateSum } from "../sampling/estimate.ts";
import { toInterval, type IntervalContext } from "../sampling/interval.ts";
import type { Metric } from "./request.ts";

export const RATE_UNITS = { bytes: "bit/s", packets: "packets/s", flows: "flows/s" } as const satisfies Record<Metric, string>;
export type RateUnit = (typeof RATE_UNITS)[Metric];

/** Bits per octet. */
export const BITS_PER_BYTE = 8;

/** The percentile Weir reports over windows, in percent. */
export const RATE_PERCENTILE = 95;

/**
 * A volume of the metric over `seconds` as a rate: × 8 / seconds for bytes (bit/s), / seconds
 * otherwise; multiplied first, so 9000 bytes over 300 s is 240 bit/s exactly.
 *
 * @example toRate(9000, "bytes", 300) // 240
 * @example toRate(600, "packets", 300) // 2
 */
export function toRate(value: number, metric: Metric, seconds: number): number {
  return (value * (metric === "bytes" ? BITS_PER_BYTE : 1)) / seconds;
}

/**
 * The seconds of a window that have passed at `now`: its whole length once closed, the time
 * since its start while open (at least 1 s, so a window just opened does not divide by 0).
 *
 * @example windowSecondsSoFar(0, 300, 120_000) // 120
 * @example windowSecondsSoFar(0, 300, 900_000) // 300
 */
export function windowSecondsSoFar(windowStart: number, windowSeconds: number, now: number): number {
  return Math.min(windowSeconds, Math.max(1, (now - windowStart) / 1000));
}

/** A rate with its error: the totals' fields times one constant factor. */
export interface RateJson {
  unit: RateUnit;
  /** The seconds divided by: the window's length, or the seconds a range's windows cover. */
  seconds: number;
  estimate: number;
  stdError: number;
  ci95: [low: number, high: number];
  ci95Simultaneous?: [low: number, high: number];
}

/**
 * The rate of an estimate over `seconds`: estimate, standard error and bounds all times
 * rateFactor(metric, seconds).
 *
 * @example rateJson({ estimate: 375_000_000, stdError: 3_750_000, ci95: [367_650_135, 382_349_865] }, "bytes", 300)
 *   // { unit: "bit/s", seconds: 300, estimate: 10_000_000, stdError: 100_000, ci95: [9_804_003.6, 10_195_996.4] }
 */
export function rateJson(
  i: { estimate: number; stdError: number; ci95: readonly [number, number]; ci95Simultaneous?: readonly [number, number] },
  metric: Metric,
  seconds: number,
): RateJson {
  const f = (x: number) => toRate(x, metric, seconds);
  const json: RateJson = {
    unit: RATE_UNITS[metric],
    seconds,
    estimate: f(i.estimate),
    stdError: f(i.stdError),
    ci95: [f(i.ci95[0]), f(i.ci95[1])],
  };
  if (i.ci95Simultaneous) json.ci95Simultaneous = [f(i.ci95Simultaneous[0]), f(i.ci95Simultaneous[1])];
  return json;
}

/**
 * Seconds covered by windows, each [start, start + seconds): the length of their union, so a
 * fine window inside an hourly one (a roll-up under way) is not counted twice.
 *
 * @example coveredSeconds([{ windowStart: 0, windowSeconds: 300 }, { windowStart: 300_000, windowSeconds: 300 }, { windowStart: 0, windowSeconds: 300 }]) // 600
 */
export function coveredSeconds(spans: readonly { windowStart: number; windowSeconds: number }[]): number {
  const sorted = spans.map((s) => [s.windowStart, s.windowStart + s.windowSeconds * 1000] as const).sort((a, b) => a[0] - b[0]);
  let total = 0;
  let end = -Infinity;
  for (const [from, to] of sorted) {
    if (to <= end) continue;
    total += to - Math.max(from, end);
    end = to;
  }
  return total / 1000;
}

/**
 * The 1-based rank of the `percent` percentile among n sorted values by nearest rank:
 * ⌈percent·n/100⌉ (Hyndman and Fan 1996, definition 1), at least 1. Integer arithmetic, so
 * 95% of 20 is rank 19 exactly.
 *
 * @example nearestRank(20, 95) // 19
 * @example nearestRank(12, 95) // 12 (the largest)
 */
export function nearestRank(n: number, percent: number): number {
  return Math.max(1, Math.ceil((percent * n) / 100));
}

/**
 * The `percent` percentile of values by nearest rank; NaN for none.
 *
 * @example percentileNearestRank([5, 1, 4, 2, 3], 95) // 5
 * @example percentileNearestRank([1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16, 17, 18, 19, 20], 95) // 19
 */
export function percentileNearestRank(values: readonly number[], percent: number): number {
  if (values.length === 0) return Number.NaN;
  const sorted = [...values].sort((a, b) => a - b);
  return sorted[nearestRank(sorted.length, percent) - 1];
}

/** One window's part of a percentile: its sum over the subset, its length and its interval context. */
export interface WindowSum {
  windowStart: number;
  windowSeconds: number;
  sum: EstimateSum;
  /** The window's own τ bound and its exact total of the metric (see toInterval). */
  context: IntervalContext;
}

/** The p95 of the windows' rates, as the estimate answer carries it with `unit: "rate"`. */
export interface PercentileJson {
  percentile: number;
  unit: RateUnit;
  definition: string;
  /** Windows read: every window with a record from a chosen collector in range. */
  windows: number;
  /** The 1-based rank ⌈0.95·windows⌉ of the value among the windows' rates, ascending. */
  rank: number;
  estimate: number;
  /** Start of a window whose estimated rate is the p95 (ISO 8601). */
  window: string;
  /**
   * The p95 of the windows' lower bounds and of their upper bounds, each window's interval at
   * level 1 − 0.05/windows (Bonferroni): covers the true p95 of the windows read with at least 95%.
   */
  ci95: [low: number, high: number];
  /** The level of each window's interval behind ci95: 1 − 0.05/windows. */
  perWindowLevel: number;
  notes: string[];
}

const DEFINITION =
  "95th percentile of the windows' rates by nearest rank: the windows' rates sorted ascending, the one at rank ⌈0.95·n⌉ (common practice in traffic engineering and transit billing; Hyndman and Fan 1996, definition 1)";

/**
 * The percentile of the windows' rates with its interval (see the module note), or null when
 * no window was read. Windows of several lengths (a range reaching into hourly roll-ups) are
 * each a rate over their own length; a note says that hourly rates are averages that smooth
 * peaks out.
 *
 * @example percentileOfWindows(twentyWindowsOf5Minutes, "bytes")
 *   // { percentile: 95, unit: "bit/s", windows: 20, rank: 19, estimate: …, ci95: [lowP95, highP95], perWindowLevel: 0.9975, notes: [] }
 */
export function percentileOfWindows(windows: readonly WindowSum[], metric: Metric, percent = RATE_PERCENTILE): PercentileJson | null {
  const n = windows.length;
  if (n === 0) return null;
  const alpha = 0.05 / n;
  const rates: { start: number; estimate: number }[] = [];
  const lows: number[] = [];
  const highs: number[] = [];
  for (const w of windows) {
    const interval = toInterval(w.sum, w.context, alpha);
    rates.push({ start: w.windowStart, estimate: toRate(w.sum.estimate, metric, w.windowSeconds) });
    lows.push(toRate(interval.ci95[0], metric, w.windowSeconds));
    highs.push(toRate(interval.ci95[1], metric, w.windowSeconds));
  }
  const rank = nearestRank(n, percent);
  const sorted = [...rates].sort((a, b) => a.estimate - b.estimate || a.start - b.start);
  const at = sorted[rank - 1];
  const notes: string[] = [];
  if (n < 20) {
    notes.push(
      `Only ${n} window${n === 1 ? "" : "s"}: with fewer than 20 the 95th percentile by nearest rank is the largest window's rate. Read it as the peak, not as a percentile.`,
    );
  } else if (n < 100) {
    notes.push(`${n} windows: the 95th percentile is the ${ordinal(n - rank + 1)} largest window's rate, close to the peak.`);
  }
  if (new Set(windows.map((w) => w.windowSeconds)).size > 1) {
    notes.push("The range mixes window lengths: the hourly windows' rates are averages over an hour, which smooth out shorter peaks, so the percentile reads lower there than 5-minute windows would.");
  }
  notes.push(
    `The interval takes each window's interval at level 1 − 0.05/${n} (Bonferroni), so that all hold together with at least 95%; the percentile of their lower and of their upper bounds then brackets the true percentile. The estimate itself tends to sit above the true percentile when the windows' errors are large, as the largest of noisy numbers does.`,
  );
  return {
    percentile: percent,
    unit: RATE_UNITS[metric],
    definition: DEFINITION,
    windows: n,
    rank,
    estimate: at.estimate,
    window: new Date(at.start).toISOString(),
    ci95: [percentileNearestRank(lows, percent), percentileNearestRank(highs, percent)],
    perWindowLevel: 1 - alpha,
    notes,
  };
}

function ordinal(k: number): string {
  const suffix = k % 10 === 1 && k % 100 !== 11 ? "st" : k % 10 === 2 && k % 100 !== 12 ? "nd" : k % 10 === 3 && k % 100 !== 13 ? "rd" : "th";
  return `${k}${suffix}`;
}
