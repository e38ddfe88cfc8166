import type { InStatement } from "@libsql/client";
import type { Db } from "~/db/client.server";
import type { WeightAttribute } from "~/db/schema.server";
import { KEPT_ROW_BYTES, ROW_BYTES_AT, ROW_PACKETS_AT } from "~/ingest/kept-codec";
import { unseenRatio } from "~/query/answer";
import { addRecord, EMPTY_SUM, type EstimateSum } from "~/sampling/estimate";
import { toInterval, type Interval } from "~/sampling/interval";

/**
 * The calibration checks: Weir counts every record of a window exactly (reservoirs.records,
 * bytes, packets), so every closed window tests its own 95% interval for the window's total.
 * For each window not yet checked, the estimate of its total is made from its kept records
 * exactly as a query over the whole window would make it (the per-record terms of
 * app/sampling/estimate.ts, summed over the window's node reservoirs, which sample disjoint
 * records), its interval comes from `toInterval`, and one `window_checks` row per metric
 * records whether the interval covered the exact total. Over many windows about 95% should.
 *
 * Every kind of collector is checked alike: merged collectors and copies hold priority samples
 * with exact counters too (a coordinated merge's counters are an upper bound, see
 * app/samples/store.server.ts mergeWindowStates; such a window can then read as a miss).
 */

export const CALIBRATION_METRICS = ["bytes", "packets", "flows"] as const;
export type CalibrationMetric = (typeof CALIBRATION_METRICS)[number];

/** Windows checked in one run at most: bounds a run's memory and time; a backlog goes over several runs. */
export const MAX_WINDOWS_PER_RUN = 500;

/** Expired checks deleted in one run at most, so a shortened retention does not hold the write lock long. */
const MAX_DELETED_PER_RUN = 10_000;

const DAY_MS = 86_400_000;

/** One window of one collector: its node reservoirs together. */
export interface WindowToCheck {
  tenantId: number;
  weightAttribute: WeightAttribute;
  collectorId: number;
  windowStart: number;
  windowSeconds: number;
  /** Per node reservoir: τ and the kept rows (kept-codec.ts layout), back to back. */
  reservoirs: { tau: number; rows: Uint8Array }[];
  records: bigint;
  bytes: bigint;
  packets: bigint;
}

export interface WindowCheckResult {
  metric: CalibrationMetric;
  interval: Interval;
  exact: bigint;
  covered: boolean;
}

/**
 * The estimate and interval of one window's total for each metric, against its exact total.
 *
 * The interval is asked with `unseenTerm` = the window's largest τ times the metric's ratio to
 * the weight, as the estimate answers use it (app/query/answer.ts unseenRatio), and deliberately *no* `cap`: the exact total is what is being tested, and an
 * interval capped at it would cover it whenever the estimate's lower end is below it, which
 * would make the check say little about the intervals queries get (they know no such cap for
 * a subset).
 *
 * @example
 * // A window of 40 records kept whole (k = 64, τ = 0): every estimate is exact.
 * checkWindow(window).map((c) => [c.metric, c.interval.ci95, c.exact, c.covered])
 * // [["bytes", [183244, 183244], 183244n, true], ["packets", [301, 301], 301n, true], ["flows", [40, 40], 40n, true]]
 */
