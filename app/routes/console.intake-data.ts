import type { InValue } from "@libsql/client";
import { requireMember } from "~/auth/guards.server";
import type { Db } from "~/db/client.server";
import type { IngestSource } from "~/db/schema.server";
import { windowStartOf } from "~/ingest/window";
import { counterJson, type Counter } from "~/query/answer";
import type { Route } from "./+types/console.intake-data";

/** How far back "records per second" looks, in ingest batches received. */
const RATE_SECONDS = 60;
/** Windows shown per collector: the open one and the ones before it. */
const WINDOWS_SHOWN = 4;
/** A collector not seen for more than this many windows (or never) is quiet. */
const QUIET_AFTER_WINDOWS = 2;
/** How far back "where records come from" looks. */
const SOURCES_HOURS = 24;

export interface IntakeWindow {
  start: number;
  /** Exact counters of every record of the window (all nodes), as the reservoirs keep them. */
  records: number;
  bytes: Counter;
  packets: Counter;
}

/** One reservoir of the open window: one per Weir node that sampled this collector. */
export interface OpenReservoir {
  node: string;
  kept: number;
  k: number;
  tau: number;
  records: number;
}

/** What arrived over one way in (ingest_batches.source) in the last SOURCES_HOURS. */
export interface SourceUse {
  batches: number;
  records: number;
}

/** Where a collector's records come from: what arrived over each way in, and what can feed it. */
export interface CollectorSources {
  /** Per way in, over the last `IntakeSnapshot.sourcesHours`; absent when none arrived that way. */
  received: Partial<Record<IngestSource, SourceUse>>;
  /** Keys that may post records (ingest scope, not revoked). */
  activeKeys: number;
  /** Exporter claims that feed the collector. */
  exporterClaims: number;
}

export interface IntakeCollector {
  name: string;
  lastSeenAt: number | null;
  /** Never sent a batch, but holds samples imported from sample files: not expected to send. */
  importsOnly: boolean;
  /**
   * Since the collector was created (collectors table): records accepted late (start before the
   * open window), accepted with a time ahead of the server clock within the tolerance, refused
   * (or, from the listeners, dropped) for their times; and IANA elements of JSON records ignored.
   */
  timeChecks: { late: number; clockSkewed: number; refused: number; ignoredFields: number };
  /** A copy (filled by sample-file imports): the collectors its files came from; null for a stream collector. */
  copyOf: string[] | null;
  quiet: boolean;
  recordsLastMinute: number;
  batchesLastMinute: number;
  recordsPerSecond: number;
  /** Oldest first, the open window last; aligned with `IntakeSnapshot.windows`. */
  windows: IntakeWindow[];
  open: OpenReservoir[];
  sources: CollectorSources;
}

export interface IntakeSnapshot {
  /** Server time of the snapshot, epoch ms: every age is measured from it, not the browser's clock. */
  now: number;
  windowSeconds: number;
  sampleSize: number;
  weightAttribute: "bytes" | "packets";
  rateSeconds: number;
  /** Windows without a batch after which a collector counts as quiet. */
  quietAfterWindows: number;
  /** Hours over which `CollectorSources.received` counts batches. */
  sourcesHours: number;
  /** Window starts shown, oldest first; the last is the open window. */
  windows: number[];
  collectors: IntakeCollector[];
}

/** GET /t/:tenant/intake-data: ingest health per collector, as JSON, for any member. */
export async function loader({ request, context, params }: Route.LoaderArgs) {
  const { tenant } = await requireMember(request, context, params.tenant);
  const snapshot = await intakeSnapshot(context.db, tenant, Date.now());
  return Response.json(snapshot, { headers: { "Cache-Control": "no-store" } });
}

/**
 * Ingest health of one tenant at `now`. Every statement is confined to the tenant's id.
 * Records per second come from the batches received in the last minute; counters per window
 * are the reservoirs' exact ones summed over nodes; fill and τ are those of the open window
 * (the current window of the tenant's window length). Where records come from counts the
 * batches of the last day per way in (JSON over HTTP, IPFIX files, the listeners), beside the
 * keys and exporter claims that can feed each collector.
 */
