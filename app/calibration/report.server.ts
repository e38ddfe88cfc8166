import type { Db } from "~/db/client.server";
import { CALIBRATION_METRICS, type CalibrationMetric } from "./check.server";
import { wilsonInterval } from "./wilson";

/**
 * The calibration report: over the last day, week and month, how often the 95% interval of a
 * window's total covered its exact total (rows of `window_checks`, see check.server.ts), with
 * a 95% interval for that coverage. Honest intervals cover about 95% of the time, so the
 * question a row answers is whether 0.95 is a plausible coverage given the windows checked.
 */

const DAY_MS = 86_400_000;

/** The periods reported, ending now; a window counts in a period when it ended inside it. */
export const CALIBRATION_PERIODS = [
  { name: "day", ms: DAY_MS },
  { name: "week", ms: 7 * DAY_MS },
  { name: "month", ms: 30 * DAY_MS },
] as const;
export type CalibrationPeriodName = (typeof CALIBRATION_PERIODS)[number]["name"];

/** The nominal level of the intervals checked. */
export const NOMINAL_COVERAGE = 0.95;

export const COVERAGE_INTERVAL_METHOD = {
  name: "wilson",
  level: 0.95,
  source: "E. B. Wilson, Probable inference, the law of succession, and statistical inference, JASA 22 (1927)",
} as const;

export interface CoverageRow {
  metric: CalibrationMetric;
  /** Windows checked. */
  checked: number;
  /** Of those, windows whose 95% interval held the exact total. */
  covered: number;
  /** covered / checked. */
  coverage: number;
  /** Wilson's 95% score interval for the coverage. */
  coverage95: [low: number, high: number];
  /** 0.95 lies inside coverage95: the data do not contradict honest 95% intervals. */
  consistent: boolean;
  /** How many checks each interval method answered (app/sampling/interval.ts), e.g. { normal: 280, exact: 8 }. */
  methods: Record<string, number>;
}

export interface CollectorCoverageRow extends CoverageRow {
  collector: string;
  windowSeconds: number;
}

export interface CalibrationPeriod {
  period: CalibrationPeriodName;
  /** Windows that ended in [from, to) count. ISO 8601. */
  from: string;
  to: string;
  /** Per metric over every collector and window length of the tenant. */
  overall: CoverageRow[];
  /** Per collector, window length and metric. */
  rows: CollectorCoverageRow[];
}

export interface CalibrationReport {
  tenant: string;
  asOf: string;
  nominal: number;
  coverageInterval: typeof COVERAGE_INTERVAL_METHOD;
  periods: CalibrationPeriod[];
}

interface Tally {
  checked: number;
  covered: number;
  methods: Record<string, number>;
}

function row(metric: CalibrationMetric, tally: Tally): CoverageRow {
  // checked ≥ 1 here: a tally exists only for rows found.
  const coverage95 = wilsonInterval(tally.covered, tally.checked)!;
  return {
    metric,
    checked: tally.checked,
    covered: tally.covered,
    coverage: tally.covered / tally.checked,
    coverage95,
    consistent: coverage95[0] <= NOMINAL_COVERAGE && NOMINAL_COVERAGE <= coverage95[1],
    methods: tally.methods,
  };
}

function addTo(tallies: Map<string, Tally>, key: string, checked: number, covered: number, method: string): void {
  let t = tallies.get(key);
  if (!t) tallies.set(key, (t = { checked: 0, covered: 0, methods: {} }));
  t.checked += checked;
  t.covered += covered;
  t.methods[method] = (t.methods[method] ?? 0) + checked;
}

const metricOrder = (m: string) => CALIBRATION_METRICS.indexOf(m as CalibrationMetric);

/**
 * The report of one tenant as of `now` (epoch ms). Counted in SQL per collector, window length,
 * metric and method; periods that saw no check have empty `overall` and `rows`.
 *
 * @example await calibrationReport(db, { id: 1, slug: "riverline" }, Date.now())
 *   // { tenant: "riverline", periods: [{ period: "day", overall: [{ metric: "bytes", checked: 288, covered: 275, coverage: 0.9549, coverage95: [0.9244, 0.9734], consistent: true, methods: { normal: 288 } }, …], rows: […] }, …] }
 */
export async function calibrationReport(db: Db, tenant: { id: number; slug: string }, now: number): Promise<CalibrationReport> {
  const periods: CalibrationPeriod[] = [];
  for (const { name, ms } of CALIBRATION_PERIODS) {
    const from = now - ms;
    const found = await db.$client.execute({
      sql:
        "SELECT c.name, w.window_seconds, w.metric, w.method, count(*), sum(w.covered) FROM window_checks w " +
        "JOIN collectors c ON c.id = w.collector_id AND c.tenant_id = w.tenant_id " +
        "WHERE w.tenant_id = ? AND w.window_start + w.window_seconds * 1000 > ? AND w.window_start + w.window_seconds * 1000 <= ? " +
        "GROUP BY c.name, w.window_seconds, w.metric, w.method",
      args: [tenant.id, from, now],
    });
    const overall = new Map<string, Tally>();
    const byCollector = new Map<string, Tally>();
    for (const r of found.rows) {
      const [collector, windowSeconds, metric, method] = [String(r[0]), Number(r[1]), String(r[2]), String(r[3])];
      const checked = Number(r[4]);
      const covered = Number(r[5]);
      addTo(overall, metric, checked, covered, method);
      addTo(byCollector, JSON.stringify([collector, windowSeconds, metric]), checked, covered, method);
    }
    periods.push({
      period: name,
      from: new Date(from).toISOString(),
      to: new Date(now).toISOString(),
      overall: [...overall]
        .map(([metric, t]) => row(metric as CalibrationMetric, t))
        .sort((a, b) => metricOrder(a.metric) - metricOrder(b.metric)),
      rows: [...byCollector]
        .map(([key, t]) => {
          const [collector, windowSeconds, metric] = JSON.parse(key) as [string, number, CalibrationMetric];
          return { collector, windowSeconds, ...row(metric, t) };
        })
        .sort((a, b) => a.collector.localeCompare(b.collector) || a.windowSeconds - b.windowSeconds || metricOrder(a.metric) - metricOrder(b.metric)),
    });
  }
  return { tenant: tenant.slug, asOf: new Date(now).toISOString(), nominal: NOMINAL_COVERAGE, coverageInterval: COVERAGE_INTERVAL_METHOD, periods };
}