export function checkWindow(window: WindowToCheck): WindowCheckResult[] {
  const sums: Record<CalibrationMetric, EstimateSum> = { bytes: { ...EMPTY_SUM }, packets: { ...EMPTY_SUM }, flows: { ...EMPTY_SUM } };
  // Per metric, the largest τ times that reservoir's unseen ratio (app/query/answer.ts unseenRatio), as queries do.
  const unseen: Record<CalibrationMetric, number> = { bytes: 0, packets: 0, flows: 0 };
  for (const { tau, rows } of window.reservoirs) {
    const view = new DataView(rows.buffer, rows.byteOffset, rows.byteLength);
    const largest: Record<CalibrationMetric, number | null> = { bytes: null, packets: null, flows: null };
    for (let o = 0; o + KEPT_ROW_BYTES <= rows.byteLength; o += KEPT_ROW_BYTES) {
      const weight = view.getFloat64(o + 8, true);
      const bytes = Number(view.getBigUint64(o + ROW_BYTES_AT, true));
      const packets = Number(view.getBigUint64(o + ROW_PACKETS_AT, true));
      addRecord(sums.bytes, tau, weight, bytes);
      addRecord(sums.packets, tau, weight, packets);
      addRecord(sums.flows, tau, weight, 1);
      largest.bytes = Math.max(largest.bytes ?? 0, bytes / weight);
      largest.packets = Math.max(largest.packets ?? 0, packets / weight);
      largest.flows = Math.max(largest.flows ?? 0, 1 / weight);
    }
    if (tau > 0) {
      for (const metric of CALIBRATION_METRICS) unseen[metric] = Math.max(unseen[metric], tau * unseenRatio(window.weightAttribute, metric, largest[metric]));
    }
  }
  const exact: Record<CalibrationMetric, bigint> = { bytes: window.bytes, packets: window.packets, flows: window.records };
  return CALIBRATION_METRICS.map((metric) => {
    const interval = toInterval(sums[metric], { unseenTerm: unseen[metric] });
    // Totals below 2^53 (9 PB in a window) compare exactly as doubles; larger ones lose only
    // rounding, far inside any interval with τ > 0.
    const truth = Number(exact[metric]);
    return { metric, interval, exact: exact[metric], covered: interval.ci95[0] <= truth && truth <= interval.ci95[1] };
  });
}

export interface CalibrationRunReport {
  /** Windows (collector, window start, window length) checked in this run. */
  windows: number;
  /** Rows written: one per window and metric. */
  rows: number;
  /** Checks deleted because their window passed the tenant's hourly retention. */
  deleted: number;
  /** True when the run stopped at its bound and closed windows are left for the next run. */
  more: boolean;
}

export interface CalibrationOptions {
  /** Windows checked at most in this run (default MAX_WINDOWS_PER_RUN). */
  maxWindows?: number;
}

/**
 * Checks closed windows not yet checked, oldest first, at most `maxWindows` of them, for
 * every tenant; then deletes checks of windows older than their tenant's hourly retention (M
 * days, or N when larger, as retention deletes windows), at most MAX_DELETED_PER_RUN of them.
 * A window counts as closed once its end plus a grace of one window length has passed `now`:
 * records may arrive a little late (collectors flush on their own timers), and a window still
 * changing would be tested against a total that was not yet final. Records that arrive later
 * still do not change a check already made.
 *
 * @example await runCalibrationChecks(db, Date.now()) // { windows: 500, rows: 1500, deleted: 0, more: true }
 */
export async function runCalibrationChecks(db: Db, now: number, options: CalibrationOptions = {}): Promise<CalibrationRunReport> {
  const maxWindows = options.maxWindows ?? MAX_WINDOWS_PER_RUN;
  const windows = await closedUncheckedWindows(db, now, maxWindows + 1);
  const more = windows.length > maxWindows;
  const todo = windows.slice(0, maxWindows);

  const statements: InStatement[] = [];
  for (const window of todo) {
    for (const check of checkWindow(window)) {
      statements.push({
        // OR IGNORE: another node's run may have checked the same window meanwhile.
        sql:
          "INSERT OR IGNORE INTO window_checks (tenant_id, collector_id, window_start, window_seconds, metric, estimate, low, high, exact, covered, method, checked_at) " +
          "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        args: [
          window.tenantId,
          window.collectorId,
          window.windowStart,
          window.windowSeconds,
          check.metric,
          check.interval.estimate,
          check.interval.ci95[0],
          check.interval.ci95[1],
          check.exact.toString(),
          check.covered ? 1 : 0,
          check.interval.method,
          now,
        ],
      });
    }
  }
  let rows = 0;
  if (statements.length > 0) {
    for (const result of await db.$client.batch(statements, "write")) rows += result.rowsAffected;
  }
  const deleted = await db.$client.execute({
    sql:
      "DELETE FROM window_checks WHERE id IN (SELECT w.id FROM window_checks w JOIN tenants t ON t.id = w.tenant_id " +
      `WHERE w.window_start + w.window_seconds * 1000 <= ? - max(t.hourly_retention_days, t.retention_days) * ${DAY_MS} LIMIT ${MAX_DELETED_PER_RUN})`,
    args: [now],
  });
  return { windows: todo.length, rows, deleted: deleted.rowsAffected, more };
}

