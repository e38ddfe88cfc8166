import type { InStatement, Transaction } from "@libsql/client";
import { eq } from "drizzle-orm";
import { recordAudit } from "~/audit.server";
import type { Db } from "~/db/client.server";
import { tenants, type Tenant } from "~/db/schema.server";
import type { ReservoirManager } from "~/ingest/manager.server";
import { windowStartOf } from "~/ingest/window";
import type { Logger } from "~/logger.server";
import { deleteWindowsStatement, putWindowStatements, readStoredWindows, stateOf, type StoredWindow, type WindowState } from "~/samples/store.server";
import { rollUpStates } from "~/sampling/rollup";
import { listTenants } from "~/tenants.server";

/**
 * Retention with a roll-up, per tenant:
 *
 * 1. Fine windows (shorter than an hour, dividing it) of every collector and node whose whole
 *    hour ended at least N days ago (`tenants.retention_days`) are merged, per collector and
 *    hour, into one hourly window (together with any hourly window already there), written
 *    under this node. A collector's windows hold disjoint record streams, so this is the
 *    merge of Duffield, Lund, Thorup ("Priority sampling for estimation of arbitrary subset
 *    sums", J. ACM 54(6), 2007): the hourly sample is exactly the one a reservoir over the
 *    whole hour would have kept with the same draws, and its estimates stay unbiased. Exact
 *    counters add up exactly.
 * 2. Every window (any length) that ended at least M days ago (`hourly_retention_days`,
 *    M ≥ N) is deleted. Hours that would be deleted at once are not rolled up first, so with
 *    M = N fine windows are simply deleted.
 *
 * Each transaction is bounded (one collector, at most a day of hours and about
 * MAX_KEPT_PER_TRANSACTION kept records; at most MAX_WINDOWS_PER_DELETE deleted windows) and
 * runs through `manager.exclusive` when the server's manager is given, so none of this node's
 * ingest batches interleaves with it and its live reservoirs reload afterwards.
 */

const HOUR_SECONDS = 3600;
const HOUR_MS = HOUR_SECONDS * 1000;
const DAY_MS = 24 * HOUR_MS;
const MAX_HOURS_PER_TRANSACTION = 24;
// Kept records decoded and rewritten in one write transaction: keeps the write lock short
// (an ingest batch of another process waits for it) and the memory bounded.
const MAX_KEPT_PER_TRANSACTION = 100_000;
const MAX_WINDOWS_PER_DELETE = 1000;

export interface RetentionContext {
  db: Db;
  /** The server's manager; absent in the CLI (another process's ingest is protected by its version check). */
  manager?: Pick<ReservoirManager, "exclusive">;
  /** The node the hourly windows are written under. */
  node: string;
  logger?: Pick<Logger, "error">;
}

export interface RetentionOptions {
  /** Only this tenant (slug). */
  tenant?: string;
  /** Stops between two transactions (server shutdown); the work done so far stays. */
  signal?: AbortSignal;
}

/**
 * What one run did for one tenant. Times are ISO 8601; numbers count reservoirs ("windows")
 * and kept records.
 */
export interface TenantRetentionReport {
  tenant: string;
  /** N: fine windows are kept this many days. */
  fineDays: number;
  /** M: every window is deleted once it ended this many days ago. */
  hourlyDays: number;
  /** Fine windows of hours that ended at or before this instant (now − N days) are rolled up. */
  rollUpBefore: string;
  /** Windows that ended at or before this instant (now − M days) are deleted. */
  deleteBefore: string;
  rolledUp: {
    /** Distinct hours rolled up (over all collectors). */
    hours: number;
    /** Fine windows merged into hourly ones (and removed). */
    fineWindows: number;
    /** Hourly windows written, one per collector and hour. */
    hourlyWindows: number;
    /** Kept records in the hourly windows written. */
    kept: number;
  };
  deleted: {
    /** Windows deleted: expired ones, and empty fine ones (a failed batch's leftovers) in rolled-up hours. */
    windows: number;
    /** Kept records deleted with them. */
    kept: number;
  };
  /** Set when this tenant's run failed; what it did before the failure stays applied. */
  error?: string;
}

export class UnknownTenantError extends Error {
  constructor(readonly slug: string) {
    super(`no tenant '${slug}'`);
    this.name = "UnknownTenantError";
  }
}

