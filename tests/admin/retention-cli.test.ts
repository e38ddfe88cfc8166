// `npm run admin -- retention run` as a user runs it: a child process against a temporary
// database that this test fills through the reservoir manager, as a server would.
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { parseFlowRecord, type FlowRecord } from "~/flow/record";
import { ReservoirManager } from "~/ingest/manager.server";
import { seededUniform } from "~/sampling/uniform";
import { ensureCollector, findTenantBySlug } from "~/tenants.server";
import { admin } from "../helpers/admin";

const T0 = Date.UTC(2026, 0, 5, 0, 0);
const HOUR_MS = 3_600_000;
const DAY_MS = 86_400_000;

/** Invented records in documentation space (RFC 5737): `perWindow` in each 5-minute window of `hours` hours from T0. */
function records(hours: number, perWindow: number): FlowRecord[] {
  const u = seededUniform(hours * 1000 + perWindow);
  const out: FlowRecord[] = [];
  for (let w = 0; w < hours * 12; w++) {
    for (let i = 0; i < perWindow; i++) {
      const parsed = parseFlowRecord({
        src: `192.0.2.${1 + Math.floor(u() * 254)}`,
        dst: `198.51.100.${1 + Math.floor(u() * 254)}`,
        proto: 6,
        dport: 443,
        bytes: Math.round(64 / Math.pow(u(), 1 / 1.2)),
        packets: 1 + Math.floor(u() * 9),
        start: T0 + w * 300_000 + Math.floor(u() * 300_000),
      });
      if (!parsed.ok) throw new Error(JSON.stringify(parsed.issues));
      out.push(parsed.record);
    }
  }
  return out;
}

describe("npm run admin -- retention run", () => {
  let dir: string;
  let url: string;
  let db: Db;
  const run = (...args: string[]) => admin(url, args, { NODE_ID: "cli-node" });
  const windowsOf = async (slug: string) => {
    const tenant = (await findTenantBySlug(db, slug))!;
    const found = await db.$client.execute({
      sql: "SELECT window_seconds, node, count(*) AS n, sum(records) AS records FROM reservoirs WHERE tenant_id = ? GROUP BY window_seconds, node ORDER BY window_seconds",
      args: [tenant.id],
    });
    return found.rows.map((r) => ({ windowSeconds: Number(r.window_seconds), node: String(r.node), windows: Number(r.n), records: Number(r.records) }));
  };

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-admin-retention-"));
    url = `file:${join(dir, "weir.db")}`;
    for (const slug of ["riverline", "tributary"]) {
      const made = await run("tenant", "create", slug, "--sample-size", "16", "--retention-days", "30");
      expect(made, made.stderr).toMatchObject({ code: 0 });
    }
    db = await createDb(url);
    const manager = new ReservoirManager(db, { node: "node-1", uniform: seededUniform(9) });
    for (const [slug, hours] of [["riverline", 3], ["tributary", 1]] as const) {
      const tenant = (await findTenantBySlug(db, slug))!;
      const collector = await ensureCollector(db, tenant.id, "edge-1");
      await manager.ingest({ tenant, collector, records: records(hours, 4), receivedAt: T0 });
    }
  });

  afterAll(() => {
    if (db) closeDb(db);
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it("is listed in the help", async () => {
    const help = await run("--help");
    expect(help.code).toBe(0);
    expect(help.stdout).toContain("retention run [--tenant SLUG] [--now ISO-TIME]");
  });

  it("refuses a bad --now or an unknown tenant with exit 2 and one line, changing nothing", async () => {
    const badTime = await run("retention", "run", "--now", "yesterday");
    expect(badTime.code).toBe(2);
    expect(badTime.stderr.trim()).toBe("admin: --now must be an ISO 8601 time with a timezone, e.g. 2026-05-01T00:00:00Z, got 'yesterday'");
    const noZone = await run("retention", "run", "--now", "2026-02-05T00:00:00");
    expect(noZone.code).toBe(2);
    const unknown = await run("retention", "run", "--tenant", "nowhere");
    expect(unknown.code).toBe(2);
    expect(unknown.stderr.trim()).toBe("admin: no tenant 'nowhere' (see: npm run admin -- tenant list)");
    expect(await windowsOf("riverline")).toEqual([{ windowSeconds: 300, node: "node-1", windows: 36, records: 144 }]);
  });

  it("rolls one tenant up as of --now and prints what it did", async () => {
    // Two of riverline's three hours ended 30 days before this instant.
    const now = new Date(T0 + 2 * HOUR_MS + 30 * DAY_MS).toISOString();
    const done = await run("retention", "run", "--tenant", "riverline", "--now", now);
    expect(done.code, done.stderr).toBe(0);
    const lines = done.stdout.trimEnd().split("\n");
    expect(lines).toEqual([
      "Retention as of 2026-02-04 02:00Z (hourly windows written as node cli-node):",
      "riverline  fine windows kept 30 d, hourly windows until 365 d old",
      "  rolled up: 2 hours, 24 fine windows → 2 hourly windows, 32 kept records (hours ended by 2026-01-05 02:00Z)",
      "  deleted:   0 windows, 0 kept records (ended by 2025-02-04 02:00Z)",
    ]);
    // Exact counters carry over exactly: 2 hours × 12 windows × 4 records, and 12 × 4 still fine.
    expect(await windowsOf("riverline")).toEqual([
      { windowSeconds: 300, node: "node-1", windows: 12, records: 48 },
      { windowSeconds: 3600, node: "cli-node", windows: 2, records: 96 },
    ]);
    expect(await windowsOf("tributary")).toEqual([{ windowSeconds: 300, node: "node-1", windows: 12, records: 48 }]);
  });

  it("runs for every tenant without --tenant, deleting what is older than the hourly days", async () => {
    const now = new Date(T0 + 3 * HOUR_MS + 365 * DAY_MS).toISOString();
    const done = await run("retention", "run", "--now", now);
    expect(done.code, done.stderr).toBe(0);
    expect(done.stdout).toMatch(/^riverline {2}fine windows kept 30 d, hourly windows until 365 d old$/m);
    expect(done.stdout).toMatch(/^tributary {2}fine windows kept 30 d, hourly windows until 365 d old$/m);
    // Every window of both tenants ended 365 days before `now`: deleted, not rolled up first.
    expect(done.stdout).toMatch(/^ {2}deleted: {3}14 windows, 80 kept records \(ended by 2026-01-05 03:00Z\)$/m);
    expect(done.stdout).toMatch(/^ {2}deleted: {3}12 windows, 48 kept records \(ended by 2026-01-05 03:00Z\)$/m);
    expect(done.stdout).not.toMatch(/rolled up: [1-9]/);
    expect(await windowsOf("riverline")).toEqual([]);
    expect(await windowsOf("tributary")).toEqual([]);
  });
});
