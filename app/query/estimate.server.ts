import type { InStatement, InValue, Row } from "@libsql/client";
import { ApiError } from "~/auth/api-keys.server";
import type { Db } from "~/db/client.server";
import type { ReservoirManager } from "~/ingest/manager.server";
import { collectorRule, overlapsOf, type CollectorInfo, type CollectorOverlap } from "./collector-rule";
import { copiesAndMerges } from "./collector-kinds.server";
import { buildAnswer, largestRatio, unseenRatio, type EstimateAnswer, type WindowSpan } from "./answer";
import type { KeptColumns } from "./columns";
import { keptRowsToColumns } from "~/ingest/kept-codec";
import { PACKING_SUPPORTED, unpackColumns } from "./packed-columns";
import type { EstimateQuery } from "./request";
import { compileQuery, type ScanReservoir } from "./scan";
import { discloseRollUps } from "./rollup-disclosure";
import { rankGroups } from "./selection";
import { rateParts } from "./rate-windows";
import { SnapshotCache } from "./snapshot-cache";

/** What an estimate needs of the server: the database and this node's live reservoirs. */
export interface EstimateContext {
  db: Db;
  manager: Pick<ReservoirManager, "liveColumns">;
  /**
   * The server's snapshot cache, which the host warms after start (app/query/warm.server.ts).
   * It travels in the load context because route modules run in another module graph than
   * the host; without it, one cache per database handle in this module.
   */
  snapshots?: SnapshotCache;
}

/** What an estimate needs of the tenant it runs for. */
export interface EstimateTenant {
  id: number;
  weightAttribute: "bytes" | "packets";
  /** The fine windows' k and length, for the roll-up disclosure in `resolution`; optional. */
  sampleSize?: number;
  windowSeconds?: number;
}

/**
 * Kept records one query may scan. Beyond this the columns alone take hundreds of megabytes
 * and loading them from SQLite takes many seconds; a long range should use rolled-up windows.
 */
export const MAX_KEPT_PER_QUERY = 5_000_000;

// SQLite allows 32 766 bound parameters per statement; stay well below.
const IDS_PER_SELECT = 500;

/** One cache per database, so two servers in one process never share reservoir ids. */
const caches = new WeakMap<object, SnapshotCache>();

function cacheFor(db: Db): SnapshotCache {
  let cache = caches.get(db.$client);
  if (!cache) caches.set(db.$client, (cache = new SnapshotCache()));
  return cache;
}

export interface ReservoirRow {
  id: number;
  collector: string;
  windowStart: number;
  windowSeconds: number;
  k: number;
  tau: number;
  records: number;
  bytes: bigint;
  packets: bigint;
  nextSeq: number;
}

/**
 * Answers an estimate query for one tenant: the reservoirs of every node whose window starts
 * in [from, to), of the named collectors (all when none are named), each an independent
 * priority sample (Duffield, Lund, Thorup, J. ACM 54(6), 2007), scanned together. Windows of
 * any length count, so a range reaching back past the roll-up is answered from hourly
 * windows there; the answer's `resolution` says which lengths covered which span.
 * Authentication is the caller's business; `tenant` is trusted here and confines every
 * SQL statement.
 */
export async function runEstimate(ctx: EstimateContext, tenant: EstimateTenant, query: EstimateQuery): Promise<EstimateAnswer> {
  const metric = query.metric ?? tenant.weightAttribute;
  const special = await copiesAndMerges(ctx.db, tenant.id);
  const overlaps = refuseOverlap(special, query.where.collectors, query.allowOverlap);
  const rows = await reservoirsInRange(ctx.db, tenant.id, query);

  const keptBound = rows.reduce((sum, r) => sum + Math.min(r.k, r.records), 0);
  if (keptBound > MAX_KEPT_PER_QUERY) {
    throw new ApiError(
      422,
      "query_too_large",
      `The range holds up to ${keptBound} kept records in ${rows.length} reservoirs; one query scans at most ${MAX_KEPT_PER_QUERY}. Narrow from/to or name fewer collectors.`,
      { details: [{ path: "to", message: "covers too many windows for one query" }] },
    );
  }

  const reservoirs = await keptColumns(ctx, tenant.id, rows);
  const { selection, ...result } = rankGroups(reservoirs, compileQuery(query, metric), query.rank);

  const windows = new Set<number>();
  const collectors = new Set<string>();
  const spans: WindowSpan[] = [];
  const exact = { records: 0n, bytes: 0n, packets: 0n };
  // Records not kept in any covered reservoir had w < τ there: the intervals bound what one of
  // them may add by the largest τ times the metric's ratio to the weight (see toInterval and
  // unseenRatio), live reservoirs' τ included.
  let unseenTerm = 0;
  const sameAsWeight = metric === tenant.weightAttribute;
  for (const r of reservoirs) {
    if (r.tau <= 0) continue;
    // With the metric equal to the weight the ratio is exactly 1: no pass over the kept records.
    unseenTerm = Math.max(unseenTerm, r.tau * unseenRatio(tenant.weightAttribute, metric, sameAsWeight ? null : largestRatio(r.columns, metric)));
  }
  for (const r of rows) {
    windows.add(r.windowStart);
    spans.push({ windowStart: r.windowStart, windowSeconds: r.windowSeconds });
    collectors.add(r.collector);
    exact.records += BigInt(r.records);
    exact.bytes += r.bytes;
    exact.packets += r.packets;
  }
  const answer = buildAnswer({
    metric,
    result,
    windows: windows.size,
    collectors: [...collectors].sort(),
    spans,
    exact,
    from: query.from,
    to: query.to,
    selection,
    groupByWindow: query.groupBy?.by === "window",
    ...(query.unit === "rate" ? { rate: rateParts(reservoirs, rows, query, metric, tenant.weightAttribute) } : {}),
    context: {
      unseenTerm,
      cap: Number(metric === "bytes" ? exact.bytes : metric === "packets" ? exact.packets : exact.records),
    },
  });
  discloseRollUps(answer.resolution, rows, tenant);
  answer.collectorRule = collectorRule(query.where.collectors, await excludedInRange(ctx.db, tenant.id, query, special), overlaps);
  return answer;
}

