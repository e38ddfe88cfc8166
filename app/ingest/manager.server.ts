import type { InStatement } from "@libsql/client";
import type { Db } from "~/db/client.server";
import type { IngestSource } from "~/db/schema.server";
import type { FlowRecord } from "~/flow/record";
import { Reservoir, type Kept } from "~/sampling/reservoir";
import type { UniformSource } from "~/sampling/uniform";
import { toColumns, type KeptColumns } from "~/query/columns";
import { coordinatedUniform, flowKeyLength } from "~/sampling/coordinated";
import { decodeKeptRow, decodeRowRecord, encodeKeptRows, flowKeyOfRow, KEPT_ROW_BYTES, packFlowRecords, ROW_BYTES_AT, ROW_PACKETS_AT, ROW_START_AT, type PackedFlows } from "./kept-codec";
import { checkRowTimes, withoutRows } from "./time-check";
import { windowStartOf } from "./window";

/** A kept flow record and its row number inside its reservoir (-1 until stored). */
export interface KeptFlow {
  seq: number;
  record: FlowRecord;
}

/** What the manager needs to know of a tenant: settings apply to windows created from now on. */
export interface TenantSampling {
  id: number;
  sampleSize: number;
  windowSeconds: number;
  weightAttribute: "bytes" | "packets";
  /**
   * The tenant's 16-byte SipHash key when it samples with coordinated priorities: each
   * record's u is then `coordinatedUniform(key, flow key)` instead of a random draw.
   */
  coordinationKey?: Uint8Array | null;
  /**
   * Days fine windows are kept before their roll-up and days any window is kept
   * (tenants.retention_days, hourly_retention_days); without the latter, no retention bound
   * applies on ingest.
   */
  retentionDays?: number;
  hourlyRetentionDays?: number;
}

export interface IngestBatch {
  tenant: TenantSampling;
  collector: { id: number; name: string };
  /** Validated records: packed as a parse worker hands them over, or as objects (seed, tests, benchmarks). */
  records: readonly FlowRecord[] | PackedFlows;
  receivedAt: number;
  idempotencyKey?: string;
  /** How the batch arrived, for Intake (default "json"). */
  source?: IngestSource;
  /** IANA elements of JSON records that Weir ignored: name → records that carried it (parseFlowBatch). */
  ignoredFields?: Record<string, number>;
}

export interface WindowAnswer {
  collector: string;
  start: string;
  end: string;
  /** Records of this batch that fell in the window. */
  records: number;
  kept: number;
  k: number;
  tau: number;
}

export interface IngestAnswer {
  accepted: number;
  duplicate: boolean;
  windows: WindowAnswer[];
  /** Accepted records that started before the open window (within retention). */
  late: number;
  /** Accepted records with a start or end ahead of the server clock, within INGEST_FUTURE_TOLERANCE_SECONDS. */
  clockSkewed: number;
  /** IANA elements the records carried that Weir does not store: name → records (JSON batches). */
  ignoredFields: Record<string, number>;
}

/** Bounds on flow times at ingest (env INGEST_*; see time-check.ts). */
export interface IngestTimeBounds {
  /** Times after the clock plus this are refused. */
  futureToleranceMs: number;
  /** Times before this (epoch ms) are refused. */
  floorMs: number;
  /** Starts older than the tenant's hourly_retention_days are refused. */
  refuseExpired: boolean;
}

/**
 * A batch refused for its records' times: the route answers 400 with these details, matched
 * by `code` (the error crosses from the server's modules into the route bundle).
 */
export interface TimesRefusedError extends Error {
  code: "weir_times_refused";
  details: { index: number; path: string; message: string }[];
  invalidCount: number;
}

interface Live {
  id: number;
  key: string;
  windowStart: number;
  windowSeconds: number;
  reservoir: Reservoir<KeptFlow>;
  records: number;
  bytes: bigint;
  packets: bigint;
  nextSeq: number;
  lastUsed: number;
  /** Scratch of the batch being applied: records that entered, seqs of stored records evicted. */
  entered: Set<Kept<KeptFlow>>;
  evicted: number[];
  batchRecords: number;
  /** True while a batch changed the sample in memory but has not committed yet. */
  pending: boolean;
  /** Columns of the kept set, cached for queries until the next record enters. */
  columns?: { nextSeq: number; size: number; value: KeptColumns };
}

