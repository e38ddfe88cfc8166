import type { InStatement } from "@libsql/client";
import type { Db } from "~/db/client.server";
import type { FlowRecord } from "~/flow/record";
import { Reservoir, type Kept } from "~/sampling/reservoir";
import type { UniformSource } from "~/sampling/uniform";
import { toColumns, type KeptColumns } from "~/query/columns";
import { decodeKeptRow, encodeKeptRows, KEPT_ROW_BYTES } from "./kept-codec";
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
}

export interface IngestBatch {
  tenant: TenantSampling;
  collector: { id: number; name: string };
  records: readonly FlowRecord[];
  receivedAt: number;
  idempotencyKey?: string;
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
}

// The newcomers of one batch and reservoir arrive as one blob of fixed-size rows
// (kept-codec.ts) with consecutive seqs, and SQL splits it: binding each field
// separately costs about a microsecond per value in the driver.
const INSERT_KEPT =
  "WITH RECURSIVE row(i) AS (SELECT 0 UNION ALL SELECT i + 1 FROM row WHERE i + 1 < ?3) " +
  `INSERT INTO kept_records (reservoir_id, seq, data) SELECT ?1, ?4 + i, substr(?2, i * ${KEPT_ROW_BYTES} + 1, ${KEPT_ROW_BYTES}) FROM row`;
const DELETE_KEPT = "DELETE FROM kept_records WHERE reservoir_id = ?1 AND seq IN (SELECT value FROM json_each(?2))";
const IDEMPOTENCY_SWEEP_EVERY_MS = 60_000;

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

  /** Applies one validated batch and resolves once it is committed. */
  ingest(batch: IngestBatch): Promise<IngestAnswer> {
    const run = this.queue.then(() => this.apply(batch));
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
    const { tenant, collector, receivedAt, idempotencyKey } = batch;
    await this.sweepIdempotencyKeys(receivedAt);
    if (idempotencyKey !== undefined) {
      const prior = await client.execute({
        sql: "SELECT response FROM ingest_batches WHERE tenant_id = ? AND idempotency_key = ?",
        args: [tenant.id, idempotencyKey],
      });
      if (prior.rows.length > 0) return { ...(JSON.parse(String(prior.rows[0].response)) as IngestAnswer), duplicate: true };
    }

    // Group by window first, so each reservoir is loaded once.
    const byWindow = new Map<number, FlowRecord[]>();
    for (const record of batch.records) {
      const start = windowStartOf(record.start ?? receivedAt, tenant.windowSeconds);
      let list = byWindow.get(start);
      if (!list) byWindow.set(start, (list = []));
      list.push(record);
    }
    const touched: Live[] = [];
    for (const windowStart of [...byWindow.keys()].sort((a, b) => a - b)) {
      touched.push(await this.load(tenant, collector.id, windowStart));
    }

    const byBytes = tenant.weightAttribute === "bytes";
    let batchBytes = 0n;
    try {
      touched.forEach((live) => {
        const records = byWindow.get(live.windowStart)!;
        live.pending = true;
        live.batchRecords = records.length;
        for (const record of records) {
          const entry = live.reservoir.offer({ seq: -1, record }, Number(byBytes ? record.bytes : record.packets));
          if (entry) live.entered.add(entry);
          live.bytes += record.bytes;
          live.packets += record.packets;
          batchBytes += record.bytes;
        }
        live.records += records.length;
      });

      const answer: IngestAnswer = {
        accepted: batch.records.length,
        duplicate: false,
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
          sql: "INSERT INTO ingest_batches (tenant_id, collector_id, idempotency_key, received_at, record_count, bytes, response) VALUES (?, ?, ?, ?, ?, ?, ?)",
          args: [tenant.id, collector.id, idempotencyKey ?? null, receivedAt, batch.records.length, batchBytes.toString(), JSON.stringify(answer)],
        },
        { sql: "UPDATE collectors SET last_seen_at = ? WHERE id = ?", args: [receivedAt, collector.id] },
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

  /** The statements that store what one batch changed in one reservoir; assigns seqs to newcomers. */
  private persistStatements(live: Live, now: number): InStatement[] {
    const statements: InStatement[] = [];
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