/**
 * Copies and merges hold samples of records counted in other collectors: naming one together
 * with a collector whose records it holds (a copy with its origin, a merge with an input, two
 * of them sharing one) would count those records twice. Refused with 422 unless the request
 * says `allowOverlap`; then the overlaps are returned for the answer to state.
 */
function refuseOverlap(special: CollectorInfo[], names: readonly string[], allowOverlap: boolean): CollectorOverlap[] {
  const overlaps = overlapsOf(names, special);
  if (overlaps.length === 0 || allowOverlap) return overlaps;
  const [first] = overlaps;
  const rule =
    first.code === "copy_with_origin"
      ? "a copy counts only alone or with collectors whose records it does not hold"
      : "a merge counts only alone or with collectors it does not merge";
  const message = `${first.message} (${rule}). Name one of them, or send allowOverlap: true to count them together anyway`;
  throw new ApiError(422, first.code, `Invalid query: where.collectors: ${message}.`, {
    details: overlaps.map((o) => ({ path: "where.collectors", message: o.message })),
  });
}

/** With no collector named: the copies and merges holding windows in range, which the question left out. */
async function excludedInRange(db: Db, tenantId: number, query: EstimateQuery, special: CollectorInfo[]): Promise<CollectorInfo[]> {
  if (query.where.collectors.length > 0 || special.length === 0) return [];
  const found = await db.$client.execute({
    sql:
      "SELECT DISTINCT c.name FROM reservoirs r JOIN collectors c ON c.id = r.collector_id AND c.tenant_id = r.tenant_id " +
      "WHERE r.tenant_id = ? AND r.window_start >= ? AND r.window_start < ? AND r.records > 0 AND (c.kind = 'merge' OR c.copy_of IS NOT NULL)",
    args: [tenantId, query.from, query.to],
  });
  const inRange = new Set(found.rows.map((row) => String(row[0])));
  return special.filter((c) => inRange.has(c.name)).sort((a, b) => (a.name < b.name ? -1 : 1));
}

/** The reservoir rows with data in range: one statement on the (tenant_id, window_start) index. */
async function reservoirsInRange(db: Db, tenantId: number, query: EstimateQuery): Promise<ReservoirRow[]> {
  const names = query.where.collectors;
  const args: InValue[] = [tenantId, query.from, query.to];
  let byName = "";
  if (names.length > 0) {
    byName = ` AND c.name IN (${names.map(() => "?").join(", ")})`;
    args.push(...names);
  } else {
    // A merged collector's records are already counted in its inputs, a copy's maybe in its
    // origins (collector-rule.ts): only by name.
    byName = " AND c.kind = 'stream' AND c.copy_of IS NULL";
  }
  const found = await db.$client.execute({
    sql:
      `SELECT ${RESERVOIR_ROW_COLUMNS} ` +
      "FROM reservoirs r JOIN collectors c ON c.id = r.collector_id AND c.tenant_id = r.tenant_id " +
      // An empty row is left behind when a batch fails after creating its reservoir.
      `WHERE r.tenant_id = ? AND r.window_start >= ? AND r.window_start < ? AND r.records > 0${byName} ` +
      "ORDER BY r.window_start, c.name, r.id",
    args,
  });
  return found.rows.map(reservoirRowOf);
}