export interface ManagerOptions {
  node: string;
  uniform?: UniformSource;
  /** Live reservoirs kept in memory before the least recently used are dropped (they reload from SQLite). */
  maxLive?: number;
  /** Idempotency keys are remembered at least this long. */
  idempotencyTtlMs?: number;
  /** The clock ingest checks times against; tests inject one. Default Date.now. */
  now?: () => number;
  /**
   * Time sanity on ingest; absent (seed, benchmarks, tests of the sampling) checks nothing.
   * JSON and IPFIX-file batches with a refused record are refused whole; batches from the
   * listeners (no client to answer) drop those records and count them.
   */
  timeBounds?: IngestTimeBounds;
}

const DAY_MS = 86_400_000;

// The newcomers of one batch and reservoir arrive as one blob of fixed-size rows
// (kept-codec.ts) with consecutive seqs, and SQL splits it: binding each field
// separately costs about a microsecond per value in the driver.
const INSERT_KEPT =
  "WITH RECURSIVE row(i) AS (SELECT 0 UNION ALL SELECT i + 1 FROM row WHERE i + 1 < ?3) " +
  `INSERT INTO kept_records (reservoir_id, seq, data) SELECT ?1, ?4 + i, substr(?2, i * ${KEPT_ROW_BYTES} + 1, ${KEPT_ROW_BYTES}) FROM row`;
const DELETE_KEPT = "DELETE FROM kept_records WHERE reservoir_id = ?1 AND seq IN (SELECT value FROM json_each(?2))";
const IDEMPOTENCY_SWEEP_EVERY_MS = 60_000;
// 2^21 rows of 32-bit counter halves sum below 2^53, where doubles stop being exact.
const MAX_BATCH_RECORDS = 2 ** 21;

/**
 * Keeps one live priority sample per (tenant, collector, window) for this node,
 * loaded lazily from SQLite and dropped when unused, and applies ingest batches
 * durably: each batch is one transaction holding the records that entered, the
 * ones evicted, the new τ, the exact counters and the idempotency record; the
 * answer goes out only after it commits. Batches are applied one at a time
 * (SQLite has one writer anyway), so an answer never races another batch.
 *
 * Only O(k·log(n/k)) records ever enter a reservoir (Duffield, Lund, Thorup,
 * J. ACM 54(6), 2007), so the writes stay small however many records arrive.
 */
export class ReservoirManager {
  private readonly live = new Map<string, Live>();
  private readonly liveById = new Map<number, Live>();
  private queue: Promise<unknown> = Promise.resolve();
  private lastSweep = 0;

  constructor(
    private readonly db: Db,
    private readonly options: ManagerOptions,
  ) {}

  /** The clock the manager checks flow times against. */
  now(): number {
    return (this.options.now ?? Date.now)();
  }

  /** Applies one validated batch and resolves once it is committed. */
  ingest(batch: IngestBatch): Promise<IngestAnswer> {
    const run = this.queue.then(() =>
      this.apply(batch).catch((error: unknown) => {
        // Something else rewrote a reservoir this node held in memory (a roll-up or an import
        // in another process): nothing was stored; apply again from what SQLite holds now.
        if (!isReservoirChanged(error)) throw error;
        return this.apply(batch);
      }),
    );
    this.queue = run.catch(() => undefined);
    return run;
  }

  /**
   * Runs `change` (an import, a merge, a roll-up) between ingest batches, so none of this
   * node's batches interleaves with it, then forgets every live reservoir: they reload
   * from SQLite, which the change may have rewritten.
   */
  exclusive<T>(change: () => Promise<T>): Promise<T> {
    const run = this.queue.then(change).finally(() => this.clear());
    this.queue = run.catch(() => undefined);
    return run;
  }

  /** Waits for every batch already handed in. */
  async idle(): Promise<void> {
    await this.queue;
  }

  /**
   * The kept records of a reservoir of this node in columns, from memory when it
   * is live and at the stored version (`nextSeq`), otherwise undefined.
   */
  liveColumns(reservoirId: number, nextSeq: number): KeptColumns | undefined {
    const live = this.liveById.get(reservoirId);
    // While a batch is being committed the memory runs ahead of SQLite: read from there instead.
    if (!live || live.pending || live.nextSeq !== nextSeq) return undefined;
    if (!live.columns || live.columns.nextSeq !== live.nextSeq) {
      const kept = live.reservoir.kept().map((e) => ({ weight: e.weight, record: e.item.record }));
      live.columns = { nextSeq: live.nextSeq, size: kept.length, value: toColumns(kept) };
    }
    return live.columns.value;
  }

  /** Forgets every live reservoir (they reload from SQLite on next use). */
  clear(): void {
    this.live.clear();
    this.liveById.clear();
  }

