import type { Logger } from "~/logger.server";
import { repeatEvery } from "~/server/repeat.server";
import { retentionChanged, runRetention, type RetentionContext } from "./rollup.server";

export interface RetentionTimerOptions {
  /** Time between the end of one run and the start of the next; 0 turns the timer off. */
  intervalMs: number;
  /** Time from start to the first run: long enough that a restart loop does not hammer the database. */
  firstRunDelayMs?: number;
  /** The clock retention runs against; tests move it ahead of their invented records. */
  now?: () => number;
}

export interface RetentionTimer {
  /** Clears the timer, stops a running pass after its current transaction, and waits for it. */
  stop(): Promise<void>;
}

export const FIRST_RUN_DELAY_MS = 60_000;

/**
 * Runs `runRetention` for every tenant, first after `firstRunDelayMs`, then `intervalMs`
 * after each run ends (runs never overlap), and logs each run's report. A failure is logged,
 * never thrown: the server keeps serving and the next run tries again. The timers are
 * unref'd, so they never keep the process alive by themselves.
 */
export function startRetentionTimer(ctx: RetentionContext & { logger: Logger }, options: RetentionTimerOptions): RetentionTimer {
  const { logger } = ctx;
  const now = options.now ?? Date.now;
  if (options.intervalMs <= 0) logger.info("retention timer off (RETENTION_INTERVAL_MINUTES=0)");
  // A stop aborts the run between transactions (runRetention checks the signal).
  return repeatEvery(options.intervalMs, options.firstRunDelayMs ?? FIRST_RUN_DELAY_MS, async (signal) => {
    const startedAt = performance.now();
    try {
      const reports = await runRetention(ctx, now(), { signal });
      logger.info(
        {
          tenants: reports.length,
          changed: reports.filter((r) => retentionChanged(r) || r.error !== undefined),
          ms: Math.round(performance.now() - startedAt),
        },
        "retention run",
      );
    } catch (error) {
      if (signal.aborted) logger.info("retention run stopped for shutdown; the next start continues it");
      else logger.error({ err: error }, "retention run failed; retrying at the next interval");
    }
  });
}
