import type { Db } from "~/db/client.server";
import { keptRowsToColumns } from "~/ingest/kept-codec";
import type { Logger } from "~/logger.server";
import { repeatEvery, type Repeating } from "~/server/repeat.server";
import { packColumns, PACKING_SUPPORTED } from "./packed-columns";

/**
 * Reservoirs packed per step: one read and one short write transaction. The embedded driver
 * runs on the main thread, so each step holds the event loop for its read, decode and write
 * (about 20 ms for 16 reservoirs of k = 1024); requests are served between steps.
 */
const RESERVOIRS_PER_STEP = 16;

/** Reservoirs packed at most in one run; the next run goes on. */
export const MAX_RESERVOIRS_PER_RUN = 2_000;

export interface PackOptions {
  /** Now, epoch ms: a window counts as closed one window length after its end (late records settle first). */
  now: number;
  maxReservoirs?: number;
  /** Returns true once the server is closing: the run stops before its next step. */
  stopped?: () => boolean;
}

export interface PackReport {
  reservoirs: number;
  records: number;
  /** Bytes written to `packed_columns`. */
  bytes: number;
  /** True when closed reservoirs were left for the next run (`maxReservoirs` or `stopped`). */
  partial: boolean;
}

/**
 * Packs the kept records of closed reservoirs (any tenant) whose packed copy is missing or
 * stale, newest windows first, into `packed_columns` (app/query/packed-columns.ts). The copy
 * is written only if the reservoir's `next_seq` is still the one read with its kept records,
 * in the same statement, so a batch that committed in between leaves it unpacked until the
 * next run; the estimate reads a copy only while the two agree. Idempotent, and safe to run
 * on several nodes of one database at once.
 */
export async function packClosedWindows(db: Db, options: PackOptions): Promise<PackReport> {
  const report: PackReport = { reservoirs: 0, records: 0, bytes: 0, partial: false };
  if (!PACKING_SUPPORTED) return report;
  const max = options.maxReservoirs ?? MAX_RESERVOIRS_PER_RUN;
  const found = await db.$client.execute({
    sql:
      "SELECT r.id FROM reservoirs r LEFT JOIN packed_columns p ON p.reservoir_id = r.id " +
      "WHERE r.records > 0 AND r.window_start + 2 * r.window_seconds * 1000 <= ? AND p.next_seq IS NOT r.next_seq " +
      "ORDER BY r.window_start DESC, r.id LIMIT ?",
    args: [options.now, max + 1],
  });
  const ids = found.rows.map((row) => Number(row[0]));
  if (ids.length > max) {
    ids.length = max;
    report.partial = true;
  }
  for (let i = 0; i < ids.length; i += RESERVOIRS_PER_STEP) {
    await new Promise((resolve) => setImmediate(resolve));
    if (options.stopped?.()) return { ...report, partial: true };
    const step = ids.slice(i, i + RESERVOIRS_PER_STEP);
    // next_seq and the kept rows from one statement: one snapshot.
    const read = await db.$client.execute({
      sql:
        "SELECT r.id, r.next_seq, CAST(group_concat(k.data, '') AS BLOB) FROM reservoirs r LEFT JOIN kept_records k ON k.reservoir_id = r.id " +
        `WHERE r.id IN (${step.map(() => "?").join(", ")}) GROUP BY r.id`,
      args: step,
    });
    const writes = read.rows.map((row) => {
      const rows = row[2] === null ? new Uint8Array(0) : new Uint8Array(row[2] as ArrayBuffer);
      const columns = keptRowsToColumns(rows);
      const packed = packColumns(columns);
      report.reservoirs++;
      report.records += columns.length;
      report.bytes += packed.byteLength;
      return {
        sql:
          "INSERT OR REPLACE INTO packed_columns (reservoir_id, next_seq, data) " +
          "SELECT ?1, ?2, ?3 WHERE EXISTS (SELECT 1 FROM reservoirs WHERE id = ?1 AND next_seq = ?2)",
        args: [Number(row[0]), Number(row[1]), packed],
      };
    });
    if (writes.length > 0) await db.$client.batch(writes, "write");
  }
  return report;
}

/**
 * Runs `packClosedWindows` every `intervalMs` (0: never), first after `firstRunDelayMs`; logs
 * what each run packed, and its failures (never thrown: queries read `kept_records` as before).
 */
export function startPackTimer(ctx: { db: Db; logger: Logger }, options: { intervalMs: number; firstRunDelayMs: number; now?: () => number }): Repeating {
  const now = options.now ?? Date.now;
  if (options.intervalMs <= 0) ctx.logger.info("packing of closed windows off (PACK_INTERVAL_SECONDS=0)");
  return repeatEvery(options.intervalMs, options.firstRunDelayMs, async (signal) => {
    const startedAt = performance.now();
    try {
      const report = await packClosedWindows(ctx.db, { now: now(), stopped: () => signal.aborted });
      if (report.reservoirs > 0) ctx.logger.info({ ...report, ms: Math.round(performance.now() - startedAt) }, "closed windows packed for queries");
    } catch (error) {
      ctx.logger.error({ err: error }, "packing closed windows failed; queries read kept_records, and the next run tries again");
    }
  });
}
