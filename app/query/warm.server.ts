import type { Db } from "~/db/client.server";
import type { ReservoirManager } from "~/ingest/manager.server";
import { keptColumns, RESERVOIR_ROW_COLUMNS, reservoirRowOf, type ReservoirRow } from "./estimate.server";
import type { SnapshotCache } from "./snapshot-cache";

/** How far back the warm-up reads: the range the console and the demo ask about first. */
export const WARM_WINDOW_MS = 24 * 3600_000;

/**
 * Reservoirs read per step. The embedded SQLite driver reads on the main thread, so each
 * step holds the event loop for its read and decode (about 20 ms for 16 reservoirs of
 * k = 1024 on the benchmark machine); requests are served between steps.
 */
const RESERVOIRS_PER_STEP = 16;

export interface WarmOptions {
  /** Now, epoch ms: windows starting after `now − sinceMs` are read. */
  now: number;
  sinceMs?: number;
  /** Kept records read at most, all tenants together; defaults to half the cache's bound, so queries keep room. */
  maxRecords?: number;
  /** Returns true once the server is closing: the warm-up stops before its next step. */
  stopped?: () => boolean;
}

export interface WarmReport {
  reservoirs: number;
  records: number;
  /** True when it stopped at `maxRecords` (or on `stopped`) before reading every recent window. */
  partial: boolean;
}

/**
 * Reads the recent windows' kept records of every tenant into the snapshot cache, newest
 * windows first, so the first question after a start (the last day, in Slice or the API)
 * does not wait for SQLite. Bounded by `maxRecords`; in small steps that yield to the event
 * loop, so requests are never held up behind it. Reads through the same function as a query
 * (`keptColumns`), hence the same cache entries and the same validity rule.
 */
export async function warmRecentWindows(
  ctx: { db: Db; manager: Pick<ReservoirManager, "liveColumns">; snapshots: SnapshotCache },
  options: WarmOptions,
): Promise<WarmReport> {
  const maxRecords = options.maxRecords ?? Math.floor(ctx.snapshots.maxRecords / 2);
  const found = await ctx.db.$client.execute({
    sql:
      `SELECT ${RESERVOIR_ROW_COLUMNS}, r.tenant_id ` +
      "FROM reservoirs r JOIN collectors c ON c.id = r.collector_id AND c.tenant_id = r.tenant_id " +
      "WHERE r.window_start >= ? AND r.records > 0 ORDER BY r.window_start DESC, r.id",
    args: [options.now - (options.sinceMs ?? WARM_WINDOW_MS)],
  });
  const report: WarmReport = { reservoirs: 0, records: 0, partial: false };
  const byTenant = new Map<number, ReservoirRow[]>();
  for (const row of found.rows) {
    const reservoir = reservoirRowOf(row);
    const kept = Math.min(reservoir.k, reservoir.records);
    if (report.records + kept > maxRecords) {
      report.partial = true;
      break;
    }
    report.records += kept;
    report.reservoirs++;
    const tenantId = Number(row[10]);
    let rows = byTenant.get(tenantId);
    if (!rows) byTenant.set(tenantId, (rows = []));
    rows.push(reservoir);
  }
  for (const [tenantId, rows] of byTenant) {
    for (let i = 0; i < rows.length; i += RESERVOIRS_PER_STEP) {
      await new Promise((resolve) => setImmediate(resolve));
      if (options.stopped?.()) return { ...report, partial: true };
      // Each statement names the tenant (keptColumns' read does); a reservoir gone since the
      // list was read (retention) is simply not cached.
      await keptColumns(ctx, tenantId, rows.slice(i, i + RESERVOIRS_PER_STEP));
    }
  }
  return report;
}
