import { randomBytes } from "node:crypto";
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { eq } from "drizzle-orm";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import { tenants } from "~/db/schema.server";
import { flowRecordToJson, type FlowRecord } from "~/flow/record";
import { flowKeyOfRow, packFlowRecords } from "~/ingest/kept-codec";
import { isReservoirChanged, ReservoirManager } from "~/ingest/manager.server";
import { windowStartOf } from "~/ingest/window";
import { parseAddress } from "~/net/address";
import { coordinatedUniform, flowKeyBytes, flowKeyLength } from "~/sampling/coordinated";
import { mergeStates } from "~/sampling/merge";
import { Reservoir } from "~/sampling/reservoir";
import { seededUniform } from "~/sampling/uniform";
import { deleteWindowsStatement, putWindowStatements, readStoredWindows, stateOf } from "~/samples/store.server";
import { createTenant, ensureCollector } from "~/tenants.server";
import { benchRecords } from "../../scripts/bench/data";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// Coordinated priorities in ingest: with a tenant secret, each record's u is the keyed hash of
// its flow key (app/sampling/coordinated.ts), so the stored reservoirs must be exactly the
// priority samples (Duffield, Lund, Thorup, J. ACM 54(6), 2007) that a local Reservoir builds
// from the same records with u = coordinatedUniform(secret, flowKeyBytes(record)) — the
// sample is determined by the priorities alone, whatever the order of arrival.

const T0 = Date.UTC(2026, 2, 3, 9);
const WINDOW_MS = 300_000;

describe("flow keys of packed rows", () => {
  it("equal flowKeyBytes of the record for every kind of record", () => {
    const records: FlowRecord[] = [...benchRecords(2000, T0, T0 + 3600_000, 17)];
    // Edge cases: no start time (the fixed marker), a start above 2^32 ms, IPv6, ports and protocol at their maxima.
    records.push(
      { ...records[0], start: null, end: null },
      { ...records[1], start: 2 ** 52 + 12345, end: null },
      { ...records[2], src: parseAddress("2001:db8::ffff:1"), dst: parseAddress("2001:db8:ffff::"), sport: 65535, dport: 65535, proto: 255 },
    );
    const { rows } = packFlowRecords(records);
    const key = new Uint8Array(flowKeyLength);
    records.forEach((record, i) => {
      flowKeyOfRow(rows, i * 104, key);
      expect(Buffer.from(key).toString("hex")).toBe(Buffer.from(flowKeyBytes(record)).toString("hex"));
    });
  });
});

describe("coordinated ingest through the API", () => {
  let t: TestServer;
  const secret = randomBytes(16);
  // Invented traffic: flows seen by both collectors, and flows seen by one only.
  const shared = [...benchRecords(900, T0, T0 + 2 * WINDOW_MS, 21)];
  const onlyA = [...benchRecords(700, T0, T0 + 2 * WINDOW_MS, 22)];
  const onlyB = [...benchRecords(500, T0, T0 + 2 * WINDOW_MS, 23)];
  const K = 32;

  beforeAll(async () => {
    // A seeded random source too: coordinated tenants must not draw from it.
    t = await startTestServer({ uniform: seededUniform(99) });
    const a = await tenantWithKey(t.server, "coord", { collector: "pop-a", sampleSize: K, scope: "ingest" });
    await t.server.db.update(tenants).set({ coordinated: true, coordinationSecret: secret.toString("hex") }).where(eq(tenants.id, a.tenant.id));
    const b = await keyFor(t.server, a.tenant.id, "pop-b", "ingest");
    const body = (records: FlowRecord[]) => JSON.stringify(records.map(flowRecordToJson));
    for (const [key, records] of [
      [a.key, [...shared, ...onlyA]],
      [b.key, [...onlyB, ...shared.slice().reverse()]],
    ] as const) {
      // Two batches each, so samples are also carried across batches.
      const half = Math.floor(records.length / 2);
      for (const part of [records.slice(0, half), records.slice(half)]) {
        const response = await postFlows(t.url, key, body(part));
        expect(response.status).toBe(200);
      }
    }
  }, 60_000);
  afterAll(() => t?.close());

  it("stores the priority sample built from the keyed-hash draws, window by window", async () => {
    const [tenant] = await t.server.db.select().from(tenants).where(eq(tenants.slug, "coord"));
    const stored = await readStoredWindows(t.server.db.$client, tenant.id, { from: T0, to: T0 + 2 * WINDOW_MS });
    expect(stored.map((w) => `${w.collector}@${w.windowStart}`)).toEqual([`pop-a@${T0}`, `pop-b@${T0}`, `pop-a@${T0 + WINDOW_MS}`, `pop-b@${T0 + WINDOW_MS}`]);
    for (const window of stored) {
      const records = (window.collector === "pop-a" ? [...shared, ...onlyA] : [...onlyB, ...shared]).filter((r) => windowStartOf(r.start!, 300) === window.windowStart);
      const local = new Reservoir<FlowRecord>(K);
      for (const r of records) local.offer(r, Number(r.bytes), coordinatedUniform(secret, flowKeyBytes(r)));
      expect(window.tau).toBe(local.tau);
      expect(window.records).toBe(records.length);
      expect(window.kept.map((e) => e.priority)).toEqual(local.kept().map((e) => e.priority));
      expect(window.kept.map((e) => Buffer.from(flowKeyBytes(e.item)).toString("hex"))).toEqual(local.kept().map((e) => Buffer.from(flowKeyBytes(e.item)).toString("hex")));
    }
  });

  it("gives a flow exported by both collectors the same priority in both", async () => {
    const [tenant] = await t.server.db.select().from(tenants).where(eq(tenants.slug, "coord"));
    const stored = await readStoredWindows(t.server.db.$client, tenant.id, { from: T0, to: T0 + WINDOW_MS });
    const byKey = (collector: string) =>
      new Map(stored.filter((w) => w.collector === collector).flatMap((w) => w.kept.map((e) => [Buffer.from(flowKeyBytes(e.item)).toString("hex"), e.priority] as const)));
    const a = byKey("pop-a");
    const b = byKey("pop-b");
    const common = [...a.keys()].filter((key) => b.has(key));
    // The top shared flows outrank most single-collector ones, so both samples keep some of them.
    expect(common.length).toBeGreaterThan(0);
    for (const key of common) expect(b.get(key)).toBe(a.get(key));
  });
});

