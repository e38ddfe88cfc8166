import { ApiError } from "~/auth/api-keys.server";
import type { Db } from "~/db/client.server";
import type { KeptRowValue } from "~/ingest/kept-codec";
import type { SampleSet, SampleWindow, WeightAttribute } from "./document";
import { readStoredWindows, type StoredWindow } from "./store.server";

/**
 * Kept records one export may hold. A kept record takes some 200 bytes of JSON, so this
 * bounds one answer to about 40 MB, built in memory; a longer range is several exports.
 */
export const MAX_KEPT_PER_EXPORT = 200_000;

export interface ExportRange {
  /** Epoch ms; windows whose start lies in [from, to) are exported. */
  from: number;
  to: number;
  /** Collector names; all of the tenant's when empty. */
  collectors: string[];
}

export interface ExportTenant {
  id: number;
  weightAttribute: WeightAttribute;
}

/**
 * The tenant's reservoirs (every node's) whose window starts in [from, to), with their kept
 * records, as a sample set for `toSampleFile`. Every statement names the tenant. Throws
 * ApiError 413 when the range holds more than MAX_KEPT_PER_EXPORT kept records.
 */
export async function exportSamples(db: Db, tenant: ExportTenant, range: ExportRange, now = Date.now()): Promise<SampleSet> {
  const collectorIds = await collectorIdsOf(db, tenant.id, range.collectors);
  const filter = { from: range.from, to: range.to, collectorIds };
  // A stored reservoir keeps min(k, records seen) records, so this is the exact count, known before reading them.
  const counted = await db.$client.execute({
    sql:
      "SELECT count(*), coalesce(sum(min(k, records)), 0) FROM reservoirs WHERE tenant_id = ? AND window_start >= ? AND window_start < ? AND records > 0 " +
      `AND collector_id IN (SELECT value FROM json_each(?))`,
    args: [tenant.id, range.from, range.to, JSON.stringify(collectorIds)],
  });
  const windowsInRange = Number(counted.rows[0][0]);
  const kept = Number(counted.rows[0][1]);
  if (kept > MAX_KEPT_PER_EXPORT) {
    throw new ApiError(
      413,
      "export_too_large",
      `The range holds ${kept} kept records in ${windowsInRange} windows; one export carries at most ${MAX_KEPT_PER_EXPORT}. Narrow from/to or name fewer collectors, and export the rest separately.`,
      { limit: MAX_KEPT_PER_EXPORT, kept, details: [{ path: "to", message: `covers more than ${MAX_KEPT_PER_EXPORT} kept records` }] },
    );
  }
  const windows = (await readStoredWindows(db.$client, tenant.id, filter)).map((w) => sampleWindowOf(w, tenant.weightAttribute));
  windows.sort((a, b) => a.windowStart - b.windowStart || compare(a.collector, b.collector) || compare(a.provenance.node, b.provenance.node));
  return { exportedAt: now, from: range.from, to: range.to, windows };
}

const compare = (a: string, b: string) => (a < b ? -1 : a > b ? 1 : 0);

/** The named collectors' ids (unknown names match nothing), or every stream collector's: merged collectors and copies (imported sample files) hold samples of the others' records, so they are exported only when named. */
async function collectorIdsOf(db: Db, tenantId: number, names: readonly string[]): Promise<number[]> {
  const found =
    names.length > 0
      ? await db.$client.execute({ sql: `SELECT id FROM collectors WHERE tenant_id = ? AND name IN (${names.map(() => "?").join(", ")})`, args: [tenantId, ...names] })
      : await db.$client.execute({ sql: "SELECT id FROM collectors WHERE tenant_id = ? AND kind = 'stream' AND copy_of IS NULL", args: [tenantId] });
  return found.rows.map((row) => Number(row[0]));
}

function sampleWindowOf(w: StoredWindow, tenantWeight: WeightAttribute): SampleWindow {
  const kept = w.kept.map((e) => ({ priority: e.priority, weight: e.weight, record: e.item }));
  return {
    collector: w.collector,
    windowStart: w.windowStart,
    windowSeconds: w.windowSeconds,
    k: w.k,
    tau: w.tau,
    seen: w.records,
    exact: { records: BigInt(w.records), bytes: w.bytes, packets: w.packets },
    kept,
    provenance: { node: w.node, weightAttribute: weightAttributeOf(kept, tenantWeight), updatedAt: w.updatedAt },
  };
}

/**
 * The counter a window was sampled by. The tenant's setting applies only to windows created
 * after it changed, so the kept weights decide: ingest sets each weight to Number(counter).
 * Only when both counters fit every record (say, one-packet flows of one byte each) does the
 * setting break the tie, and then either answer describes the sample truly.
 */
function weightAttributeOf(kept: readonly KeptRowValue[], tenantWeight: WeightAttribute): WeightAttribute {
  const fits = (attribute: WeightAttribute) => kept.every((e) => e.weight === Number(attribute === "bytes" ? e.record.bytes : e.record.packets));
  const bytes = fits("bytes");
  const packets = fits("packets");
  if (bytes && packets) return tenantWeight;
  return bytes ? "bytes" : packets ? "packets" : tenantWeight;
}
