import type { InStatement, InValue, Transaction } from "@libsql/client";
import type { Db } from "~/db/client.server";
import type { FlowRecord } from "~/flow/record";
import { decodeKeptRow, encodeKeptRows, KEPT_ROW_BYTES } from "~/ingest/kept-codec";
import { flowKeyBytes, mergeCoordinated } from "~/sampling/coordinated";
import { mergeStates } from "~/sampling/merge";
import type { Kept } from "~/sampling/reservoir";

/**
 * Stored reservoirs as whole values: read them with their kept records, merge them, write
 * them back. Import, merge and roll-up are built from these three steps; each caller puts
 * its writes in one transaction (`client.batch(…, "write")`), so a change is applied whole
 * or not at all, and runs it through `ReservoirManager.exclusive` so no ingest batch of this
 * node interleaves. Every statement names the tenant.
 */

/** What can run statements: the client, or an open transaction. */
export type Executor = Pick<Db["$client"], "execute" | "batch"> | Pick<Transaction, "execute" | "batch">;

/** A reservoir's identity: (collector, window, node) within a tenant. */
export interface WindowKey {
  windowStart: number;
  windowSeconds: number;
  node: string;
}

/** A priority sample with the exact counters of every record it saw. */
export interface WindowState {
  k: number;
  tau: number;
  /** Exact count of the records seen (the sample's `seen`). */
  records: number;
  bytes: bigint;
  packets: bigint;
  /** Highest priority first. */
  kept: Kept<FlowRecord>[];
}

export interface StoredWindow extends WindowKey, WindowState {
  id: number;
  collectorId: number;
  collector: string;
  nextSeq: number;
  updatedAt: number;
}

export interface WindowFilter {
  from: number;
  to: number;
  /** Collector ids; every collector of the tenant when absent. */
  collectorIds?: readonly number[];
  /** Only windows shorter than this many seconds. */
  shorterThan?: number;
  /** Only windows of exactly this many seconds. */
  windowSeconds?: number;
}

/**
 * The tenant's reservoirs whose window starts in [from, to), with their kept records,
 * ordered by window, collector, node. Empty rows (a batch that failed after creating its
 * reservoir) are skipped. One statement, so each reservoir's τ and counters come from the
 * same snapshot as its kept records even while ingest commits; one result row per
 * reservoir, its kept rows (kept-codec.ts layout) concatenated by group_concat, which
 * copies blob bytes as they are: a driver object per kept record costs far more.
 */
export async function readStoredWindows(executor: Executor, tenantId: number, filter: WindowFilter): Promise<StoredWindow[]> {
  const args: InValue[] = [tenantId, filter.from, filter.to];
  let where = "r.tenant_id = ? AND r.window_start >= ? AND r.window_start < ? AND r.records > 0";
  if (filter.collectorIds) {
    if (filter.collectorIds.length === 0) return [];
    where += ` AND r.collector_id IN (${filter.collectorIds.map(() => "?").join(", ")})`;
    args.push(...filter.collectorIds);
  }
  if (filter.shorterThan !== undefined) {
    where += " AND r.window_seconds < ?";
    args.push(filter.shorterThan);
  }
  if (filter.windowSeconds !== undefined) {
    where += " AND r.window_seconds = ?";
    args.push(filter.windowSeconds);
  }
  const found = await executor.execute({
    sql:
      "SELECT r.id, r.collector_id, c.name, r.window_start, r.window_seconds, r.node, r.k, r.tau, r.records, r.bytes, r.packets, r.next_seq, r.updated_at, " +
      "CAST(group_concat(k.data, '') AS BLOB) " +
      "FROM reservoirs r JOIN collectors c ON c.id = r.collector_id AND c.tenant_id = r.tenant_id JOIN kept_records k ON k.reservoir_id = r.id " +
      `WHERE ${where} GROUP BY r.id ORDER BY r.window_start, r.window_seconds, c.name, r.node`,
    args,
  });
  return found.rows.map((row) => {
    const data = new Uint8Array(row[13] as ArrayBuffer);
    const kept: Kept<FlowRecord>[] = [];
    for (let offset = 0; offset < data.byteLength; offset += KEPT_ROW_BYTES) {
      const { priority, weight, record } = decodeKeptRow(data, offset);
      kept.push({ item: record, weight, priority });
    }
    kept.sort((a, b) => b.priority - a.priority);
    return {
      id: Number(row[0]),
      collectorId: Number(row[1]),
      collector: String(row[2]),
      windowStart: Number(row[3]),
      windowSeconds: Number(row[4]),
      node: String(row[5]),
      k: Number(row[6]),
      tau: Number(row[7]),
      records: Number(row[8]),
      // Decimal text: the sums of unsigned 64-bit counters can pass SQLite's signed INTEGER.
      bytes: BigInt(String(row[9])),
      packets: BigInt(String(row[10])),
      nextSeq: Number(row[11]),
      updatedAt: Number(row[12]),
      kept,
    };
  });
}

