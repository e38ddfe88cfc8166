import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import type { FlowRecord } from "~/flow/record";
import { decodeKeptRow, packFlowRecords } from "~/ingest/kept-codec";
import { ReservoirManager } from "~/ingest/manager.server";
import { windowStartOf } from "~/ingest/window";
import { parseAddress } from "~/net/address";
import { Reservoir } from "~/sampling/reservoir";
import { seededUniform } from "~/sampling/uniform";
import { createTenant, ensureCollector } from "~/tenants.server";
import { benchRecords } from "../../scripts/bench/data";

// ReservoirManager.ingest takes records as objects (seed, tests, benchmarks) or packed as a
// parse worker hands them over; with the same uniform draws both must store the same
// reservoirs, byte for byte, exact unsigned64 counters (RFC 7012) included.

const T0 = Date.UTC(2026, 4, 1, 12);
const RECEIVED_AT = T0 + 3600_000;
const UNSIGNED64_MAX = 2n ** 64n - 1n;
const SEED = 5;
const K = 32;

/** What the stored reservoirs must hold: each batch offered window by window, in order, with the same draws. */
function expectedReservoirs() {
  const uniform = seededUniform(SEED);
  const windows = new Map<number, { reservoir: Reservoir<null>; records: number; bytes: bigint; packets: bigint }>();
  for (const records of batches()) {
    const byWindow = new Map<number, FlowRecord[]>();
    for (const r of records) {
      const w = windowStartOf(r.start ?? RECEIVED_AT, 300);
      byWindow.set(w, [...(byWindow.get(w) ?? []), r]);
    }
    for (const w of [...byWindow.keys()].sort((a, b) => a - b)) {
      if (!windows.has(w)) windows.set(w, { reservoir: new Reservoir<null>(K, { uniform }), records: 0, bytes: 0n, packets: 0n });
      const e = windows.get(w)!;
      for (const r of byWindow.get(w)!) {
        e.reservoir.offer(null, Number(r.bytes));
        e.records++;
        e.bytes += r.bytes;
        e.packets += r.packets;
      }
    }
  }
  return [...windows]
    .sort(([a], [b]) => a - b)
    .map(([w, e]) => ({
      window_start: w,
      tau: e.reservoir.tau,
      records: e.records,
      bytes: String(e.bytes),
      packets: String(e.packets),
      priorities: e.reservoir.kept().map((k) => k.priority),
    }));
}

/** Three batches over several windows, plus records with the largest counters and no start time (invented data). */
function batches(): FlowRecord[][] {
  const all = [...benchRecords(6000, T0, T0 + 1800_000, 11)];
  const edge = (i: number): FlowRecord => ({
    ...all[i],
    src: parseAddress("2001:db8::1"),
    bytes: UNSIGNED64_MAX - BigInt(i),
    packets: 2n ** 53n + 1n,
    start: null,
    end: null,
    ingressInterface: null,
    srcAs: null,
  });
  return [all.slice(0, 2000), [...all.slice(2000, 4000), edge(1), edge(2)], [edge(3), ...all.slice(4000)]];
}

async function ingestAll(db: Db, form: "objects" | "packed") {
  const tenant = await createTenant(db, { slug: "t", sampleSize: K, windowSeconds: 300 });
  const collector = await ensureCollector(db, tenant.id, "edge-1");
  const manager = new ReservoirManager(db, { node: "n", uniform: seededUniform(SEED) });
  const answers = [];
  for (const records of batches()) {
    answers.push(await manager.ingest({ tenant, collector, records: form === "packed" ? packFlowRecords(records) : records, receivedAt: RECEIVED_AT }));
  }
  const stored = async (sql: string) => (await db.$client.execute(sql)).rows.map((row) => ({ ...row }));
  return {
    answers,
    reservoirs: await stored("SELECT window_start, k, tau, records, bytes, packets, next_seq FROM reservoirs ORDER BY window_start"),
    kept: await stored("SELECT r.window_start, k.seq, k.data FROM kept_records k JOIN reservoirs r ON r.id = k.reservoir_id ORDER BY r.window_start, k.seq"),
    batches: await stored("SELECT record_count, bytes FROM ingest_batches ORDER BY id"),
  };
}

describe("ReservoirManager.ingest: objects and packed rows", () => {
  let dir: string;
  const dbs: Db[] = [];
  beforeAll(() => {
    dir = mkdtempSync(join(tmpdir(), "weir-manager-packed-"));
  });
  afterAll(() => {
    dbs.forEach(closeDb);
    rmSync(dir, { recursive: true, force: true });
  });

  it("store the same reservoirs, counters and kept rows", async () => {
    const [objects, packed] = await Promise.all(
      (["objects", "packed"] as const).map(async (form) => {
        const db = await createDb(`file:${join(dir, `${form}.db`)}`);
        dbs.push(db);
        await runMigrations(db);
        return ingestAll(db, form);
      }),
    );
    expect(packed).toEqual(objects);
    const priorities = (windowStart: unknown) =>
      packed.kept
        .filter((k) => k.window_start === windowStart)
        .map((k) => decodeKeptRow(new Uint8Array(k.data as ArrayBuffer)).priority)
        .sort((a, b) => b - a);
    expect(
      packed.reservoirs.map((r) => ({
        window_start: Number(r.window_start),
        tau: Number(r.tau),
        records: Number(r.records),
        bytes: r.bytes,
        packets: r.packets,
        priorities: priorities(r.window_start),
      })),
    ).toEqual(expectedReservoirs());
    // Undated records land in the receive window; three records near 2^64 − 1 sum beyond 2^64 exactly.
    const undated = objects.reservoirs.find((r) => Number(r.window_start) === RECEIVED_AT);
    expect(undated).toMatchObject({ records: 3 });
    expect(BigInt(String(undated!.bytes))).toBe(3n * UNSIGNED64_MAX - 6n);
    expect(objects.kept.length).toBeGreaterThan(0);
  });
});
