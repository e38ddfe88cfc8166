import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import jStat from "jstat";
import { afterEach, describe, expect, it } from "vitest";
import { runCalibrationChecks, type CalibrationMetric } from "~/calibration/check.server";
import { calibrationReport } from "~/calibration/report.server";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import { windowChecks, type Tenant, type WindowCheck } from "~/db/schema.server";
import type { FlowRecord } from "~/flow/record";
import { ReservoirManager } from "~/ingest/manager.server";
import { createMerge } from "~/merges/merges.server";
import { parseAddress } from "~/net/address";
import { seededUniform, type UniformSource } from "~/sampling/uniform";
import { createTenant, ensureCollector } from "~/tenants.server";

// The calibration checks (app/calibration/check.server.ts) on generated streams whose every
// record the test knows, so each window's true totals are computed here, from the records,
// not from Weir's counters. Priority sampling: Duffield, Lund, Thorup, J. ACM 54(6), 2007.

const WINDOW_SECONDS = 300;
const WINDOW_MS = WINDOW_SECONDS * 1000;
const DAY_MS = 86_400_000;
/** The clock the checks run against: every window below lies before it. */
const NOW = Date.UTC(2026, 5, 1, 12, 0);

let opened: { db: Db; dir: string; managers: ReservoirManager[] }[] = [];

async function openDb(): Promise<Db> {
  const dir = mkdtempSync(join(tmpdir(), "weir-calibration-"));
  const db = await createDb(`file:${join(dir, "weir.db")}`);
  await runMigrations(db);
  opened.push({ db, dir, managers: [] });
  return db;
}

function managerOf(db: Db, node: string, uniform: UniformSource): ReservoirManager {
  const manager = new ReservoirManager(db, { node, uniform });
  opened.find((o) => o.db === db)!.managers.push(manager);
  return manager;
}

afterEach(async () => {
  for (const { db, dir, managers } of opened) {
    for (const m of managers) await m.idle();
    closeDb(db);
    rmSync(dir, { recursive: true, force: true });
  }
  opened = [];
});

/**
 * Invented records in documentation space (RFC 5737) in one window: bytes Pareto with shape
 * 1.2 (a few flows carry most bytes; common practice for modelling flow sizes), packets from a
 * packet size in 64–1500 bytes.
 */
function windowRecords(u: UniformSource, n: number, windowStart: number): FlowRecord[] {
  return Array.from({ length: n }, () => {
    const bytes = Math.min(2 ** 40, Math.max(40, Math.round(40 / Math.pow(u(), 1 / 1.2))));
    const start = windowStart + Math.floor(u() * WINDOW_MS);
    return {
      src: parseAddress(`198.51.100.${Math.floor(u() * 256)}`),
      dst: parseAddress(`203.0.113.${Math.floor(u() * 256)}`),
      sport: 1024 + Math.floor(u() * 60_000),
      dport: 443,
      proto: 6,
      bytes: BigInt(bytes),
      packets: BigInt(Math.max(1, Math.ceil(bytes / (64 + Math.floor(u() * 1437))))),
      start,
      end: start + 1000,
      ingressInterface: null,
      egressInterface: null,
      srcAs: null,
      dstAs: null,
    };
  });
}

/** True totals of a window, from the records themselves. */
function truthOf(records: readonly FlowRecord[]): Record<CalibrationMetric, bigint> {
  return {
    bytes: records.reduce((s, r) => s + r.bytes, 0n),
    packets: records.reduce((s, r) => s + r.packets, 0n),
    flows: BigInt(records.length),
  };
}

/** Feeds `records` of one collector through `manager`, received at `NOW`'s past. */
async function feed(manager: ReservoirManager, tenant: Tenant, collector: { id: number; name: string }, records: FlowRecord[]): Promise<void> {
  for (let i = 0; i < records.length; i += 5000) await manager.ingest({ tenant, collector, records: records.slice(i, i + 5000), receivedAt: NOW - 60 * DAY_MS });
}