/** The result of merging window states, and how many duplicate kept records were counted once. */
export interface MergedWindow {
  state: WindowState;
  duplicatesDropped: number;
}

/**
 * Merges samples of one window into one (Duffield, Lund, Thorup, J. ACM 54(6), 2007; see
 * app/sampling/merge.ts): k = min(kWanted, every input k). Plain merges assume the inputs
 * saw disjoint records, and their exact counters add up exactly. With `coordinated`, the
 * inputs were drawn with one tenant secret and may share flows: a kept record present in
 * two inputs counts once (app/sampling/coordinated.ts), and the counters of the duplicates
 * found among kept records are taken off once; duplicates no input kept stay invisible, so
 * the merged exact counters are then an upper bound.
 */
export function mergeWindowStates(inputs: readonly WindowState[], kWanted: number, coordinated: boolean): MergedWindow {
  const states = inputs.map((w) => ({ k: w.k, tau: w.tau, seen: w.records, kept: w.kept }));
  let records = 0;
  let bytes = 0n;
  let packets = 0n;
  for (const w of inputs) {
    records += w.records;
    bytes += w.bytes;
    packets += w.packets;
  }
  if (!coordinated) {
    const merged = mergeStates(states, kWanted);
    return { state: { k: merged.k, tau: merged.tau, records, bytes, packets, kept: merged.kept }, duplicatesDropped: 0 };
  }
  const { state, duplicatesDropped, dropped } = mergeCoordinated(states, kWanted, flowKeyBytes);
  // Each dropped copy's counters were counted in its own input's exact sums as well.
  for (const copy of dropped) {
    bytes -= copy.item.bytes;
    packets -= copy.item.packets;
  }
  return { state: { k: state.k, tau: state.tau, records: records - duplicatesDropped, bytes, packets, kept: state.kept }, duplicatesDropped };
}

const KEY_WHERE = "tenant_id = ? AND collector_id = ? AND window_start = ? AND window_seconds = ? AND node = ?";

/**
 * Statements that make the reservoir (collector, key) hold exactly `state`, creating it when
 * new: its kept records are replaced by the new ones under fresh seqs, so `next_seq` always
 * moves and every cached snapshot of the old kept set (app/query/snapshot-cache.ts, a live
 * reservoir's version check) stops matching.
 */
export function putWindowStatements(tenantId: number, collectorId: number, key: WindowKey, state: WindowState, now: number): InStatement[] {
  const keyArgs: InValue[] = [tenantId, collectorId, key.windowStart, key.windowSeconds, key.node];
  const statements: InStatement[] = [
    {
      sql: "INSERT OR IGNORE INTO reservoirs (tenant_id, collector_id, window_start, window_seconds, node, k, updated_at) VALUES (?, ?, ?, ?, ?, ?, ?)",
      args: [...keyArgs, state.k, now],
    },
    { sql: `DELETE FROM kept_records WHERE reservoir_id = (SELECT id FROM reservoirs WHERE ${KEY_WHERE})`, args: keyArgs },
  ];
  const n = state.kept.length;
  if (n > 0) {
    const rows = encodeKeptRows(state.kept.map((e) => ({ priority: e.priority, weight: e.weight, record: e.item })));
    statements.push({
      sql:
        "WITH RECURSIVE row(i) AS (SELECT 0 UNION ALL SELECT i + 1 FROM row WHERE i + 1 < ?1), " +
        `target(id, seq) AS (SELECT id, next_seq FROM reservoirs WHERE tenant_id = ?3 AND collector_id = ?4 AND window_start = ?5 AND window_seconds = ?6 AND node = ?7) ` +
        `INSERT INTO kept_records (reservoir_id, seq, data) SELECT target.id, target.seq + i, substr(?2, i * ${KEPT_ROW_BYTES} + 1, ${KEPT_ROW_BYTES}) FROM row, target`,
      args: [n, rows, ...keyArgs],
    });
  }
  statements.push({
    sql: `UPDATE reservoirs SET k = ?, tau = ?, records = ?, bytes = ?, packets = ?, next_seq = next_seq + ?, updated_at = ? WHERE ${KEY_WHERE}`,
    args: [state.k, state.tau, state.records, state.bytes.toString(), state.packets.toString(), Math.max(n, 1), now, ...keyArgs],
  });
  return statements;
}

/** Deletes reservoirs (their kept records go with them, ON DELETE CASCADE). */
export function deleteWindowsStatement(tenantId: number, ids: readonly number[]): InStatement {
  return { sql: "DELETE FROM reservoirs WHERE tenant_id = ? AND id IN (SELECT value FROM json_each(?))", args: [tenantId, JSON.stringify(ids)] };
}

/** The state part of a stored window. */
export function stateOf(w: WindowState): WindowState {
  return { k: w.k, tau: w.tau, records: w.records, bytes: w.bytes, packets: w.packets, kept: w.kept };
}