  private forget(live: Live): void {
    this.live.delete(live.key);
    this.liveById.delete(live.id);
  }

  private async apply(batch: IngestBatch): Promise<IngestAnswer> {
    const client = this.db.$client;
    const { tenant, collector, receivedAt, idempotencyKey, source = "json" } = batch;
    await this.sweepIdempotencyKeys(receivedAt);
    if (idempotencyKey !== undefined) {
      const prior = await client.execute({
        sql: "SELECT response FROM ingest_batches WHERE tenant_id = ? AND idempotency_key = ?",
        args: [tenant.id, idempotencyKey],
      });
      if (prior.rows.length > 0) return { ...(JSON.parse(String(prior.rows[0].response)) as IngestAnswer), duplicate: true };
    }

    let { rows, count } = "rows" in batch.records ? batch.records : packFlowRecords(batch.records);
    if (count > MAX_BATCH_RECORDS) throw new RangeError(`a batch holds at most ${MAX_BATCH_RECORDS} records, got ${count}; split it`);
    let view = new DataView(rows.buffer, rows.byteOffset, rows.byteLength);
    let late = 0, clockSkewed = 0, timeRefused = 0;
    const bounds = this.options.timeBounds;
    if (bounds !== undefined) {
      const checked = this.checkTimes(view, count, tenant, receivedAt, bounds);
      ({ late, clockSkewed } = checked);
      timeRefused = checked.refused;
      if (checked.refusedRows !== null) {
        if (source === "json" || source === "ipfix-file") {
          await this.countRefused(collector.id, checked.refused);
          throw timesRefused(checked.details, checked.refused);
        }
        ({ rows, count } = withoutRows(rows, count, checked.refusedRows));
        view = new DataView(rows.buffer, rows.byteOffset, rows.byteLength);
      }
    }
    const ignoredFields = batch.ignoredFields ?? {};
    let ignoredCount = 0;
    for (const name in ignoredFields) ignoredCount += ignoredFields[name];
    // Group row numbers by window first, so each reservoir is loaded once.
    const byWindow = new Map<number, number[]>();
    for (let i = 0; i < count; i++) {
      const start = view.getFloat64(i * KEPT_ROW_BYTES + ROW_START_AT, true);
      const windowStart = windowStartOf(Number.isNaN(start) ? receivedAt : start, tenant.windowSeconds);
      let list = byWindow.get(windowStart);
      if (!list) byWindow.set(windowStart, (list = []));
      list.push(i);
    }
    const touched: Live[] = [];
    for (const windowStart of [...byWindow.keys()].sort((a, b) => a - b)) {
      touched.push(await this.load(tenant, collector.id, windowStart));
    }

    const byBytes = tenant.weightAttribute === "bytes";
    const coordination = tenant.coordinationKey ?? null;
    const flowKey = new Uint8Array(flowKeyLength);
    let batchBytes = 0n;
    try {
      touched.forEach((live) => {
        const rowNumbers = byWindow.get(live.windowStart)!;
        live.pending = true;
        live.batchRecords = rowNumbers.length;
        // Counters are summed as their 32-bit halves in doubles, exact up to MAX_BATCH_RECORDS
        // rows, and joined into bigints once per window: a bigint per row and counter cost more
        // than the offer itself.
        let bytesLow = 0, bytesHigh = 0, packetsLow = 0, packetsHigh = 0;
        for (const i of rowNumbers) {
          const at = i * KEPT_ROW_BYTES;
          const bl = view.getUint32(at + ROW_BYTES_AT, true), bh = view.getUint32(at + ROW_BYTES_AT + 4, true);
          const pl = view.getUint32(at + ROW_PACKETS_AT, true), ph = view.getUint32(at + ROW_PACKETS_AT + 4, true);
          bytesLow += bl;
          bytesHigh += bh;
          packetsLow += pl;
          packetsHigh += ph;
          // Rounded once, as Number(bigint) rounds, so the weight is exactly Number(bytes).
          const weight = byBytes ? bh * 2 ** 32 + bl : ph * 2 ** 32 + pl;
          // The record object is built only for the few rows that enter (O(k·log(n/k))), not for every row.
          const item = { seq: -1 } as KeptFlow;
          let entry;
          if (coordination === null) {
            entry = live.reservoir.offer(item, weight);
          } else {
            flowKeyOfRow(rows, at, flowKey);
            entry = live.reservoir.offer(item, weight, coordinatedUniform(coordination, flowKey));
          }
          if (entry) {
            item.record = decodeRowRecord(rows, at);
            live.entered.add(entry);
          }
        }
        const bytes = (BigInt(bytesHigh) << 32n) + BigInt(bytesLow);
        live.bytes += bytes;
        live.packets += (BigInt(packetsHigh) << 32n) + BigInt(packetsLow);
        batchBytes += bytes;
        live.records += rowNumbers.length;
      });

      const answer: IngestAnswer = {
        accepted: count,
        duplicate: false,
        late,
        clockSkewed,
        ignoredFields,
        windows: touched.map((live) => ({
          collector: collector.name,
          start: new Date(live.windowStart).toISOString(),
          end: new Date(live.windowStart + live.windowSeconds * 1000).toISOString(),
          records: live.batchRecords,
          kept: live.reservoir.size,
          k: live.reservoir.k,
          tau: live.reservoir.tau,
        })),
      };
      const statements = touched.flatMap((live) => this.persistStatements(live, receivedAt));
      statements.push(
        {
          sql: "INSERT INTO ingest_batches (tenant_id, collector_id, idempotency_key, received_at, record_count, bytes, source, response) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
          args: [tenant.id, collector.id, idempotencyKey ?? null, receivedAt, count, batchBytes.toString(), source, JSON.stringify(answer)],
        },
        {
          sql:
            "UPDATE collectors SET last_seen_at = ?, late_records = late_records + ?, clock_skewed_records = clock_skewed_records + ?, " +
            "time_refused_records = time_refused_records + ?, ignored_fields = ignored_fields + ? WHERE id = ?",
          args: [receivedAt, late, clockSkewed, timeRefused, ignoredCount, collector.id],
        },
      );
      await client.batch(statements, "write");
      for (const live of touched) this.settle(live, receivedAt);
      this.trim();
      return answer;
    } catch (error) {
      // The in-memory samples ran ahead of what was stored: forget them so they
      // reload from the last committed state.
      for (const live of touched) this.forget(live);
      throw error;
    }
  }

