/**
 * What a roll-up does to intervals, stated in the answer's `resolution` entry for hourly
 * windows rolled up from fine ones.
 *
 * A roll-up of n fine windows of k records each into one hourly window of K records keeps one
 * sample of the hour in place of n samples, so every interval over those hours widens, not only
 * small subsets'. Two figures:
 *
 * - `boundRatio`: the ratio of standard-error bounds, √(n·(k−1)/(K−1)). The variance of a
 *   priority sample's total is at most W²/(k−1) (Szegedy, STOC 2006); n windows of W/n each
 *   sum to n·(W/n)²/(k−1) = W²/(n(k−1)), one hourly window of W to W²/(K−1); with unequal
 *   windows Σ W_j² ≥ W²/n (Cauchy–Schwarz), so this is the largest the ratio of the bounds
 *   gets. It scales the bound, not the actual error, and the actual ratio can be larger: in
 *   fine windows many records lie above τ and are exact, and after the roll-up far fewer do
 *   (the benchmark measured 6.5× where this ratio is √12 ≈ 3.46).
 * - `measured`: the standard-error ratio after/before a roll-up for the same questions, from
 *   the benchmark (`npm run bench`, query section), with the setting it was measured at.
 */

import type { ResolutionJson } from "./answer.ts";

const HOUR_SECONDS = 3600;

/**
 * Measured by scripts/bench/query.ts (roll-up section): one day of heavy-tailed flow records in
 * 288 five-minute windows of k = 1024, rolled up at hourly K = k; geometric mean of the standard
 * error after / before over the benchmark's questions (five source blocks and the whole day).
 */
// `npm run bench`'s query section at the --quick size (1 000 000 records in the day); the six
// ratios were 6.49–6.52. At K = 4k the same run measured 2.55×.
export const MEASURED_WIDENING = { factor: 6.5, fineWindowsPerHour: 12, hourlyOverFineK: 1 } as const;

export interface RollUpDisclosure {
  /** √(n·(k−1)/(K−1)) for the hourly windows read (mean of the variance ratio over them), null when the fine k is unknown. */
  boundRatio: number | null;
  /** The benchmark's measured standard-error ratio, and the setting it was measured at. */
  measured: { factor: number; fineWindowsPerHour: number; hourlyOverFineK: number };
  /** In words, for people. */
  note: string;
}

/**
 * The disclosure for the hourly windows of an answer, or null when none was rolled up (the
 * tenant's own windows are an hour long, or none of the windows read is an hour long).
 *
 * @example rollUpDisclosure([{ k: 1024, windowSeconds: 3600 }, { k: 1024, windowSeconds: 300 }], { sampleSize: 1024, windowSeconds: 300 })
 *   // { boundRatio: 3.4641…  (√12), measured: { factor: 6.5, … }, note: "Every interval over hourly roll-ups is wider than over 5-minute windows: …" }
 */
export function rollUpDisclosure(
  windows: readonly { k: number; windowSeconds: number }[],
  tenant: { sampleSize?: number; windowSeconds?: number },
): RollUpDisclosure | null {
  const hourly = windows.filter((w) => w.windowSeconds === HOUR_SECONDS);
  if (hourly.length === 0 || (tenant.windowSeconds !== undefined && tenant.windowSeconds >= HOUR_SECONDS)) return null;
  let boundRatio: number | null = null;
  if (tenant.sampleSize !== undefined && tenant.windowSeconds !== undefined && tenant.sampleSize > 1) {
    const n = HOUR_SECONDS / tenant.windowSeconds;
    const k = tenant.sampleSize;
    const meanVarianceRatio = hourly.reduce((s, w) => s + (n * (k - 1)) / Math.max(1, w.k - 1), 0) / hourly.length;
    boundRatio = Math.sqrt(meanVarianceRatio);
  }
  const measured = { ...MEASURED_WIDENING };
  const fine = tenant.windowSeconds !== undefined ? `${tenant.windowSeconds / 60}-minute windows` : "fine windows";
  const note =
    `Every interval over hourly roll-ups is wider than over ${fine}, not only small subsets': ` +
    `measured ${measured.factor}× in the benchmark (hourly K = k; the figure depends on the traffic and on K)` +
    (boundRatio === null ? "" : `; the variance bound of these windows scales by up to ${boundRatio.toFixed(2)}×`) +
    ".";
  return { boundRatio, measured, note };
}

/** Adds the disclosure to the hourly entry of `resolution` (in place); other entries are left alone. */
export function discloseRollUps(
  resolution: ResolutionJson[],
  windows: readonly { k: number; windowSeconds: number }[],
  tenant: { sampleSize?: number; windowSeconds?: number },
): void {
  const disclosure = rollUpDisclosure(windows, tenant);
  if (disclosure === null) return;
  for (const entry of resolution) if (entry.windowSeconds === HOUR_SECONDS) entry.rollUp = disclosure;
}
