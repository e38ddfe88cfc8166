/**
 * Numbers as the console shows them: short, with units, and exact in a tooltip.
 * Byte units are decimal (1 KB = 1000 B), as link speeds and transfer volumes are
 * counted in networking (common practice; IEC binary units would read KiB, MiB).
 *
 * Pure module: no I/O, usable in the browser and on the server. Formatting uses the fixed
 * locale en-US, so the server and the browser write the same text.
 */
import type { Counter } from "../query/answer.ts";
import type { IntervalMethod } from "../sampling/interval.ts";
import type { Metric } from "../query/request.ts";

const BYTE_UNITS = ["B", "KB", "MB", "GB", "TB", "PB", "EB", "ZB"];
const COUNT_UNITS = ["", "k", "M", "G", "T", "P", "E"];

function scaled(value: number, units: string[]): { text: string; unit: string } {
  const sign = value < 0 ? "-" : "";
  let v = Math.abs(value);
  let i = 0;
  while (v >= 999.5 && i < units.length - 1) {
    v /= 1000;
    i++;
  }
  // Three significant figures; whole numbers below 1000 of the base unit stay whole.
  const text = i === 0 && Number.isInteger(v) ? String(v) : v >= 100 ? v.toFixed(0) : v >= 10 ? v.toFixed(1) : v.toFixed(2);
  return { text: sign + text, unit: units[i] };
}

/**
 * @example formatBytes(512)        // "512 B"
 * @example formatBytes(1_234_567)  // "1.23 MB"
 */
export function formatBytes(bytes: number): string {
  const { text, unit } = scaled(bytes, BYTE_UNITS);
  return `${text} ${unit}`;
}

/**
 * A count with an SI prefix and its noun.
 *
 * @example formatCount(845, "flows")          // "845 flows"
 * @example formatCount(1_234_567, "packets")  // "1.23 M packets"
 * @example formatCount(12.4, "flows")         // "12.4 flows"
 */
export function formatCount(value: number, noun: string): string {
  const { text, unit } = scaled(value, COUNT_UNITS);
  return `${text} ${unit}${unit === "" ? "" : " "}${noun}`;
}

/** @example formatMetric(1_500_000, "bytes") // "1.50 MB" */
export function formatMetric(value: number, metric: Metric): string {
  return metric === "bytes" ? formatBytes(value) : formatCount(value, metric);
}

const BIT_RATE_UNITS = ["bit/s", "kbit/s", "Mbit/s", "Gbit/s", "Tbit/s", "Pbit/s", "Ebit/s"];
const RATE_NOUNS: Record<Metric, string> = { bytes: "bit/s", packets: "pkt/s", flows: "flows/s" };

/**
 * A rate with a decimal SI prefix: bit/s for a bytes metric (the rate already counts bits;
 * kbit/s, Mbit/s, Gbit/s with prefixes of 1000 as SI and IEC 80000-13 write them for bits per
 * second, common practice for link speeds), pkt/s or flows/s otherwise.
 *
 * @example formatRate(12_345_678, "bytes")  // "12.3 Mbit/s"
 * @example formatRate(950, "bytes")         // "950 bit/s"
 * @example formatRate(2_500, "packets")     // "2.50 k pkt/s"
 */
export function formatRate(value: number, metric: Metric): string {
  if (metric === "bytes") {
    const { text, unit } = scaled(value, BIT_RATE_UNITS);
    return `${text} ${unit}`;
  }
  return formatCount(value, RATE_NOUNS[metric]);
}

/**
 * A rate interval with its unit written once when both ends share it.
 *
 * @example formatRateRange(9_800_000, 10_200_000, "bytes") // "9.80 – 10.2 Mbit/s"
 */
export function formatRateRange(low: number, high: number, metric: Metric): string {
  return sharedUnitRange(formatRate(low, metric), formatRate(high, metric));
}

/** The exact rate for a tooltip: grouped digits, at most one decimal, and the unit. */
export function exactRate(value: number, metric: Metric): string {
  return exactMetric(value, RATE_NOUNS[metric]);
}

/**
 * A rate for a chart axis: bit/s with its prefix, counts with the prefix only (the axis names the unit).
 *
 * @example axisRate(125_000_000, "bytes") // "125 Mbit/s"
 */
export function axisRate(value: number, metric: Metric): string {
  if (metric === "bytes") return formatRate(value, metric);
  return axisValue(value, metric);
}

/** "1.77 GB" and "1.78 GB" → "1.77 – 1.78 GB"; different units stay whole (the unit is what follows the number). */
function sharedUnitRange(a: string, b: string): string {
  const unitA = a.slice(a.indexOf(" "));
  return unitA === b.slice(b.indexOf(" ")) ? `${a.slice(0, a.indexOf(" "))} – ${b}` : `${a} – ${b}`;
}

/**
 * An interval with its unit written once when both ends share it.
 *
 * @example formatMetricRange(1_770_000_000, 1_780_000_000, "bytes") // "1.77 – 1.78 GB"
 * @example formatMetricRange(980, 1_200, "bytes")                   // "980 B – 1.20 KB"
 */
export function formatMetricRange(low: number, high: number, metric: Metric): string {
  const a = formatMetric(low, metric);
  const b = formatMetric(high, metric);
  const unitA = a.slice(a.indexOf(" "));
  return unitA === b.slice(b.indexOf(" ")) ? `${a.slice(0, a.indexOf(" "))} – ${b}` : `${a} – ${b}`;
}

/**
 * A figure for a chart axis: bytes with their unit, counts with an SI prefix only (the
 * axis names the noun once).
 *
 * @example axisValue(125_000_000, "bytes") // "125 MB"
 * @example axisValue(2500, "packets")      // "2.50 k"
 */