/** True when a run changed something for this tenant. */
export function retentionChanged(report: TenantRetentionReport): boolean {
  return report.rolledUp.hourlyWindows > 0 || report.rolledUp.fineWindows > 0 || report.deleted.windows > 0;
}

/**
 * Rolls up and deletes, as of `now` (epoch ms), for every tenant or the one named. A tenant
 * whose run fails is reported with `error` (and logged) and the others still run; an abort
 * through `options.signal` stops the whole run and rejects.
 *
 * @example await runRetention({ db, node: "node-1" }, Date.now())
 *   // [{ tenant: "riverline", fineDays: 30, hourlyDays: 365, …, rolledUp: { hours: 24, fineWindows: 576, hourlyWindows: 48, kept: 49152 }, deleted: { windows: 0, kept: 0 } }]
 */
export async function runRetention(ctx: RetentionContext, now: number, options: RetentionOptions = {}): Promise<TenantRetentionReport[]> {
  let list: Tenant[];
  if (options.tenant !== undefined) {
    const [row] = await ctx.db.select().from(tenants).where(eq(tenants.slug, options.tenant));
    if (!row) throw new UnknownTenantError(options.tenant);
    list = [row];
  } else {
    list = await listTenants(ctx.db);
  }
  const reports: TenantRetentionReport[] = [];
  for (const tenant of list) {
    const report = emptyReport(tenant, now);
    let stopped: unknown;
    try {
      await retainTenant(ctx, tenant, now, report, options.signal);
    } catch (error) {
      if (options.signal?.aborted) stopped = error;
      else {
        report.error = error instanceof Error ? error.message : String(error);
        ctx.logger?.error({ err: error, tenant: tenant.slug }, "retention failed for a tenant");
      }
    }
    // What committed before a failure or a stop is in the ledger too.
    if (retentionChanged(report)) {
      const { rolledUp, deleted } = report;
      await recordAudit(ctx.db, {
        tenantId: tenant.id,
        actor: { id: null, label: "retention" },
        action: "retention.run",
        // Flat fields, so the ledger reads them one by one.
        detail: {
          asOf: new Date(now).toISOString(),
          hoursRolledUp: rolledUp.hours,
          fineWindowsMerged: rolledUp.fineWindows,
          hourlyWindowsWritten: rolledUp.hourlyWindows,
          hourlyKept: rolledUp.kept,
          windowsDeleted: deleted.windows,
          keptDeleted: deleted.kept,
          ...(report.error === undefined ? {} : { error: report.error }),
        },
      });
    }
    reports.push(report);
    if (stopped !== undefined) throw stopped;
  }
  return reports;
}

/** now − M days. M < N cannot be saved (settings); were it in the database anyway, N wins for fine windows. */
function deleteCutoffOf(tenant: Tenant, now: number): number {
  return now - Math.max(tenant.hourlyRetentionDays, tenant.retentionDays) * DAY_MS;
}

function emptyReport(tenant: Tenant, now: number): TenantRetentionReport {
  return {
    tenant: tenant.slug,
    fineDays: tenant.retentionDays,
    hourlyDays: tenant.hourlyRetentionDays,
    rollUpBefore: new Date(now - tenant.retentionDays * DAY_MS).toISOString(),
    deleteBefore: new Date(deleteCutoffOf(tenant, now)).toISOString(),
    rolledUp: { hours: 0, fineWindows: 0, hourlyWindows: 0, kept: 0 },
    deleted: { windows: 0, kept: 0 },
  };
}

