import type { InStatement, InValue, Row } from "@libsql/client";
import { ApiError } from "~/auth/api-keys.server";
import type { Db } from "~/db/client.server";
import { decodeKeptRow, KEPT_ROW_BYTES, type KeptRowValue } from "~/ingest/kept-codec";
import type { SampleSet, SampleWindow, WeightAttribute } from "./document";

/**
 * Kept records one export may hold. A kept record takes some 200 bytes of JSON, so this
 * bounds one answer to about 40 MB, built in memory; a longer range is several exports.
 */
export const MAX_KEPT_PER_EXPORT = 200_000;

// SQLite allows 32 766 bound parameters per statement; stay well below.
const IDS_PER_SELECT = 500;

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
 * records decoded from `kept_records.data`, as a sample set for `toSampleFile`. Every
 * statement names the tenant in its WHERE clause. Throws ApiError 413 when the range holds
 * more than MAX_KEPT_PER_EXPORT kept records.
 */
export async function exportSamples(db: Db, tenant: ExportTenant, range: ExportRange, now = Date.now()): Promise<SampleSet> {
  const ids = await reservoirIds(db, tenant.id, range);
  // A stored reservoir keeps min(k, records seen) records, so this is the exact count.
  const kept = ids.reduce((sum, r) => sum + r.kept, 0);
  if (kept > MAX_KEPT_PER_EXPORT) {
    throw new ApiError(
      413,
      "export_too_large",
      `The range holds ${kept} kept records in ${ids.length} windows; one export carries at most ${MAX_KEPT_PER_EXPORT}. Narrow from/to or name fewer collectors, and export the rest separately.`,
      { limit: MAX_KEPT_PER_EXPORT, kept, details: [{ path: "to", message: `covers more than ${MAX_KEPT_PER_EXPORT} kept records` }] },
    );
  }

  // One read transaction for all chunks; each row also carries its reservoir's τ and counters,
  // read in the same statement as its kept records, so they always belong together.
  const statements: InStatement[] = [];
  for (let i = 0; i < ids.length; i += IDS_PER_SELECT) {
    const chunk = ids.slice(i, i + IDS_PER_SELECT).map((r) => r.id);
    statements.push({ sql: keptSelect(chunk.length), args: [tenant.id, ...chunk] });
  }
  const results = statements.length === 0 ? [] : await db.$client.batch(statements, "read");
  const windows = results.flatMap((result) => result.rows.map((row) => windowOfRow(row, tenant.weightAttribute)));
  windows.sort((a, b) => a.windowStart - b.windowStart || compare(a.collector, b.collector) || compare(a.provenance.node, b.provenance.node));
  return { exportedAt: now, from: range.from, to: range.to, windows };
}

const compare = (a: string, b: string) => (a < b ? -1 : a > b ? 1 : 0);

/** Ids of the reservoirs in range and how many records each keeps: one statement on the (tenant_id, window_start) index. */
async function reservoirIds(db: Db, tenantId: number, range: ExportRange): Promise<{ id: number; kept: number }[]> {
  const args: InValue[] = [tenantId, range.from, range.to];
  let byName = "";
  if (range.collectors.length > 0) {
    byName = ` AND c.name IN (${range.collectors.map(() => "?").join(", ")})`;
    args.push(...range.collectors);
  } else {
    // Merged collectors hold samples of the others' records: exported only when named.
    byName = " AND c.kind = 'stream'";
  }
  const found = await db.$client.execute({
    sql:
      "SELECT r.id, min(r.k, r.records) FROM reservoirs r JOIN collectors c ON c.id = r.collector_id AND c.tenant_id = r.tenant_id " +
      // An empty row is left behind when a batch fails after creating its reservoir.
      `WHERE r.tenant_id = ? AND r.window_start >= ? AND r.window_start < ? AND r.records > 0${byName} ORDER BY r.id`,
    args,
  });
  return found.rows.map((row) => ({ id: Number(row[0]), kept: Number(row[1]) }));
}

/**
 * One row per reservoir: its fields and all its kept rows (kept-codec.ts layout) in one blob.
 * group_concat copies blob bytes as they are, and one result row per reservoir spares the
 * driver an object per kept record.
 */
function keptSelect(ids: number): string {
  return (
    "SELECT c.name, r.window_start, r.window_seconds, r.node, r.k, r.tau, r.records, r.bytes, r.packets, r.updated_at, " +
    "CAST(group_concat(k.data, '') AS BLOB) " +
    "FROM reservoirs r JOIN collectors c ON c.id = r.collector_id AND c.tenant_id = r.tenant_id " +
    "JOIN kept_records k ON k.reservoir_id = r.id " +
    `WHERE r.tenant_id = ? AND r.id IN (${new Array(ids).fill("?").join(", ")}) ` +
    "GROUP BY r.id"
  );
}

function windowOfRow(row: Row, tenantWeight: WeightAttribute): SampleWindow {
  const data = new Uint8Array(row[10] as ArrayBuffer);
  const kept: KeptRowValue[] = [];
  for (let offset = 0; offset < data.byteLength; offset += KEPT_ROW_BYTES) kept.push(decodeKeptRow(data, offset));
  kept.sort((a, b) => b.priority - a.priority);
  return {
    collector: String(row[0]),
    windowStart: Number(row[1]),
    windowSeconds: Number(row[2]),
    k: Number(row[4]),
    tau: Number(row[5]),
    seen: Number(row[6]),
    // Decimal text: the sums of unsigned 64-bit counters can pass SQLite's signed INTEGER.
    exact: { records: BigInt(Number(row[6])), bytes: BigInt(String(row[7])), packets: BigInt(String(row[8])) },
    kept,
    provenance: { node: String(row[3]), weightAttribute: weightAttributeOf(kept, tenantWeight), updatedAt: Number(row[9]) },
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