export function axisValue(value: number, metric: Metric): string {
  if (metric === "bytes") return formatBytes(value);
  const { text, unit } = scaled(value, COUNT_UNITS);
  return unit === "" ? text : `${text} ${unit}`;
}

/**
 * The exact figure for a tooltip: grouped digits, at most one decimal, and the unit.
 *
 * @example exactMetric(1234567.89, "bytes") // "1,234,567.9 bytes"
 */
export function exactMetric(value: number | Counter, unit: string): string {
  if (typeof value === "string") return `${value.replace(/\B(?=(\d{3})+(?!\d))/g, ",")} ${unit}`;
  return `${value.toLocaleString("en-US", { maximumFractionDigits: 1 })} ${unit}`;
}

/**
 * A share or relative error as a percentage with about three significant figures.
 *
 * @example formatPercent(0.1234)  // "12.3%"
 * @example formatPercent(0.00004) // "<0.01%"
 */
export function formatPercent(ratio: number): string {
  if (!Number.isFinite(ratio)) return "—";
  const pct = ratio * 100;
  if (pct === 0) return "0%";
  if (Math.abs(pct) < 0.01) return "<0.01%";
  return `${pct >= 100 ? pct.toFixed(0) : pct >= 10 ? pct.toFixed(1) : pct.toFixed(2)}%`;
}

/**
 * An instant in UTC to the minute (or the second, where order within a minute matters, as
 * in the Ledger), 24-hour, as the console writes times everywhere.
 *
 * @example formatUtc(Date.UTC(2024, 4, 1, 2, 5)) // "2024-05-01 02:05 UTC"
 * @example formatUtc(Date.UTC(2024, 4, 1, 14, 5, 9), { seconds: true }) // "2024-05-01 14:05:09 UTC"
 */
export function formatUtc(ms: number | string, options: { seconds?: boolean } = {}): string {
  const d = new Date(ms);
  if (Number.isNaN(d.getTime())) return String(ms);
  return `${d.toISOString().slice(0, options.seconds ? 19 : 16).replace("T", " ")} UTC`;
}

/**
 * An instant as the console's time inputs hold it: UTC, 24-hour, to the minute, no zone
 * suffix (the label says UTC). The browser's own date-time inputs follow its locale, which
 * may show a 12-hour clock, so the console uses text inputs in this form.
 *
 * @example formatUtcMinute(Date.UTC(2024, 4, 1, 14, 5)) // "2024-05-01 14:05"
 */
export function formatUtcMinute(ms: number): string {
  return new Date(ms).toISOString().slice(0, 16).replace("T", " ");
}

/** The pattern attribute of a UTC time input (HTML's pattern: the whole value must match). */
export const UTC_MINUTE_PATTERN = "\\d{4}-\\d{2}-\\d{2}[ T]\\d{2}:\\d{2}";

/**
 * "YYYY-MM-DD HH:MM" (or with a "T", as ISO 8601 writes it) in UTC as epoch ms; null for any
 * other text, and for times that do not exist (2024-02-30, 24:00).
 *
 * @example parseUtcMinute("2024-05-01 14:05") // Date.UTC(2024, 4, 1, 14, 5)
 * @example parseUtcMinute("2024-02-30 10:00") // null
 */
export function parseUtcMinute(text: string): number | null {
  const m = /^(\d{4}-\d{2}-\d{2})[ T](\d{2}:\d{2})$/.exec(text.trim());
  if (!m) return null;
  const ms = Date.parse(`${m[1]}T${m[2]}:00Z`);
  // Date.parse rolls 2024-02-31 over into March; only a time that reads back unchanged exists.
  return Number.isFinite(ms) && formatUtcMinute(ms) === `${m[1]} ${m[2]}` ? ms : null;
}

/** A counter of the API (number, or decimal text above 2^53) as a float for ratios. */
export function counterValue(counter: Counter): number {
  return typeof counter === "number" ? counter : Number(counter);
}

/**
 * How an interval was found, in the console's words; null for the normal interval, the usual
 * case, which needs no note (methods: app/sampling/interval.ts).
 *
 * @example methodNote("gamma") // "gamma interval"
 */
export function methodNote(method: IntervalMethod): string | null {
  return method === "normal" ? null : METHOD_NOTES[method];
}

const METHOD_NOTES: Record<IntervalMethod, string> = {
  exact: "exact",
  normal: "normal interval",
  gamma: "gamma interval",
  "no-match": "no sampled record matched",
};

/**
 * An interval as a reader should see it: "estimate ± half-width" for a symmetric normal interval
 * nobody lifted, "low – high" otherwise, and "0 – X" when nothing matched — never "0 ± 0" while
 * records may have been left out.
 *
 * @example intervalText({ estimate: 0, ci95: [0, 3689], method: "no-match" }, "bytes") // "0 – 3.69 KB"
 * @example intervalText({ estimate: 1000, ci95: [902, 1098], method: "normal" }, "bytes") // "1.00 KB ± 98 B"
 */
export function intervalText(e: { estimate: number; ci95: [number, number]; method: IntervalMethod }, metric: Metric): string {
  const [low, high] = e.ci95;
  if (e.method === "exact") return formatMetric(e.estimate, metric);
  if (e.method === "no-match") return `0 – ${formatMetric(high, metric)}`;
  const half = high - e.estimate;
  if (e.method === "normal" && Math.abs(e.estimate - low - half) <= 1e-9 * Math.max(1, Math.abs(high))) {
    return `${formatMetric(e.estimate, metric)} ± ${formatMetric(half, metric)}`;
  }
  return formatMetricRange(low, high, metric);
}

/** What each group-by kind is called in the form and in result headings (fields.ts). */
export { GROUP_LABELS } from "../query/fields.ts";