async function intakeSnapshot(
  db: Db,
  tenant: { id: number; windowSeconds: number; sampleSize: number; weightAttribute: "bytes" | "packets" },
  now: number,
): Promise<IntakeSnapshot> {
  const windowMs = tenant.windowSeconds * 1000;
  const open = windowStartOf(now, tenant.windowSeconds);
  const windows = Array.from({ length: WINDOWS_SHOWN }, (_, i) => open - (WINDOWS_SHOWN - 1 - i) * windowMs);
  const client = db.$client;
  const run = (sql: string, args: InValue[]) => client.execute({ sql, args });

  const [collectorRows, rateRows, reservoirRows, sourceRows, keyRows, claimRows] = await Promise.all([
    // Merged collectors receive no records; the Merge page lists them.
    run(
      "SELECT c.id, c.name, c.last_seen_at, EXISTS (SELECT 1 FROM reservoirs r WHERE r.collector_id = c.id AND r.records > 0), c.copy_of " +
        ", c.late_records AS late_records, c.clock_skewed_records AS clock_skewed_records, c.time_refused_records AS time_refused_records, c.ignored_fields AS ignored_fields " +
        "FROM collectors c WHERE c.tenant_id = ? AND c.kind = 'stream' ORDER BY c.name",
      [tenant.id],
    ),
    run(
      "SELECT collector_id, SUM(record_count), COUNT(*) FROM ingest_batches WHERE tenant_id = ? AND received_at > ? AND received_at <= ? GROUP BY collector_id",
      [tenant.id, now - RATE_SECONDS * 1000, now],
    ),
    run(
      // Kept rows are counted only for the open window, the one whose fill is shown.
      "SELECT r.collector_id, r.window_start, r.node, r.k, r.tau, r.records, r.bytes, r.packets, " +
        "CASE WHEN r.window_start = ? THEN (SELECT COUNT(*) FROM kept_records k WHERE k.reservoir_id = r.id) END " +
        "FROM reservoirs r WHERE r.tenant_id = ? AND r.window_seconds = ? AND r.window_start >= ? AND r.window_start <= ? " +
        "ORDER BY r.window_start, r.node",
      [open, tenant.id, tenant.windowSeconds, windows[0], open],
    ),
    run(
      "SELECT collector_id, source, COUNT(*), SUM(record_count) FROM ingest_batches WHERE tenant_id = ? AND received_at > ? AND received_at <= ? GROUP BY collector_id, source",
      [tenant.id, now - SOURCES_HOURS * 3600_000, now],
    ),
    // Keys that can feed records: a query-only key reads estimates and sends nothing.
    run("SELECT collector_id, COUNT(*) FROM api_keys WHERE tenant_id = ? AND revoked_at IS NULL AND scopes IN ('ingest', 'ingest,query') GROUP BY collector_id", [tenant.id]),
    run("SELECT collector_id, COUNT(*) FROM exporter_claims WHERE tenant_id = ? GROUP BY collector_id", [tenant.id]),
  ]);

  const received = new Map<number, Partial<Record<IngestSource, SourceUse>>>();
  for (const row of sourceRows.rows) {
    const id = Number(row[0]);
    const perSource = received.get(id) ?? {};
    perSource[String(row[1]) as IngestSource] = { batches: Number(row[2]), records: Number(row[3]) };
    received.set(id, perSource);
  }
  const countsOf = (rows: typeof keyRows.rows) => new Map(rows.map((row) => [Number(row[0]), Number(row[1])]));
  const activeKeys = countsOf(keyRows.rows);
  const exporterClaims = countsOf(claimRows.rows);

  const rates = new Map<number, { records: number; batches: number }>();
  for (const row of rateRows.rows) rates.set(Number(row[0]), { records: Number(row[1]), batches: Number(row[2]) });

  const perCollector = new Map<number, { windows: Map<number, { records: number; bytes: bigint; packets: bigint }>; open: OpenReservoir[] }>();
  for (const row of reservoirRows.rows) {
    const collectorId = Number(row[0]);
    const start = Number(row[1]);
    let entry = perCollector.get(collectorId);
    if (!entry) perCollector.set(collectorId, (entry = { windows: new Map(), open: [] }));
    const sums = entry.windows.get(start) ?? { records: 0, bytes: 0n, packets: 0n };
    // Decimal text in SQLite: sums of unsigned 64-bit counters can pass its signed INTEGER.
    sums.records += Number(row[5]);
    sums.bytes += BigInt(String(row[6]));
    sums.packets += BigInt(String(row[7]));
    entry.windows.set(start, sums);
    if (start === open) {
      entry.open.push({ node: String(row[2]), k: Number(row[3]), tau: Number(row[4]), records: Number(row[5]), kept: Number(row[8]) });
    }
  }

  const collectors: IntakeCollector[] = collectorRows.rows.map((row) => {
    const id = Number(row[0]);
    const lastSeenAt = row[2] === null ? null : Number(row[2]);
    const importsOnly = lastSeenAt === null && Number(row[3]) === 1;
    const rate = rates.get(id) ?? { records: 0, batches: 0 };
    const entry = perCollector.get(id);
    return {
      name: String(row[1]),
      lastSeenAt,
      importsOnly,
      timeChecks: {
        late: Number(row.late_records),
        clockSkewed: Number(row.clock_skewed_records),
        refused: Number(row.time_refused_records),
        ignoredFields: Number(row.ignored_fields),
      },
      copyOf: row[4] === null ? null : (JSON.parse(String(row[4])) as string[]),
      quiet: (lastSeenAt === null && !importsOnly) || (lastSeenAt !== null && now - lastSeenAt > QUIET_AFTER_WINDOWS * windowMs),
      recordsLastMinute: rate.records,
      batchesLastMinute: rate.batches,
      recordsPerSecond: rate.records / RATE_SECONDS,
      windows: windows.map((start) => {
        const sums = entry?.windows.get(start);
        return { start, records: sums?.records ?? 0, bytes: counterJson(sums?.bytes ?? 0n), packets: counterJson(sums?.packets ?? 0n) };
      }),
      open: entry?.open ?? [],
      sources: { received: received.get(id) ?? {}, activeKeys: activeKeys.get(id) ?? 0, exporterClaims: exporterClaims.get(id) ?? 0 },
    };
  });

  return {
    now,
    windowSeconds: tenant.windowSeconds,
    sampleSize: tenant.sampleSize,
    weightAttribute: tenant.weightAttribute,
    rateSeconds: RATE_SECONDS,
    quietAfterWindows: QUIET_AFTER_WINDOWS,
    sourcesHours: SOURCES_HOURS,
    windows,
    collectors,
  };
}