  /** Checks every row's times against the clock, the floor and the tenant's retention (time-check.ts). */
  private checkTimes(view: DataView, count: number, tenant: TenantSampling, now: number, bounds: IngestTimeBounds) {
    const hourlyDays = tenant.hourlyRetentionDays;
    const expires = bounds.refuseExpired && hourlyDays !== undefined;
    return checkRowTimes(view, count, {
      now,
      floorMs: bounds.floorMs,
      futureToleranceMs: bounds.futureToleranceMs,
      oldestStartMs: expires ? now - hourlyDays * DAY_MS : -Infinity,
      retentionReason: expires
        ? `windows are deleted ${hourlyDays} days after they end (the tenant's hourly retention, hourly_retention_days; fine windows roll up into hourly ones after ${tenant.retentionDays ?? hourlyDays} days, retention_days), so the next retention run would delete this record`
        : "",
      openWindowStart: windowStartOf(now, tenant.windowSeconds),
    });
  }

  /**
   * Adds a refused batch's records to the collector's count. Best effort, one small write:
   * the batch itself is refused whatever happens here.
   */
  private async countRefused(collectorId: number, refused: number): Promise<void> {
    try {
      await this.db.$client.execute({ sql: "UPDATE collectors SET time_refused_records = time_refused_records + ? WHERE id = ?", args: [refused, collectorId] });
    } catch {
      // A busy database must not turn a 400 into a 503: the count is informative only.
    }
  }

  /** The statements that store what one batch changed in one reservoir; assigns seqs to newcomers. */
  private persistStatements(live: Live, now: number): InStatement[] {
    // Aborts the transaction unless the row is still at the version this node holds
    // (trigger in drizzle/0002): a roll-up or import elsewhere may have rewritten it.
    const statements: InStatement[] = [{ sql: "INSERT INTO reservoir_expectations (id, next_seq) VALUES (?, ?)", args: [live.id, live.nextSeq] }];
    const newcomers = [...live.entered];
    const firstSeq = live.nextSeq;
    newcomers.forEach((entry, i) => (entry.item.seq = firstSeq + i));
    if (newcomers.length > 0) {
      const rows = encodeKeptRows(newcomers.map((e) => ({ priority: e.priority, weight: e.weight, record: e.item.record })));
      statements.push({ sql: INSERT_KEPT, args: [live.id, rows, newcomers.length, firstSeq] });
    }
    if (live.evicted.length > 0) statements.push({ sql: DELETE_KEPT, args: [live.id, JSON.stringify(live.evicted)] });
    statements.push({
      sql: "UPDATE reservoirs SET tau = ?, records = ?, bytes = ?, packets = ?, next_seq = ?, updated_at = ? WHERE id = ?",
      args: [live.reservoir.tau, live.records, live.bytes.toString(), live.packets.toString(), firstSeq + newcomers.length, now, live.id],
    });
    return statements;
  }