async function allChecks(db: Db): Promise<WindowCheck[]> {
  return db.select().from(windowChecks);
}

const key = (collectorId: number, windowStart: number) => `${collectorId}@${windowStart}`;

describe("runCalibrationChecks", () => {
  it("covers every window with τ = 0 (no more records than k) with a zero-width interval at the exact total, summing the nodes' reservoirs", async () => {
    // With at most k records a reservoir keeps them all and τ = 0: every estimate is exact
    // (DLT 2007, §2), so the interval is the point itself and must equal the truth.
    const db = await openDb();
    const tenant = await createTenant(db, { slug: "riverline", sampleSize: 64, windowSeconds: WINDOW_SECONDS });
    const nodeA = managerOf(db, "node-a", seededUniform(11));
    const nodeB = managerOf(db, "node-b", seededUniform(12));
    const u = seededUniform(1);
    const truth = new Map<string, Record<CalibrationMetric, bigint>>();
    for (const name of ["edge-1", "edge-2"]) {
      const collector = await ensureCollector(db, tenant.id, name);
      for (let w = 0; w < 4; w++) {
        const start = NOW - DAY_MS / 2 + w * WINDOW_MS;
        const records = windowRecords(u, 40, start);
        truth.set(key(collector.id, start), truthOf(records));
        // edge-1 is sampled by two nodes at once, 20 records each: the window's answer is their sum.
        if (name === "edge-1") {
          await feed(nodeA, tenant, collector, records.slice(0, 20));
          await feed(nodeB, tenant, collector, records.slice(20));
        } else {
          await feed(nodeA, tenant, collector, records);
        }
      }
    }

    const report = await runCalibrationChecks(db, NOW);
    expect(report).toEqual({ windows: 8, rows: 24, deleted: 0, more: false });
    const rows = await allChecks(db);
    expect(rows).toHaveLength(24);
    for (const row of rows) {
      const exact = truth.get(key(row.collectorId, row.windowStart))![row.metric as CalibrationMetric];
      expect(row.exact, `${row.metric} of window ${row.windowStart}`).toBe(exact.toString());
      expect(row.estimate).toBe(Number(exact));
      expect(row.low).toBe(Number(exact));
      expect(row.high).toBe(Number(exact));
      expect(row.covered).toBe(true);
      expect(row.checkedAt).toBe(NOW);
    }
    // Checked once: a second run finds nothing new.
    expect(await runCalibrationChecks(db, NOW + DAY_MS)).toEqual({ windows: 0, rows: 0, deleted: 0, more: false });
  });

  it("checks a window only once its end plus one window length has passed", async () => {
    const db = await openDb();
    const tenant = await createTenant(db, { slug: "riverline", sampleSize: 16, windowSeconds: WINDOW_SECONDS });
    const collector = await ensureCollector(db, tenant.id, "edge-1");
    const start = NOW - DAY_MS;
    await feed(managerOf(db, "node-a", seededUniform(3)), tenant, collector, windowRecords(seededUniform(2), 50, start));
    const graceEnds = start + 2 * WINDOW_MS;
    expect((await runCalibrationChecks(db, graceEnds - 1)).windows).toBe(0);
    expect((await runCalibrationChecks(db, graceEnds)).windows).toBe(1);
  });

  it("checks at most maxWindows windows a run, oldest first, and works a backlog off over several runs", async () => {
    const db = await openDb();
    const tenant = await createTenant(db, { slug: "riverline", sampleSize: 16, windowSeconds: WINDOW_SECONDS });
    const manager = managerOf(db, "node-a", seededUniform(5));
    const u = seededUniform(4);
    const starts: number[] = [];
    for (const name of ["edge-1", "edge-2"]) {
      const collector = await ensureCollector(db, tenant.id, name);
      for (let w = 0; w < 6; w++) {
        // The collectors' windows interleave in time.
        const start = NOW - DAY_MS + (2 * w + (name === "edge-1" ? 0 : 1)) * WINDOW_MS;
        starts.push(start);
        await feed(manager, tenant, collector, windowRecords(u, 30, start));
      }
    }
    starts.sort((a, b) => a - b);
    const runs = [];
    for (let i = 0; i < 4; i++) runs.push(await runCalibrationChecks(db, NOW, { maxWindows: 5 }));
    expect(runs.map((r) => [r.windows, r.more])).toEqual([
      [5, true],
      [5, true],
      [2, false],
      [0, false],
    ]);
    expect(await allChecks(db)).toHaveLength(12 * 3);
    // Oldest first: from scratch, one run of five takes the five oldest windows of both collectors.
    await db.delete(windowChecks);
    await runCalibrationChecks(db, NOW, { maxWindows: 5 });
    expect([...new Set((await allChecks(db)).map((r) => r.windowStart))].sort((a, b) => a - b)).toEqual(starts.slice(0, 5));
  });

  it("deletes checks of windows past the tenant's hourly retention and does not check such windows", async () => {
    const db = await openDb();
    const tenant = await createTenant(db, { slug: "riverline", sampleSize: 16, windowSeconds: WINDOW_SECONDS, retentionDays: 1, hourlyRetentionDays: 2 });
    const collector = await ensureCollector(db, tenant.id, "edge-1");
    const manager = managerOf(db, "node-a", seededUniform(7));
    const u = seededUniform(6);
    const old = NOW - 3 * DAY_MS;
    const recent = NOW - DAY_MS / 2;
    await feed(manager, tenant, collector, [...windowRecords(u, 30, old), ...windowRecords(u, 30, recent)]);
    expect(await runCalibrationChecks(db, NOW)).toEqual({ windows: 1, rows: 3, deleted: 0, more: false });
    expect(new Set((await allChecks(db)).map((r) => r.windowStart))).toEqual(new Set([recent]));
    // Two days after the recent window ended its checks go, and it is not checked again.
    const later = recent + WINDOW_MS + 2 * DAY_MS;
    expect(await runCalibrationChecks(db, later)).toEqual({ windows: 0, rows: 0, deleted: 3, more: false });
    expect(await allChecks(db)).toHaveLength(0);
  });

  it("checks a merged collector like any other, against the sum of its inputs' exact totals", async () => {
    const db = await openDb();
    const tenant = await createTenant(db, { slug: "riverline", sampleSize: 16, windowSeconds: WINDOW_SECONDS });
    const manager = managerOf(db, "node-a", seededUniform(9));
    const u = seededUniform(8);
    const start = NOW - DAY_MS / 2;
    const all: FlowRecord[] = [];
    for (const name of ["edge-1", "edge-2"]) {
      const records = windowRecords(u, 100, start);
      all.push(...records);
      await feed(manager, tenant, await ensureCollector(db, tenant.id, name), records);
    }
    await createMerge(
      { db, manager, node: "node-a" },
      tenant,
      { name: "both-edges", collectors: ["edge-1", "edge-2"], from: start, to: start + WINDOW_MS, preview: false },
      { id: null, label: "test" },
    );
    const merged = await ensureMergedId(db, tenant.id, "both-edges");
    expect(await runCalibrationChecks(db, NOW)).toMatchObject({ windows: 3, rows: 9 });
    const rows = (await allChecks(db)).filter((r) => r.collectorId === merged);
    const truth = truthOf(all);
    expect(rows.map((r) => [r.metric, r.exact]).sort()).toEqual(
      [
        ["bytes", truth.bytes.toString()],
        ["flows", truth.flows.toString()],
        ["packets", truth.packets.toString()],
      ],
    );
    for (const r of rows) expect(r.covered).toBe(r.low <= Number(r.exact) && Number(r.exact) <= r.high);
  });
});

