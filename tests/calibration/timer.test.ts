import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { Writable } from "node:stream";
import { pino } from "pino";
import { afterAll, beforeAll, describe, expect, it, vi } from "vitest";
import { startCalibrationTimer } from "~/calibration/timer.server";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import { EnvError, parseEnv } from "~/env.server";
import { parseFlowRecord } from "~/flow/record";
import { ReservoirManager } from "~/ingest/manager.server";
import { seededUniform } from "~/sampling/uniform";
import { createTenant, ensureCollector } from "~/tenants.server";

// The calibration timer: runs the checks on its own (no test waits five minutes: the interval
// and first delay are shortened, the clock is given), logs a failed run and carries on, and
// runs no more once stopped. Same shape as the retention timer (tests/retention/timer.test.ts).

const T0 = Date.UTC(2026, 0, 5, 0, 0);

describe("calibration timer", () => {
  let dir: string;
  let db: Db;
  const logged: { msg: string; err?: { message: string }; windows?: number }[] = [];

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-calibration-timer-"));
    db = await createDb(`file:${join(dir, "weir.db")}`);
    await runMigrations(db);
    const tenant = await createTenant(db, { slug: "riverline", sampleSize: 16, windowSeconds: 300 });
    const collector = await ensureCollector(db, tenant.id, "edge-1");
    const records = Array.from({ length: 40 }, (_, i) => {
      const parsed = parseFlowRecord({ src: `198.51.100.${1 + i}`, dst: "203.0.113.8", proto: 6, dport: 443, bytes: 500 + 97 * i, packets: 1 + (i % 5), start: T0 + i * 1000 });
      if (!parsed.ok) throw new Error("test record invalid");
      return parsed.record;
    });
    const manager = new ReservoirManager(db, { node: "node-a", uniform: seededUniform(3) });
    await manager.ingest({ tenant, collector, records, receivedAt: T0 });
    await manager.idle();
  });

  afterAll(() => {
    if (db) closeDb(db);
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it("checks closed windows on its own, survives a failed run, and stops", async () => {
    const lines = new Writable({
      write(chunk, _encoding, done) {
        for (const line of String(chunk).split("\n")) if (line.trim() !== "") logged.push(JSON.parse(line));
        done();
      },
    });
    let clockCalls = 0;
    const timer = startCalibrationTimer(
      { db, logger: pino({ level: "info" }, lines) },
      {
        firstRunDelayMs: 0,
        intervalMs: 20,
        now: () => {
          // The first run fails: the timer must log it and carry on.
          if (clockCalls++ === 0) throw new Error("clock unavailable");
          return T0 + 3_600_000;
        },
      },
    );
    const checks = async () => Number((await db.$client.execute("SELECT count(*) FROM window_checks")).rows[0][0]);
    await vi.waitFor(async () => expect(await checks()).toBe(3), { timeout: 20_000, interval: 25 });
    await timer.stop();
    expect(logged.find((l) => l.msg === "calibration checks failed; retrying at the next interval")?.err?.message).toBe("clock unavailable");
    expect(logged.find((l) => l.msg === "calibration checks")?.windows).toBe(1);
    // Stopped: the clock is asked no more.
    const calls = clockCalls;
    await new Promise((resolve) => setTimeout(resolve, 100));
    expect(clockCalls).toBe(calls);
  });

  it("is off with an interval of 0, and CALIBRATION_INTERVAL_MINUTES defaults to 5 and refuses negatives", async () => {
    let asked = false;
    const timer = startCalibrationTimer(
      { db, logger: pino({ level: "silent" }) },
      { intervalMs: 0, firstRunDelayMs: 0, now: () => ((asked = true), T0) },
    );
    await new Promise((resolve) => setTimeout(resolve, 50));
    await timer.stop();
    expect(asked).toBe(false);
    expect(parseEnv({}).CALIBRATION_INTERVAL_MINUTES).toBe(5);
    expect(parseEnv({ CALIBRATION_INTERVAL_MINUTES: "0" }).CALIBRATION_INTERVAL_MINUTES).toBe(0);
    expect(() => parseEnv({ CALIBRATION_INTERVAL_MINUTES: "-1" })).toThrow(EnvError);
  });
});
