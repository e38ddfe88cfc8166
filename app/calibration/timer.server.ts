import type { Db } from "~/db/client.server";
import type { Logger } from "~/logger.server";
import { repeatEvery } from "~/server/repeat.server";
import { runCalibrationChecks, type CalibrationOptions } from "./check.server";

export interface CalibrationTimerOptions extends CalibrationOptions {
  /** Time between the end of one run and the start of the next; 0 turns the timer off. */
  intervalMs: number;
  /** Time from start to the first run, so a restart loop does not hammer the database. */
  firstRunDelayMs?: number;
  /** The clock the checks run against; tests move it ahead of their invented records. */
  now?: () => number;
}

export interface CalibrationTimer {
  /** Clears the timer and waits for a running pass. */
  stop(): Promise<void>;
}

export const FIRST_RUN_DELAY_MS = 60_000;

/**
 * Runs `runCalibrationChecks`, first after `firstRunDelayMs`, then `intervalMs` after each run
 * ends (runs never overlap; a run that stopped at its bound is followed by the next at the
 * usual interval, so a backlog is worked off without starving ingest). A failure is logged,
 * never thrown. The timers are unref'd, so they never keep the process alive by themselves.
 * Scheduled by app/server/repeat.server.ts, as the retention timer is.
 */
export function startCalibrationTimer(ctx: { db: Db; logger: Logger }, options: CalibrationTimerOptions): CalibrationTimer {
  const { db, logger } = ctx;
  const now = options.now ?? Date.now;
  if (options.intervalMs <= 0) logger.info("calibration timer off (CALIBRATION_INTERVAL_MINUTES=0)");
  return repeatEvery(options.intervalMs, options.firstRunDelayMs ?? FIRST_RUN_DELAY_MS, async () => {
    const startedAt = performance.now();
    try {
      const report = await runCalibrationChecks(db, now(), { maxWindows: options.maxWindows });
      if (report.windows > 0 || report.deleted > 0) logger.info({ ...report, ms: Math.round(performance.now() - startedAt) }, "calibration checks");
    } catch (error) {
      logger.error({ err: error }, "calibration checks failed; retrying at the next interval");
    }
  });
}