describe("the version check of ingest batches", () => {
  let dir: string;
  let db: Db;
  const records = [...benchRecords(1200, T0, T0 + WINDOW_MS, 31)];

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-version-"));
    db = await createDb(`file:${join(dir, "weir.db")}`);
    await runMigrations(db);
  });
  afterAll(() => {
    closeDb(db);
    rmSync(dir, { recursive: true, force: true });
  });

  it("reloads and applies a batch again when another process rewrote the reservoir", async () => {
    const tenant = await createTenant(db, { slug: "rewritten", sampleSize: 16, windowSeconds: 300 });
    const collector = await ensureCollector(db, tenant.id, "edge-1");
    const manager = new ReservoirManager(db, { node: "n1", uniform: seededUniform(4) });
    const batch = (part: FlowRecord[]) => manager.ingest({ tenant, collector, records: part, receivedAt: T0 + WINDOW_MS });
    await batch(records.slice(0, 400));

    // Another writer (an import in another process) merges 400 other records into the same reservoir.
    const [before] = await readStoredWindows(db.$client, tenant.id, { from: T0, to: T0 + WINDOW_MS });
    const other = new Reservoir<FlowRecord>(16, { uniform: seededUniform(5) });
    let bytes = 0n;
    let packets = 0n;
    for (const r of records.slice(400, 800)) {
      other.offer(r, Number(r.bytes));
      bytes += r.bytes;
      packets += r.packets;
    }
    const merged = mergeStates([{ ...stateOf(before), seen: before.records }, other.state()]);
    const rewritten = { k: merged.k, tau: merged.tau, records: merged.seen, bytes: before.bytes + bytes, packets: before.packets + packets, kept: merged.kept };
    await db.$client.batch(putWindowStatements(tenant.id, collector.id, before, rewritten, Date.now()), "write");

    // This manager still holds the old sample in memory; its next batch must not overwrite the rewrite.
    await batch(records.slice(800));
    const [after] = await readStoredWindows(db.$client, tenant.id, { from: T0, to: T0 + WINDOW_MS });
    const sum = (list: FlowRecord[]) => list.reduce((s, r) => s + r.bytes, 0n);
    expect(after.records).toBe(records.length);
    expect(after.bytes).toBe(sum(records));
    // Every record of the rewrite that the final sample keeps is still there: the rewrite was built on, not lost.
    const finalPriorities = new Set(after.kept.map((e) => e.priority));
    const survivors = rewritten.kept.filter((e) => e.priority > after.kept[after.kept.length - 1].priority);
    for (const e of survivors) expect(finalPriorities.has(e.priority)).toBe(true);
    expect(after.tau).toBeGreaterThanOrEqual(rewritten.tau);
  });

  it("starts the window afresh when another process deleted the reservoir (a roll-up)", async () => {
    const tenant = await createTenant(db, { slug: "deleted", sampleSize: 16, windowSeconds: 300 });
    const collector = await ensureCollector(db, tenant.id, "edge-1");
    const manager = new ReservoirManager(db, { node: "n1" });
    const batch = (part: FlowRecord[]) => manager.ingest({ tenant, collector, records: part, receivedAt: T0 + WINDOW_MS });
    await batch(records.slice(0, 300));
    const [before] = await readStoredWindows(db.$client, tenant.id, { from: T0, to: T0 + WINDOW_MS });
    await db.$client.batch([deleteWindowsStatement(tenant.id, [before.id])], "write");

    const answer = await batch(records.slice(300, 500));
    expect(answer.accepted).toBe(200);
    const [after] = await readStoredWindows(db.$client, tenant.id, { from: T0, to: T0 + WINDOW_MS });
    expect(after.id).not.toBe(before.id);
    expect(after.records).toBe(200);
    expect(after.bytes).toBe(records.slice(300, 500).reduce((s, r) => s + r.bytes, 0n));
  });

  it("names the abort so the manager can tell it from other failures", async () => {
    const error = await db.$client.execute({ sql: "INSERT INTO reservoir_expectations (id, next_seq) VALUES (?, ?)", args: [-1, 0] }).catch((e: unknown) => e);
    expect(isReservoirChanged(error)).toBe(true);
    expect(isReservoirChanged(new Error("SQLITE_BUSY"))).toBe(false);
  });
});
