// Packing closed windows (app/query/pack.server.ts) and reading them packed (the estimate's
// keptSelect): a query answers the same with and without the packed copy, reads the copy
// when it is current, ignores it once the reservoir changed, and a packing run never writes a
// copy of a kept set that changed while it ran. Each question runs the estimate (the API route's
// runEstimate) with an empty snapshot cache and no live reservoir, so each answer is read from
// SQLite, not from memory.
// Windows that saw at most k records keep them all (τ = 0): their estimates must equal the
// sums of the records sent (Duffield, Lund, Thorup, J. ACM 54(6), 2007: with every record
// kept, ŵ_i = w_i), computed here from the records.
import { copyFileSync, mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import type { Tenant } from "~/db/schema.server";
import type { FlowRecord } from "~/flow/record";
import { ReservoirManager } from "~/ingest/manager.server";
import { parseAddress } from "~/net/address";
import { runEstimate } from "~/query/estimate.server";
import { packClosedWindows } from "~/query/pack.server";
import { PACKED_BYTES_PER_RECORD } from "~/query/packed-columns";
import { parseEstimateRequest } from "~/query/request";
import { SnapshotCache } from "~/query/snapshot-cache";
import { createTenant, ensureCollector } from "~/tenants.server";

const HOUR_MS = 3600_000;
const WINDOW_MS = 300_000;
const K = 16;

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

const sum = (rs: FlowRecord[], f: (r: FlowRecord) => bigint) =>
  rs.reduce((s, r) => s + Number(f(r)), 0);

describe("packed closed windows", () => {
  let dir: string;
  let url: string;
  const now = Date.now();
  // A second into the 5-minute window `hours` ago, so each batch stays in one window.
  const at = (hours: number) =>
    Math.floor((now - hours * HOUR_MS) / WINDOW_MS) * WINDOW_MS + 1000;
  const exactWindow = records(5, at(3)); // τ = 0
  const sampledWindow = records(40, at(2)); // τ > 0
  const fullWindow = records(K, at(1)); // exactly k: τ = 0
  const openWindow = records(3, Math.floor(now / WINDOW_MS) * WINDOW_MS + 1000); // still open: never packed
  const range = { from: now - 4 * HOUR_MS, to: now + HOUR_MS };
  const questions = [
    { ...range, where: {}, metric: "bytes" },
    { ...range, where: {}, metric: "packets", groupBy: "window" },
    {
      ...range,
      where: { src: ["198.51.100.0/24"], dport: [443] },
      groupBy: "dst",
      prefixLength: 24,
    },
    { ...range, where: { srcAs: [64500], inIf: [7] }, metric: "flows" },
    { ...range, where: { src: ["2001:db8::/32"] }, groupBy: "proto" },
  ];
  // The window of `exactWindow` alone (τ = 0 there until the late record below).
  const exactRange = {
    from: at(3) - 1000,
    to: at(3) - 1000 + WINDOW_MS,
    where: {},
    metric: "bytes",
  };
  let unpacked: unknown[];
  let db: Db;
  let tenant: Tenant;
  let collector: { id: number; name: string };

  /** The answer to `body` from SQLite alone: nothing cached, nothing live. */
  async function ask(on: Db, body: object) {
    const parsed = parseEstimateRequest(body);
    if (!parsed.ok) throw new Error(parsed.message);
    const answer = await runEstimate(
      {
        db: on,
        manager: { liveColumns: () => undefined },
        snapshots: new SnapshotCache(),
      },
      tenant,
      parsed.query,
    );
    return JSON.parse(JSON.stringify(answer)) as {
      estimate: number;
      stdError: number;
      ci95: [number, number];
    };
  }

  async function withDb<T>(
    databaseUrl: string,
    work: (db: Db) => Promise<T>,
  ): Promise<T> {
    const other = await createDb(databaseUrl);
    try {
      return await work(other);
    } finally {
      closeDb(other);
    }
  }

  async function ingest(on: Db, records: FlowRecord[]) {
    await new ReservoirManager(on, { node: "node-1" }).ingest({
      tenant,
      collector,
      records,
      receivedAt: now,
    });
  }

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-packed-"));
    url = `file:${join(dir, "weir.db")}`;
    db = await createDb(url);
    await runMigrations(db);
    tenant = await createTenant(db, {
      slug: "packed",
      sampleSize: K,
      windowSeconds: 300,
    });
    collector = await ensureCollector(db, tenant.id, "edge-1");
    for (const batch of [exactWindow, sampledWindow, fullWindow, openWindow])
      await ingest(db, batch);
    // Nothing packed yet: every answer below is read row by row from kept_records.
    unpacked = await Promise.all(questions.map((q) => ask(db, q)));
  }, 60_000);

  afterAll(() => {
    if (db) closeDb(db);
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it("packs the closed windows only, newest first, one blob of 8 + 86 bytes per kept record each", async () => {
    const report = await packClosedWindows(db, { now });
    const keptInClosed = exactWindow.length + K + fullWindow.length;
    expect(report).toEqual({
      reservoirs: 3,
      records: keptInClosed,
      bytes: 3 * 8 + keptInClosed * PACKED_BYTES_PER_RECORD,
      partial: false,
    });
    const rows = await (async () =>
      (
        await db.$client.execute(
          "SELECT r.window_start, length(p.data) FROM packed_columns p JOIN reservoirs r ON r.id = p.reservoir_id AND r.next_seq = p.next_seq ORDER BY 1",
        )
      ).rows)();
    expect(rows.map((r) => [Number(r[0]), Number(r[1])])).toEqual(
      [exactWindow, sampledWindow, fullWindow].map((w) => [
        Math.floor(w[0].start! / WINDOW_MS) * WINDOW_MS,
        8 + Math.min(w.length, K) * PACKED_BYTES_PER_RECORD,
      ]),
    );
    // A second run finds nothing to do.
    expect(await packClosedWindows(db, { now })).toEqual({
      reservoirs: 0,
      records: 0,
      bytes: 0,
      partial: false,
    });
  });

  it("answers every question exactly as the unpacked rows did, and the exact windows with the sums of the records sent", async () => {
    const packed = await Promise.all(questions.map((q) => ask(db, q)));
    expect(packed).toEqual(unpacked);
    // τ = 0 in the windows asked about below: the estimate is the exact sum, ± 0.
    const answer = await ask(db, exactRange);
    expect(answer.estimate).toBe(sum(exactWindow, (r) => r.bytes));
    expect(answer.ci95).toEqual([answer.estimate, answer.estimate]);
  });

  it("reads the packed copy: with kept_records emptied behind its back (a copy of the database), the answers stay the same", async () => {
    const copy = join(dir, "copy.db");
    await db.$client.execute("PRAGMA wal_checkpoint(TRUNCATE)");
    copyFileSync(join(dir, "weir.db"), copy);
    const answers = await withDb(`file:${copy}`, async (copied) => {
      // The open window's records stay: it has no packed copy and is read from its rows.
      await copied.$client.execute(
        "DELETE FROM kept_records WHERE reservoir_id IN (SELECT reservoir_id FROM packed_columns)",
      );
      expect(
        Number(
          (await copied.$client.execute("SELECT count(*) FROM kept_records"))
            .rows[0][0],
        ),
      ).toBe(openWindow.length);
      return Promise.all(questions.map((q) => ask(copied, q)));
    });
    expect(answers).toEqual(unpacked);
  });

  it("ignores a copy once its window changed (a late record), and the next run packs it again", async () => {
    const [late] = records(1, at(3) + 60_000).map((r) => ({
      ...r,
      bytes: 777n,
    }));
    await ingest(db, [late]);
    // Read from SQLite (nothing live, nothing cached), where the window's copy is now stale.
    const answer = await ask(db, exactRange);
    expect(answer.estimate).toBe(sum(exactWindow, (r) => r.bytes) + 777);
    const report = await packClosedWindows(db, { now });
    expect(report).toMatchObject({
      reservoirs: 1,
      records: exactWindow.length + 1,
    });
    expect((await ask(db, exactRange)).estimate).toBe(
      sum(exactWindow, (r) => r.bytes) + 777,
    );
  });

  it("writes no copy of a kept set that changed between its read and its write", async () => {
    const other = join(dir, "race.db");
    const raceUrl = `file:${other}`;
    await withDb(raceUrl, async (race) => {
      await runMigrations(race);
      const raceTenant = await createTenant(race, {
        slug: "race",
        sampleSize: K,
        windowSeconds: 300,
      });
      const raceCollector = await ensureCollector(
        race,
        raceTenant.id,
        "edge-1",
      );
      await new ReservoirManager(race, { node: "node-1" }).ingest({
        tenant: raceTenant,
        collector: raceCollector,
        records: exactWindow,
        receivedAt: now,
      });
    });
    await withDb(raceUrl, async (db) => {
      // A batch commits between the packer's read and its write: next_seq moves, as an ingest's would.
      const client = db.$client;
      const batch = client.batch.bind(client);
      client.batch = (async (
        statements: Parameters<typeof batch>[0],
        mode?: Parameters<typeof batch>[1],
      ) => {
        await client.execute("UPDATE reservoirs SET next_seq = next_seq + 1");
        return batch(statements, mode);
      }) as typeof client.batch;
      await packClosedWindows(db, { now });
      const { rows } = await client.execute(
        "SELECT count(*) FROM packed_columns",
      );
      expect(Number(rows[0][0])).toBe(0);
    });
  });

  it("goes with its reservoir when retention deletes it (ON DELETE CASCADE)", async () => {
    await (async () => {
      const before = Number(
        (await db.$client.execute("SELECT count(*) FROM packed_columns"))
          .rows[0][0],
      );
      expect(before).toBe(3);
      await db.$client.execute({
        sql: "DELETE FROM reservoirs WHERE window_start = ?",
        args: [Math.floor(at(2) / WINDOW_MS) * WINDOW_MS],
      });
      expect(
        Number(
          (await db.$client.execute("SELECT count(*) FROM packed_columns"))
            .rows[0][0],
        ),
      ).toBe(2);
    })();
  });
});
