import type { Db } from "~/db/client.server";
import { readStoredWindows } from "~/samples/store.server";
import { maxHourlySampleSize } from "~/sampling/rollup";
import { adviseSampleSize, rollUpTradeOff, TRADE_OFF_SHARE, type AdvisorRow, type AdvisorWindow, type RollUpTradeOff } from "./advisor";

const DAY_MS = 24 * 3600_000;
// Keeps the page's read bounded (about 100 × k kept records); the most recent windows count.
const MAX_WINDOWS = 96;
// The share the roll-up trade-off is shown for lives in the pure module: the page's component reads it too.
export { TRADE_OFF_SHARE };

export interface SampleSizeAdvice {
  /** Fine windows the figures rest on, and the span they cover (epoch ms). */
  windows: number;
  from: number | null;
  to: number | null;
  rows: AdvisorRow[];
  /** One row per candidate hourly K (k, doublings, the maximum). */
  rollUp: RollUpTradeOff[];
}

/**
 * The advisor's figures from the tenant's fine windows of the 24 hours before `now`, stream
 * collectors only (a merged collector repeats its inputs' records, a copy maybe its origins').
 */
export async function sampleSizeAdvice(
  db: Db,
  tenant: { id: number; sampleSize: number; windowSeconds: number; weightAttribute: "bytes" | "packets" },
  now: number,
): Promise<SampleSizeAdvice> {
  const streams = await db.$client.execute({ sql: "SELECT id FROM collectors WHERE tenant_id = ? AND kind = 'stream' AND copy_of IS NULL", args: [tenant.id] });
  const stored = await readStoredWindows(db.$client, tenant.id, {
    // At most the last MAX_WINDOWS windows' worth of time, so a page load never decodes a whole day.
    from: now - Math.min(DAY_MS, MAX_WINDOWS * tenant.windowSeconds * 1000),
    to: now,
    shorterThan: 3600,
    collectorIds: streams.rows.map((r) => Number(r[0])),
  });
  const windows: AdvisorWindow[] = stored.slice(-MAX_WINDOWS).map((w) => ({
    windowStart: w.windowStart,
    windowSeconds: w.windowSeconds,
    collector: w.collectorId,
    k: w.k,
    tau: w.tau,
    totalWeight: Number(tenant.weightAttribute === "packets" ? w.packets : w.bytes),
    kept: w.kept.map((r) => ({ weight: r.weight, priority: r.priority })).sort((a, b) => b.priority - a.priority),
  }));
  const most = maxHourlySampleSize(tenant.sampleSize, tenant.windowSeconds);
  const candidates = new Set<number>([tenant.sampleSize, most]);
  for (let K = tenant.sampleSize * 2; K < most; K *= 2) candidates.add(K);
  return {
    windows: windows.length,
    from: windows.length > 0 ? windows[0].windowStart : null,
    to: windows.length > 0 ? windows[windows.length - 1].windowStart : null,
    rows: windows.length > 0 ? adviseSampleSize({ windows, sampleSize: tenant.sampleSize }) : [],
    rollUp: windows.length > 0 ? [...candidates].sort((a, b) => a - b).map((K) => rollUpTradeOff(windows, K, TRADE_OFF_SHARE)) : [],
  };
}