async function ensureMergedId(db: Db, tenantId: number, name: string): Promise<number> {
  const found = await db.$client.execute({ sql: "SELECT id, kind FROM collectors WHERE tenant_id = ? AND name = ?", args: [tenantId, name] });
  expect(String(found.rows[0][1])).toBe("merge");
  return Number(found.rows[0][0]);
}

describe("calibrationReport on a seeded heavy-tailed stream", () => {
  it("reports per period and metric the windows checked and covered, counted here from the rows and the true totals, with Wilson's interval", async () => {
    const db = await openDb();
    const tenant = await createTenant(db, { slug: "riverline", sampleSize: 32, windowSeconds: WINDOW_SECONDS });
    const collector = await ensureCollector(db, tenant.id, "edge-1");
    const manager = managerOf(db, "node-a", seededUniform(2006));
    const u = seededUniform(1927);
    const truth = new Map<number, Record<CalibrationMetric, bigint>>();
    // 150 windows in the last day, 150 three days back, 100 twenty days back: 400 windows of 200 records.
    const starts = [
      ...Array.from({ length: 150 }, (_, i) => NOW - 2 * WINDOW_MS - i * WINDOW_MS),
      ...Array.from({ length: 150 }, (_, i) => NOW - 3 * DAY_MS - i * WINDOW_MS),
      ...Array.from({ length: 100 }, (_, i) => NOW - 20 * DAY_MS - i * WINDOW_MS),
    ];
    const records: FlowRecord[] = [];
    for (const start of starts) {
      const mine = windowRecords(u, 200, start);
      truth.set(start, truthOf(mine));
      records.push(...mine);
    }
    await feed(manager, tenant, collector, records);

    expect(await runCalibrationChecks(db, NOW)).toEqual({ windows: 400, rows: 1200, deleted: 0, more: false });
    const rows = await allChecks(db);

    // Each row against the truth computed from the records, and coverage counted from that truth.
    const z = jStat.normal.inv(0.975, 0, 1);
    const report = await calibrationReport(db, tenant, NOW);
    for (const [period, days] of [["day", 1], ["week", 7], ["month", 30]] as const) {
      const p = report.periods.find((x) => x.period === period)!;
      for (const metric of ["bytes", "packets", "flows"] as const) {
        let checked = 0;
        let covered = 0;
        for (const row of rows) {
          if (row.metric !== metric) continue;
          const exact = truth.get(row.windowStart)![metric];
          expect(row.exact).toBe(exact.toString());
          const end = row.windowStart + WINDOW_MS;
          if (end <= NOW - days * DAY_MS || end > NOW) continue;
          checked++;
          const holds = row.low <= Number(exact) && Number(exact) <= row.high;
          expect(row.covered).toBe(holds);
          // No cap at the exact total: a capped interval would end exactly there whenever it covered.
          if (row.low < row.high) expect(row.high).not.toBe(Number(exact));
          if (holds) covered++;
        }
        // Wilson (JASA 22, 1927): (p̂ + z²/2n ± z·√(p̂(1 − p̂)/n + z²/4n²)) / (1 + z²/n).
        const ph = covered / checked;
        const centre = (ph + (z * z) / (2 * checked)) / (1 + (z * z) / checked);
        const half = (z * Math.sqrt((ph * (1 - ph)) / checked + (z * z) / (4 * checked * checked))) / (1 + (z * z) / checked);
        const expected = { metric, checked, covered, coverage: ph };
        const all = p.overall.find((r) => r.metric === metric)!;
        const one = p.rows.find((r) => r.metric === metric && r.collector === "edge-1" && r.windowSeconds === WINDOW_SECONDS)!;
        for (const got of [all, one]) {
          expect(got, `${period} ${metric}`).toMatchObject(expected);
          expect(got.coverage95[0]).toBeCloseTo(centre - half, 12);
          expect(got.coverage95[1]).toBeCloseTo(centre + half, 12);
          expect(got.consistent).toBe(centre - half <= 0.95 && 0.95 <= centre + half);
          expect(Object.values(got.methods).reduce((s, n) => s + n, 0)).toBe(checked);
        }
      }
      expect(p.overall.find((r) => r.metric === "bytes")!.checked).toBe({ day: 150, week: 300, month: 400 }[period]);
    }
  });
});
