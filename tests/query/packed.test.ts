// Packing closed windows (app/query/pack.server.ts) and reading them packed (the estimate's
// keptSelect): a query answers the same with and without the packed copy, reads the copy
// when it is current, ignores it once the reservoir changed, and a packing run never writes a
// copy of a kept set that changed while it ran. Every server here is new on its database with
// its warm-up off, so each answer is read from SQLite, not from memory.
// Windows that saw at most k records keep them all (τ = 0): their estimates must equal the
// sums of the records sent (Duffield, Lund, Thorup, J. ACM 54(6), 2007: with every record
// kept, ŵ_i = w_i), computed here from the records.
import { copyFileSync, mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { createApiKey, scopesFor } from "~/auth/api-keys.server";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { parseEnv } from "~/env.server";
import type { FlowRecord } from "~/flow/record";
import { parseAddress } from "~/net/address";
import { packClosedWindows } from "~/query/pack.server";
import { PACKED_BYTES_PER_RECORD } from "~/query/packed-columns";
import { startServer, type WeirServer } from "~/server/app.server";
import { createTenant, ensureCollector } from "~/tenants.server";
import { postFlows } from "../helpers/server";

const HOUR_MS = 3600_000;
const WINDOW_MS = 300_000;
const K = 16;

function start(databaseUrl: string): Promise<WeirServer> {
  return startServer({
    env: parseEnv({
      NODE_ENV: "development",
      HOST: "127.0.0.1",
      PORT: "0",
      DATABASE_URL: databaseUrl,
      LOG_LEVEL: "silent",
      RETENTION_INTERVAL_MINUTES: "0",
      CALIBRATION_INTERVAL_MINUTES: "0",
      PACK_INTERVAL_SECONDS: "0",
      INGEST_REFUSE_EXPIRED: "false",
    }),
    collect: { ipfixUdpPort: null, netflowUdpPort: null, ipfixTcpPort: null },
    warm: false,
  });
}

// Documentation space (RFC 5737, RFC 3849) and AS numbers of RFC 5398.
const SOURCES = ["198.51.100.7", "192.0.2.33", "2001:db8::5"];

/** `count` records starting at `at`: bytes 100, 200, …; packets 1, 2, …; sources, ports and AS numbers cycling. */
function records(count: number, at: number): FlowRecord[] {
  return Array.from({ length: count }, (_, i) => ({
    src: parseAddress(SOURCES[i % SOURCES.length]),
    dst: parseAddress(i % 2 === 0 ? "203.0.113.9" : "2001:db8:1::9"),
    sport: 40000 + i,
    dport: i % 3 === 0 ? 53 : 443,
    proto: i % 3 === 0 ? 17 : 6,
    bytes: BigInt(100 * (i + 1)),
    packets: BigInt(i + 1),
    start: at + i * 1000,
    end: at + i * 1000 + 500,
    ingressInterface: i % 2 === 0 ? 7 : null,
    egressInterface: null,
    srcAs: i % 2 === 0 ? 64500 : 65540,
    dstAs: null,
  }));
}

const sum = (rs: FlowRecord[], f: (r: FlowRecord) => bigint) => rs.reduce((s, r) => s + Number(f(r)), 0);

describe("packed closed windows", () => {
  let dir: string;
  let url: string;
  let key: string;
  const now = Date.now();
  // A second into the 5-minute window `hours` ago, so each batch stays in one window.
  const at = (hours: number) => Math.floor((now - hours * HOUR_MS) / WINDOW_MS) * WINDOW_MS + 1000;
  const exactWindow = records(5, at(3)); // τ = 0
  const sampledWindow = records(40, at(2)); // τ > 0
  const fullWindow = records(K, at(1)); // exactly k: τ = 0
  const openWindow = records(3, Math.floor(now / WINDOW_MS) * WINDOW_MS + 1000); // still open: never packed
  const range = { from: now - 4 * HOUR_MS, to: now + HOUR_MS };
  const questions = [
    { ...range, where: {}, metric: "bytes" },
    { ...range, where: {}, metric: "packets", groupBy: "window" },
    { ...range, where: { src: ["198.51.100.0/24"], dport: [443] }, groupBy: "dst", prefixLength: 24 },
    { ...range, where: { srcAs: [64500], inIf: [7] }, metric: "flows" },
    { ...range, where: { src: ["2001:db8::/32"] }, groupBy: "proto" },
  ];
  let unpacked: unknown[];

  async function ask(server: WeirServer, body: object) {
    const res = await fetch(`${server.url}/api/v1/estimate`, {
      method: "POST",
      headers: { authorization: `Bearer ${key}`, "content-type": "application/json" },
      body: JSON.stringify(body),
    });
    expect(res.status).toBe(200);
    return (await res.json()) as { estimate: number; stdError: number; ci95: [number, number] };
  }

  async function withServer<T>(databaseUrl: string, work: (server: WeirServer) => Promise<T>): Promise<T> {
    const server = await start(databaseUrl);
    try {
      return await work(server);
    } finally {
      await server.close();
    }
  }

  async function withDb<T>(databaseUrl: string, work: (db: Db) => Promise<T>): Promise<T> {
    const db = await createDb(databaseUrl);
    try {
      return await work(db);
    } finally {
      closeDb(db);
    }
  }

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-packed-"));
    url = `file:${join(dir, "weir.db")}`;
    await withServer(url, async (server) => {
      const tenant = await createTenant(server.db, { slug: "packed", sampleSize: K, windowSeconds: 300 });
      const collector = await ensureCollector(server.db, tenant.id, "edge-1");
      ({ key } = await createApiKey(server.db, { tenantId: tenant.id, collectorId: collector.id, scopes: scopesFor("both") }));
      for (const batch of [exactWindow, sampledWindow, fullWindow, openWindow]) {
        await server.manager.ingest({ tenant, collector, records: batch, receivedAt: now });
      }
    });
    // Nothing packed yet: every answer below is read row by row from kept_records.
    unpacked = await withServer(url, (server) => Promise.all(questions.map((q) => ask(server, q))));
  }, 60_000);

  afterAll(() => {
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it("packs the closed windows only, newest first, one blob of 8 + 86 bytes per kept record each", async () => {
    const report = await withDb(url, (db) => packClosedWindows(db, { now }));
    const keptInClosed = exactWindow.length + K + fullWindow.length;
    expect(report).toEqual({ reservoirs: 3, records: keptInClosed, bytes: 3 * 8 + keptInClosed * PACKED_BYTES_PER_RECORD, partial: false });
    const rows = await withDb(url, async (db) =>
      (await db.$client.execute("SELECT r.window_start, length(p.data) FROM packed_columns p JOIN reservoirs r ON r.id = p.reservoir_id AND r.next_seq = p.next_seq ORDER BY 1")).rows,
    );
    expect(rows.map((r) => [Number(r[0]), Number(r[1])])).toEqual(
      [exactWindow, sampledWindow, fullWindow].map((w) => [Math.floor(w[0].start! / WINDOW_MS) * WINDOW_MS, 8 + Math.min(w.length, K) * PACKED_BYTES_PER_RECORD]),
    );
    // A second run finds nothing to do.
    expect(await withDb(url, (db) => packClosedWindows(db, { now }))).toEqual({ reservoirs: 0, records: 0, bytes: 0, partial: false });
  });

  it("answers every question exactly as the unpacked rows did, and the exact windows with the sums of the records sent", async () => {
    const packed = await withServer(url, (server) => Promise.all(questions.map((q) => ask(server, q))));
    expect(packed).toEqual(unpacked);
    // τ = 0 in the windows asked about below: the estimate is the exact sum, ± 0.
    const exactRange = { from: at(3) - 1000, to: at(3) - 1000 + WINDOW_MS, where: {}, metric: "bytes" };
    const answer = await withServer(url, (server) => ask(server, exactRange));
    expect(answer.estimate).toBe(sum(exactWindow, (r) => r.bytes));
    expect(answer.ci95).toEqual([answer.estimate, answer.estimate]);
  });

  it("reads the packed copy: with kept_records emptied behind its back (a copy of the database), the answers stay the same", async () => {
    const copy = join(dir, "copy.db");
    await withDb(url, (db) => db.$client.execute("PRAGMA wal_checkpoint(TRUNCATE)"));
    copyFileSync(join(dir, "weir.db"), copy);
    await withDb(`file:${copy}`, (db) =>
      // The open window's records stay: it has no packed copy and is read from its rows.
      db.$client.execute({ sql: "DELETE FROM kept_records WHERE reservoir_id IN (SELECT reservoir_id FROM packed_columns)", args: [] }),
    );
    const answers = await withServer(`file:${copy}`, (server) => Promise.all(questions.map((q) => ask(server, q))));
    expect(answers).toEqual(unpacked);
  });

  it("ignores a copy once its window changed (a late record), and the next run packs it again", async () => {
    const late = { src: "192.0.2.50", dst: "203.0.113.9", sport: 41000, dport: 443, proto: 6, bytes: 777, packets: 3, start: at(3) + 60_000 };
    await withServer(url, async (server) => expect((await postFlows(server.url, key, JSON.stringify([late]))).status).toBe(200));
    const exactRange = { from: at(3) - 1000, to: at(3) - 1000 + WINDOW_MS, where: {}, metric: "bytes" };
    // A new server: the window is not live there, so it is read from SQLite, where its copy is stale.
    const answer = await withServer(url, (server) => ask(server, exactRange));
    expect(answer.estimate).toBe(sum(exactWindow, (r) => r.bytes) + 777);
    const report = await withDb(url, (db) => packClosedWindows(db, { now }));
    expect(report).toMatchObject({ reservoirs: 1, records: exactWindow.length + 1 });
    expect((await withServer(url, (server) => ask(server, exactRange))).estimate).toBe(sum(exactWindow, (r) => r.bytes) + 777);
  });

  it("writes no copy of a kept set that changed between its read and its write", async () => {
    const other = join(dir, "race.db");
    const raceUrl = `file:${other}`;
    await withServer(raceUrl, async (server) => {
      const tenant = await createTenant(server.db, { slug: "race", sampleSize: K, windowSeconds: 300 });
      const collector = await ensureCollector(server.db, tenant.id, "edge-1");
      await server.manager.ingest({ tenant, collector, records: exactWindow, receivedAt: now });
    });
    await withDb(raceUrl, async (db) => {
      // A batch commits between the packer's read and its write: next_seq moves, as an ingest's would.
      const client = db.$client;
      const batch = client.batch.bind(client);
      client.batch = (async (statements: Parameters<typeof batch>[0], mode?: Parameters<typeof batch>[1]) => {
        await client.execute("UPDATE reservoirs SET next_seq = next_seq + 1");
        return batch(statements, mode);
      }) as typeof client.batch;
      await packClosedWindows(db, { now });
      const { rows } = await client.execute("SELECT count(*) FROM packed_columns");
      expect(Number(rows[0][0])).toBe(0);
    });
  });

  it("goes with its reservoir when retention deletes it (ON DELETE CASCADE)", async () => {
    await withDb(url, async (db) => {
      const before = Number((await db.$client.execute("SELECT count(*) FROM packed_columns")).rows[0][0]);
      expect(before).toBe(3);
      await db.$client.execute({ sql: "DELETE FROM reservoirs WHERE window_start = ?", args: [Math.floor(at(2) / WINDOW_MS) * WINDOW_MS] });
      expect(Number((await db.$client.execute("SELECT count(*) FROM packed_columns")).rows[0][0])).toBe(2);
    });
  });
});