/**
 * Up to `limit` closed windows without a check, oldest first, with their node reservoirs' τ,
 * kept rows and exact counters. One statement, so each reservoir's τ, counters and kept rows
 * come from one snapshot even while ingest or a roll-up commits.
 */
async function closedUncheckedWindows(db: Db, now: number, limit: number): Promise<WindowToCheck[]> {
  const found = await db.$client.execute({
    sql:
      "WITH todo AS (" +
      "SELECT r.tenant_id, r.collector_id, r.window_start, r.window_seconds FROM reservoirs r JOIN tenants t ON t.id = r.tenant_id " +
      "WHERE r.records > 0 AND r.window_start + 2 * r.window_seconds * 1000 <= ?1 " +
      // Windows past retention are not checked: their checks would be deleted at once (and,
      // with the retention timer off, checked again on every run).
      `AND r.window_start + r.window_seconds * 1000 > ?1 - max(t.hourly_retention_days, t.retention_days) * ${DAY_MS} ` +
      "AND NOT EXISTS (SELECT 1 FROM window_checks c WHERE c.tenant_id = r.tenant_id AND c.collector_id = r.collector_id " +
      "AND c.window_start = r.window_start AND c.window_seconds = r.window_seconds) " +
      "GROUP BY r.tenant_id, r.collector_id, r.window_start, r.window_seconds " +
      "ORDER BY r.window_start, r.window_seconds, r.tenant_id, r.collector_id LIMIT ?2) " +
      "SELECT r.tenant_id, t.weight_attribute, r.collector_id, r.window_start, r.window_seconds, r.id, r.tau, r.records, r.bytes, r.packets, " +
      "CAST(group_concat(k.data, '') AS BLOB) " +
      "FROM todo JOIN reservoirs r ON r.tenant_id = todo.tenant_id AND r.collector_id = todo.collector_id " +
      "AND r.window_start = todo.window_start AND r.window_seconds = todo.window_seconds AND r.records > 0 " +
      "JOIN tenants t ON t.id = r.tenant_id LEFT JOIN kept_records k ON k.reservoir_id = r.id " +
      "GROUP BY r.id ORDER BY r.window_start, r.window_seconds, r.tenant_id, r.collector_id, r.id",
    args: [now, limit],
  });
  const out: WindowToCheck[] = [];
  let last: WindowToCheck | undefined;
  for (const row of found.rows) {
    const tenantId = Number(row[0]);
    const collectorId = Number(row[2]);
    const windowStart = Number(row[3]);
    const windowSeconds = Number(row[4]);
    if (!last || last.tenantId !== tenantId || last.collectorId !== collectorId || last.windowStart !== windowStart || last.windowSeconds !== windowSeconds) {
      last = { tenantId, weightAttribute: String(row[1]) as WeightAttribute, collectorId, windowStart, windowSeconds, reservoirs: [], records: 0n, bytes: 0n, packets: 0n };
      out.push(last);
    }
    last.reservoirs.push({ tau: Number(row[6]), rows: row[10] === null ? new Uint8Array(0) : new Uint8Array(row[10] as ArrayBuffer) });
    last.records += BigInt(Number(row[7]));
    // Decimal text: sums of unsigned 64-bit counters can pass SQLite's signed INTEGER.
    last.bytes += BigInt(String(row[8]));
    last.packets += BigInt(String(row[9]));
  }
  return out;
}
