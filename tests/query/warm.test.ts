// The warm-up after start (app/query/warm.server.ts): the last day's kept records are read into
// the snapshot cache the estimate route uses, bounded, newest first, and answers stay exact.
// Windows that saw at most k records keep them all (τ = 0), so an estimate over them must equal
// the sum of the records sent (Duffield, Lund, Thorup, J. ACM 54(6), 2007: with every record
// kept, ŵ_i = w_i).
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { createApiKey, scopesFor } from "~/auth/api-keys.server";
import { parseEnv } from "~/env.server";
import type { FlowRecord } from "~/flow/record";
import { parseAddress } from "~/net/address";
import { toColumns } from "~/query/columns";
import { SnapshotCache } from "~/query/snapshot-cache";
import { warmRecentWindows } from "~/query/warm.server";
import { startServer, type WeirServer } from "~/server/app.server";
import { createTenant, ensureCollector } from "~/tenants.server";
import { postFlows } from "../helpers/server";

const HOUR_MS = 3600_000;
const K = 16;

function start(databaseUrl: string): Promise<WeirServer> {
  return startServer({
    env: parseEnv({ NODE_ENV: "development", HOST: "127.0.0.1", PORT: "0", DATABASE_URL: databaseUrl, LOG_LEVEL: "silent", RETENTION_INTERVAL_MINUTES: "0", CALIBRATION_INTERVAL_MINUTES: "0" }),
    collect: { ipfixUdpPort: null, netflowUdpPort: null, ipfixTcpPort: null },
  });
}

/** `count` records (documentation addresses, RFC 5737) starting at `at`, bytes 100, 200, … */
function records(count: number, at: number): FlowRecord[] {
  return Array.from({ length: count }, (_, i) => ({
    src: parseAddress("198.51.100.7"),
    dst: parseAddress("203.0.113.9"),
    sport: 40000 + i,
    dport: 443,
    proto: 6,
    bytes: BigInt(100 * (i + 1)),
    packets: 1n,
    start: at + i * 1000,
    end: at + i * 1000 + 500,
    ingressInterface: null,
    egressInterface: null,
    srcAs: null,
    dstAs: null,
  }));
}

const sumBytes = (rs: FlowRecord[]) => rs.reduce((s, r) => s + Number(r.bytes), 0);

describe("warming recent windows after start", () => {
  let dir: string;
  let server: WeirServer;
  let key: string;
  const now = Date.now();
  // A second into the 5-minute window `hours` ago, so each batch below stays in one window.
  const at = (hours: number) => Math.floor((now - hours * HOUR_MS) / 300_000) * 300_000 + 1000;
  // Two recent windows of tenant "warm-a" (the newest with fewer records), an old one (30 h ago), one recent of "warm-b".
  const newest = records(5, at(1));
  const recent = records(K, at(2));
  const old = records(K, at(30));
  const other = records(3, at(3));

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-warm-"));
    const url = `file:${join(dir, "weir.db")}`;
    const first = await start(url);
    const a = await createTenant(first.db, { slug: "warm-a", sampleSize: K, windowSeconds: 300 });
    const b = await createTenant(first.db, { slug: "warm-b", sampleSize: K, windowSeconds: 300 });
    const ca = await ensureCollector(first.db, a.id, "edge-1");
    const cb = await ensureCollector(first.db, b.id, "edge-1");
    ({ key } = await createApiKey(first.db, { tenantId: a.id, collectorId: ca.id, scopes: scopesFor("both") }));
    for (const batch of [old, recent, newest]) await first.manager.ingest({ tenant: a, collector: ca, records: batch, receivedAt: now });
    await first.manager.ingest({ tenant: b, collector: cb, records: other, receivedAt: now });
    await first.close();
    // A new server on the same database: nothing live, nothing cached but what it warms.
    server = await start(url);
  }, 60_000);

  afterAll(async () => {
    await server?.close();
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it("reads every tenant's windows of the last day into the server's cache, and not older ones", async () => {
    const report = await server.warmed;
    expect(report).toEqual({ reservoirs: 3, records: newest.length + recent.length + other.length, partial: false });
    expect(server.snapshots.size).toBe(3);
    expect(server.snapshots.records).toBe(newest.length + recent.length + other.length);
  });

  it("answers from the warmed cache with the exact sum where every record was kept, and sees a record added since", async () => {
    await server.warmed;
    const ask = async () => {
      const res = await fetch(`${server.url}/api/v1/estimate`, {
        method: "POST",
        headers: { authorization: `Bearer ${key}`, "content-type": "application/json" },
        body: JSON.stringify({ from: now - 4 * HOUR_MS, to: now + HOUR_MS, where: {}, metric: "bytes" }),
      });
      expect(res.status).toBe(200);
      return (await res.json()) as { estimate: number; ci95: [number, number] };
    };
    const before = await ask();
    expect(before.estimate).toBe(sumBytes(newest) + sumBytes(recent));
    expect(before.ci95).toEqual([before.estimate, before.estimate]);
    expect(server.snapshots.size).toBe(3); // served from the warmed entries: nothing else was read

    // One more record in the newest window: its cache entry is stale (next_seq moved) and not used.
    const added = { src: "198.51.100.8", dst: "203.0.113.9", sport: 41000, dport: 443, proto: 6, bytes: 777, packets: 1, start: at(1) + 30_000 };
    expect((await postFlows(server.url, key, JSON.stringify([added]))).status).toBe(200);
    expect((await ask()).estimate).toBe(before.estimate + 777);
  });

  it("fills the very cache the estimate route reads (one cache, handed over in the load context)", async () => {
    await server.warmed;
    const { rows } = await server.db.$client.execute({ sql: "SELECT id, next_seq FROM reservoirs WHERE window_start = ?", args: [Math.floor(at(2) / 300_000) * 300_000] });
    expect(rows).toHaveLength(1);
    // A marked entry for the reservoir `recent` went to: every byte count doubled. The route answers from it only if it shares the cache.
    const marked = toColumns(recent.map((r) => ({ weight: 2 * Number(r.bytes), record: { ...r, bytes: 2n * r.bytes } })));
    server.snapshots.set(Number(rows[0].id), Number(rows[0].next_seq), marked);
    const res = await fetch(`${server.url}/api/v1/estimate`, {
      method: "POST",
      headers: { authorization: `Bearer ${key}`, "content-type": "application/json" },
      body: JSON.stringify({ from: at(2) - 1000, to: at(2) + 299_000, where: {}, metric: "bytes" }),
    });
    expect(res.status).toBe(200);
    expect(((await res.json()) as { estimate: number }).estimate).toBe(2 * sumBytes(recent));
  });

  it("stops at its bound on kept records, newest windows first", async () => {
    const snapshots = new SnapshotCache();
    const report = await warmRecentWindows({ db: server.db, manager: { liveColumns: () => undefined }, snapshots }, { now, maxRecords: newest.length + 1 });
    expect(report.partial).toBe(true);
    expect(report.reservoirs).toBe(1);
    // The newest window holds `newest` (plus the record added above, when that test ran first).
    expect(snapshots.size).toBe(1);
    expect(snapshots.records).toBeLessThanOrEqual(newest.length + 1);
  });
});
