import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { Writable } from "node:stream";
import { pino } from "pino";
import { afterAll, beforeAll, describe, expect, it, vi } from "vitest";
import { parseEnv } from "~/env.server";
import { startServer, type WeirServer } from "~/server/app.server";
import { seededUniform } from "~/sampling/uniform";
import { postFlows, tenantWithKey } from "../helpers/server";

// The server's retention timer: it runs the roll-up on its own, logs each run's report with
// pino, survives a failing run, and stops with the server. The interval and first delay are
// shortened and the clock is moved past the records' retention, so no test waits an hour.

const T0 = Date.UTC(2026, 0, 5, 0, 0);
const HOUR_MS = 3_600_000;
const DAY_MS = 86_400_000;

describe("retention timer in the server", () => {
  let dir: string;
  let server: WeirServer;
  const logged: { msg: string; err?: { message: string }; changed?: { tenant: string; rolledUp: { hourlyWindows: number } }[] }[] = [];
  let clockCalls = 0;

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-retention-timer-"));
    const lines = new Writable({
      write(chunk, _encoding, done) {
        for (const line of String(chunk).split("\n")) if (line.trim() !== "") logged.push(JSON.parse(line));
        done();
      },
    });
    server = await startServer({
      env: parseEnv({ NODE_ENV: "development", HOST: "127.0.0.1", PORT: "0", IPFIX_UDP_PORT: "0", NETFLOW_UDP_PORT: "0", IPFIX_TCP_PORT: "0", DATABASE_URL: `file:${join(dir, "weir.db")}`, RETENTION_INTERVAL_MINUTES: "60" }),
      logger: pino({ level: "info" }, lines),
      uniform: seededUniform(3),
      // Ingest checks flow times against this clock: an hour after the invented records, whenever the test runs.
      now: () => T0 + HOUR_MS,
      retention: {
        firstRunDelayMs: 0,
        intervalMs: 20,
        now: () => {
          // The first run fails: the server must log it and carry on.
          if (clockCalls++ === 0) throw new Error("clock unavailable");
          return T0 + HOUR_MS + 30 * DAY_MS;
        },
      },
    });
  });

  afterAll(async () => {
    await server?.close();
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it("rolls up on its own, logs the report, and keeps running after a failed run", async () => {
    const { tenant, key } = await tenantWithKey(server, "riverline", { sampleSize: 16, windowSeconds: 300 });
    const records = Array.from({ length: 60 }, (_, i) => ({
      src: `198.51.100.${1 + (i % 200)}`,
      dst: "203.0.113.8",
      proto: 6,
      dport: 443,
      bytes: 500 + 97 * i,
      packets: 1 + (i % 5),
      start: T0 + i * 60_000,
    }));
    expect((await postFlows(server.url, key, JSON.stringify(records))).status).toBe(200);

    const hourly = async () =>
      (await server.db.$client.execute({ sql: "SELECT window_seconds, records FROM reservoirs WHERE tenant_id = ?", args: [tenant.id] })).rows;
    await vi.waitFor(
      async () => {
        expect(await hourly()).toEqual([{ window_seconds: 3600, records: 60 }]);
      },
      { timeout: 20_000, interval: 25 },
    );

    const failure = logged.find((l) => l.msg === "retention run failed; retrying at the next interval");
    expect(failure?.err?.message).toBe("clock unavailable");
    await vi.waitFor(() => expect(logged.some((l) => l.msg === "retention run" && l.changed?.some((c) => c.tenant === "riverline"))).toBe(true), {
      timeout: 20_000,
      interval: 25,
    });
    const report = logged.find((l) => l.msg === "retention run" && l.changed?.some((c) => c.tenant === "riverline"))!;
    expect(report.changed).toEqual([expect.objectContaining({ tenant: "riverline", rolledUp: { hours: 1, fineWindows: 12, hourlyWindows: 1, kept: 16 } })]);
    const ledger = await server.db.$client.execute({ sql: "SELECT actor FROM audit_log WHERE tenant_id = ? AND action = 'retention.run'", args: [tenant.id] });
    expect(ledger.rows.map((r) => r.actor)).toEqual(["retention"]);
  });
});