async function retainTenant(ctx: RetentionContext, tenant: Tenant, now: number, report: TenantRetentionReport, signal?: AbortSignal): Promise<void> {
  const exclusive = <T>(change: () => Promise<T>) => (ctx.manager ? ctx.manager.exclusive(change) : change());
  const fineCutoff = now - tenant.retentionDays * DAY_MS;
  const deleteCutoff = deleteCutoffOf(tenant, now);

  // Hours that ended at or before the fine cutoff, but after the deletion cutoff: an hour
  // that ends by the deletion cutoff would be deleted right after, so it is not rolled up.
  const rollFrom = windowStartOf(deleteCutoff, HOUR_SECONDS);
  const rollTo = windowStartOf(fineCutoff, HOUR_SECONDS);
  const hours = new Set<number>();
  if (rollFrom < rollTo) {
    for (const chunk of await rollUpChunks(ctx.db, tenant, rollFrom, rollTo)) {
      signal?.throwIfAborted();
      const done = await exclusive(() => inWriteTransaction(ctx.db, (tx) => rollUpChunk(tx, tenant, chunk, ctx.node)));
      for (const hour of done.hours) hours.add(hour);
      report.rolledUp.fineWindows += done.fineWindows;
      report.rolledUp.hourlyWindows += done.hourlyWindows;
      report.rolledUp.kept += done.kept;
      report.deleted.windows += done.emptyDeleted;
      report.rolledUp.hours = hours.size;
    }
  }

  for (;;) {
    signal?.throwIfAborted();
    const done = await exclusive(() => inWriteTransaction(ctx.db, (tx) => deleteExpired(tx, tenant.id, deleteCutoff)));
    report.deleted.windows += done.windows;
    report.deleted.kept += done.kept;
    if (done.windows < MAX_WINDOWS_PER_DELETE) break;
  }
}

/**
 * Runs `work` in one write transaction and commits it: reading the inputs inside the
 * transaction that rewrites them means a batch another process commits meanwhile (which may
 * raise τ and the counters without a new kept record) cannot be lost; it waits for the lock.
 */
async function inWriteTransaction<T>(db: Db, work: (tx: Transaction) => Promise<T>): Promise<T> {
  const tx = await db.$client.transaction("write");
  try {
    const result = await work(tx);
    await tx.commit();
    return result;
  } finally {
    // Rolls back unless committed.
    tx.close();
  }
}

/** One transaction's worth of roll-up: one collector, hours in [from, to). */
interface Chunk {
  collectorId: number;
  from: number;
  to: number;
}

/** A fine window that an hour can be cut into: shorter than an hour and dividing it. */
function isFine(windowSeconds: number): boolean {
  return windowSeconds < HOUR_SECONDS && HOUR_SECONDS % windowSeconds === 0;
}

/**
 * Plans the roll-up of [rollFrom, rollTo) from the rows of its fine windows alone (no kept
 * records read), so a run with nothing to roll up costs one indexed query.
 */
async function rollUpChunks(db: Db, tenant: Tenant, rollFrom: number, rollTo: number): Promise<Chunk[]> {
  const found = await db.$client.execute({
    sql:
      "SELECT collector_id, window_start, window_seconds, k, records FROM reservoirs " +
      "WHERE tenant_id = ? AND window_start >= ? AND window_start < ? AND window_seconds < ? ORDER BY collector_id, window_start",
    args: [tenant.id, rollFrom, rollTo, HOUR_SECONDS],
  });
  // Per collector and hour: a bound on the kept records to read, counting an hourly window
  // already there (from an earlier roll-up) at the tenant's k.
  const groups = new Map<string, { collectorId: number; hour: number; kept: number }>();
  for (const row of found.rows) {
    const collectorId = Number(row[0]);
    if (!isFine(Number(row[2]))) continue;
    const hour = windowStartOf(Number(row[1]), HOUR_SECONDS);
    const key = `${collectorId}:${hour}`;
    let group = groups.get(key);
    if (!group) groups.set(key, (group = { collectorId, hour, kept: hourlySampleSizeOf(tenant) }));
    group.kept += Math.min(Number(row[3]), Number(row[4]));
  }
  const chunks: Chunk[] = [];
  let current: (Chunk & { kept: number }) | undefined;
  // Map order is the query's: by collector, then time.
  for (const group of groups.values()) {
    const fits =
      current !== undefined &&
      current.collectorId === group.collectorId &&
      group.hour + HOUR_MS - current.from <= MAX_HOURS_PER_TRANSACTION * HOUR_MS &&
      current.kept + group.kept <= MAX_KEPT_PER_TRANSACTION;
    if (fits) {
      current!.to = group.hour + HOUR_MS;
      current!.kept += group.kept;
    } else {
      if (current) chunks.push(current);
      current = { collectorId: group.collectorId, from: group.hour, to: group.hour + HOUR_MS, kept: group.kept };
    }
  }
  if (current) chunks.push(current);
  return chunks.map(({ collectorId, from, to }) => ({ collectorId, from, to }));
}