  private settle(live: Live, now: number): void {
    live.nextSeq += live.entered.size;
    live.entered.clear();
    live.evicted.length = 0;
    live.batchRecords = 0;
    live.pending = false;
    live.lastUsed = now;
  }

  /** The live reservoir of a window, loaded from SQLite or created (an empty row is harmless). */
  private async load(tenant: TenantSampling, collectorId: number, windowStart: number): Promise<Live> {
    const windowSeconds = tenant.windowSeconds;
    const key = `${tenant.id}:${collectorId}:${windowStart}:${windowSeconds}`;
    const cached = this.live.get(key);
    if (cached) return cached;
    const client = this.db.$client;
    const node = this.options.node;
    const keyArgs = [tenant.id, collectorId, windowStart, windowSeconds, node];
    await client.execute({
      sql: "INSERT OR IGNORE INTO reservoirs (tenant_id, collector_id, window_start, window_seconds, node, k, updated_at) VALUES (?, ?, ?, ?, ?, ?, ?)",
      args: [...keyArgs, tenant.sampleSize, Date.now()],
    });
    const found = await client.execute({
      sql: "SELECT id, k, tau, records, bytes, packets, next_seq FROM reservoirs WHERE tenant_id = ? AND collector_id = ? AND window_start = ? AND window_seconds = ? AND node = ?",
      args: keyArgs,
    });
    const row = found.rows[0];
    const id = Number(row.id);
    const kept = await client.execute({ sql: "SELECT seq, data FROM kept_records WHERE reservoir_id = ?", args: [id] });
    const live: Live = {
      id,
      key,
      windowStart,
      windowSeconds,
      records: Number(row.records),
      bytes: BigInt(String(row.bytes)),
      packets: BigInt(String(row.packets)),
      nextSeq: Number(row.next_seq),
      lastUsed: Date.now(),
      entered: new Set(),
      evicted: [],
      batchRecords: 0,
      pending: false,
      reservoir: undefined as unknown as Reservoir<KeptFlow>,
    };
    live.reservoir = Reservoir.restore<KeptFlow>(
      {
        k: Number(row.k),
        tau: Number(row.tau),
        seen: live.records,
        kept: kept.rows.map((r) => {
          const { priority, weight, record } = decodeKeptRow(new Uint8Array(r.data as ArrayBuffer));
          return { item: { seq: Number(r.seq), record }, weight, priority };
        }),
      },
      {
        uniform: this.options.uniform,
        onEvict: (evicted) => {
          // A newcomer of this very batch that is pushed out again never reaches SQLite.
          if (!live.entered.delete(evicted)) live.evicted.push(evicted.item.seq);
        },
      },
    );
    this.live.set(key, live);
    this.liveById.set(id, live);
    return live;
  }

  /** Drops the least recently used live reservoirs beyond the limit. */
  private trim(): void {
    const max = this.options.maxLive ?? 4096;
    if (this.live.size <= max) return;
    const byAge = [...this.live.values()].sort((a, b) => a.lastUsed - b.lastUsed);
    for (const live of byAge.slice(0, this.live.size - max)) this.forget(live);
  }

  /** Frees idempotency keys older than the TTL so they can be used again; keeps the batch rows. */
  private async sweepIdempotencyKeys(now: number): Promise<void> {
    if (now - this.lastSweep < IDEMPOTENCY_SWEEP_EVERY_MS) return;
    this.lastSweep = now;
    const ttl = this.options.idempotencyTtlMs ?? 24 * 3600_000;
    await this.db.$client.execute({
      sql: "UPDATE ingest_batches SET idempotency_key = NULL WHERE idempotency_key IS NOT NULL AND received_at < ?",
      args: [now - ttl],
    });
  }
}

function timesRefused(details: TimesRefusedError["details"], invalidCount: number): TimesRefusedError {
  const error = new Error(`${invalidCount} records refused for their times`) as TimesRefusedError;
  error.code = "weir_times_refused";
  error.details = details;
  error.invalidCount = invalidCount;
  return error;
}

/** True for the abort of the version check in `persistStatements`. */
export function isReservoirChanged(error: unknown): boolean {
  return error instanceof Error && error.message.includes("weir_reservoir_changed");
}