/** The select list `reservoirRowOf` reads (aliases r = reservoirs, c = collectors); more columns may follow it. */
export const RESERVOIR_ROW_COLUMNS = "r.id, c.name, r.window_start, r.k, r.tau, r.records, r.bytes, r.packets, r.next_seq, r.window_seconds";

/** A ReservoirRow from a result row that starts with RESERVOIR_ROW_COLUMNS. */
export function reservoirRowOf(row: Row): ReservoirRow {
  return {
    id: Number(row[0]),
    collector: String(row[1]),
    windowStart: Number(row[2]),
    k: Number(row[3]),
    tau: Number(row[4]),
    records: Number(row[5]),
    // Decimal text: the sums of unsigned 64-bit counters can pass SQLite's signed INTEGER.
    bytes: BigInt(String(row[6])),
    packets: BigInt(String(row[7])),
    nextSeq: Number(row[8]),
    windowSeconds: Number(row[9]),
  };
}

/**
 * Each reservoir's kept records as columns: from this node's memory when it holds the
 * reservoir at the stored version, else from the snapshot cache, else from SQLite in one
 * read transaction for all the rest.
 */
export async function keptColumns(ctx: EstimateContext, tenantId: number, rows: ReservoirRow[]): Promise<ScanReservoir[]> {
  const cache = ctx.snapshots ?? cacheFor(ctx.db);
  const out: ScanReservoir[] = [];
  const missing: ReservoirRow[] = [];
  for (const row of rows) {
    const columns = ctx.manager.liveColumns(row.id, row.nextSeq) ?? cache.get(row.id, row.nextSeq);
    if (columns) out.push({ tau: row.tau, collector: row.collector, windowStart: row.windowStart, columns });
    else missing.push(row);
  }
  if (missing.length === 0) return out;

  const statements: InStatement[] = [];
  for (let i = 0; i < missing.length; i += IDS_PER_SELECT) {
    const ids = missing.slice(i, i + IDS_PER_SELECT).map((r) => r.id);
    statements.push({ sql: keptSelect(ids.length), args: [tenantId, ...ids] });
  }
  const results = await ctx.db.$client.batch(statements, "read");
  const loaded = new Map<number, { tau: number; nextSeq: number; columns: KeptColumns }>();
  for (const result of results) {
    for (const row of result.rows) {
      const id = Number(row[0]);
      const columns = columnsOfRow(row);
      if (columns === null) continue;
      const snapshot = { nextSeq: Number(row[1]), tau: Number(row[2]), columns };
      loaded.set(id, snapshot);
      cache.set(id, snapshot.nextSeq, snapshot.columns);
    }
  }
  for (const row of missing) {
    const snapshot = loaded.get(row.id);
    // No kept rows: the reservoir went away (retention) between the two statements.
    if (snapshot === undefined) continue;
    out.push({ tau: snapshot.tau, collector: row.collector, windowStart: row.windowStart, columns: snapshot.columns });
  }
  return out;
}

/**
 * One row per reservoir with its kept records: the packed columns (packed-columns.ts) when a
 * copy at the reservoir's `next_seq` exists — a closed window, packed by pack.server.ts — else
 * every kept row (kept-codec.ts layout) concatenated in one blob. libsql builds a JavaScript
 * object per result row, some 30 µs per kept record when each is its own row, against a
 * plain byte copy this way. group_concat copies blob bytes as they are, NULs included, and
 * CAST back to BLOB returns them unchanged; it runs only where no current copy is. τ and
 * next_seq come from the same statement, hence the same snapshot, so they belong to exactly
 * these kept records even if a batch committed since the reservoir rows were read.
 */
function keptSelect(ids: number): string {
  // The join matches only a current copy; its key, not its blob, tells whether one is there.
  const [packed, hasPacked] = PACKING_SUPPORTED ? ["p.data", "p.reservoir_id"] : ["NULL", "NULL"];
  return (
    `SELECT r.id, r.next_seq, r.tau, ${packed}, ` +
    `CASE WHEN ${hasPacked} IS NULL THEN (SELECT CAST(group_concat(k.data, '') AS BLOB) FROM kept_records k WHERE k.reservoir_id = r.id) END ` +
    "FROM reservoirs r LEFT JOIN packed_columns p ON p.reservoir_id = r.id AND p.next_seq = r.next_seq " +
    `WHERE r.tenant_id = ? AND r.id IN (${new Array(ids).fill("?").join(", ")})`
  );
}

/** The columns of one reservoir from its row of `keptSelect`; null when it keeps no record (any more). */
function columnsOfRow(row: Row): KeptColumns | null {
  if (row[3] !== null) return unpackColumns(new Uint8Array(row[3] as ArrayBuffer));
  if (row[4] === null) return null;
  return keptRowsToColumns(new Uint8Array(row[4] as ArrayBuffer));
}