/** Merges each hour of the chunk that has fine windows into one hourly window of `node`. */
async function rollUpChunk(tx: Transaction, tenant: Tenant, chunk: Chunk, node: string) {
  const filter = { from: chunk.from, to: chunk.to, collectorIds: [chunk.collectorId] };
  const fine = (await readStoredWindows(tx, tenant.id, { ...filter, shorterThan: HOUR_SECONDS })).filter((w) => isFine(w.windowSeconds));
  const hourly = await readStoredWindows(tx, tenant.id, { ...filter, windowSeconds: HOUR_SECONDS });
  const byHour = new Map<number, StoredWindow[]>();
  for (const w of fine) {
    const hour = windowStartOf(w.windowStart, HOUR_SECONDS);
    let list = byHour.get(hour);
    if (!list) byHour.set(hour, (list = []));
    list.push(w);
  }
  const writtenAt = Date.now();
  const statements: InStatement[] = [];
  let kept = 0;
  for (const [hour, fineWindows] of byHour) {
    // Earlier roll-ups and hourly windows of other nodes join in: one hourly window per collector and hour remains.
    const inputs = [...hourly.filter((w) => w.windowStart === hour), ...fineWindows];
    const state = rollUpWindowStates(inputs.map(stateOf), hourlySampleSizeOf(tenant));
    const key = { windowStart: hour, windowSeconds: HOUR_SECONDS, node };
    statements.push(...putWindowStatements(tenant.id, chunk.collectorId, key, state, writtenAt));
    // The target row is rewritten in place, not deleted.
    const ids = inputs.filter((w) => !(w.windowSeconds === HOUR_SECONDS && w.node === node)).map((w) => w.id);
    statements.push(deleteWindowsStatement(tenant.id, ids));
    kept += state.kept.length;
  }
  // Fine rows without records (left by a batch that failed after creating them) go too.
  statements.push({
    sql:
      "DELETE FROM reservoirs WHERE tenant_id = ? AND collector_id = ? AND window_start >= ? AND window_start < ? " +
      `AND window_seconds < ${HOUR_SECONDS} AND ${HOUR_SECONDS} % window_seconds = 0 AND records = 0`,
    args: [tenant.id, chunk.collectorId, chunk.from, chunk.to],
  });
  const results = await tx.batch(statements);
  return {
    hours: [...byHour.keys()],
    fineWindows: fine.length,
    hourlyWindows: byHour.size,
    kept,
    emptyDeleted: results.at(-1)!.rowsAffected,
  };
}

/** The hourly sample size K: `tenants.hourly_sample_size`, or the tenant's k when unset. */
export function hourlySampleSizeOf(tenant: Pick<Tenant, "sampleSize" | "hourlySampleSize">): number {
  return tenant.hourlySampleSize ?? tenant.sampleSize;
}

/**
 * One hourly window from its inputs: kept records by `rollUpStates` (valid for K above the
 * inputs' k too), exact counters summed exactly.
 */
export function rollUpWindowStates(inputs: readonly WindowState[], kWanted: number): WindowState {
  const merged = rollUpStates(
    inputs.map((w) => ({ k: w.k, tau: w.tau, seen: w.records, kept: w.kept })),
    kWanted,
  );
  let records = 0;
  let bytes = 0n;
  let packets = 0n;
  for (const w of inputs) {
    records += w.records;
    bytes += w.bytes;
    packets += w.packets;
  }
  return { k: merged.k, tau: merged.tau, records, bytes, packets, kept: merged.kept };
}

/** Deletes up to MAX_WINDOWS_PER_DELETE windows that ended at or before `cutoff`. */
async function deleteExpired(tx: Transaction, tenantId: number, cutoff: number): Promise<{ windows: number; kept: number }> {
  const found = await tx.execute({
    // `window_start < cutoff` lets the (tenant_id, window_start) index narrow the scan.
    sql:
      "SELECT r.id, (SELECT count(*) FROM kept_records k WHERE k.reservoir_id = r.id) FROM reservoirs r " +
      "WHERE r.tenant_id = ? AND r.window_start < ? AND r.window_start + r.window_seconds * 1000 <= ? ORDER BY r.id LIMIT ?",
    args: [tenantId, cutoff, cutoff, MAX_WINDOWS_PER_DELETE],
  });
  if (found.rows.length === 0) return { windows: 0, kept: 0 };
  await tx.execute(deleteWindowsStatement(tenantId, found.rows.map((r) => Number(r[0]))));
  return { windows: found.rows.length, kept: found.rows.reduce((sum, r) => sum + Number(r[1]), 0) };
}
