import { spawn, type ChildProcess } from "node:child_process";
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { createInterface } from "node:readline";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { createApiKey } from "~/auth/api-keys.server";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import { parseFlowRecord } from "~/flow/record";
import { decodeKeptRow } from "~/ingest/kept-codec";
import { windowStartOf } from "~/ingest/window";
import { Reservoir } from "~/sampling/reservoir";
import { seededUniform } from "~/sampling/uniform";
import { createTenant, ensureCollector } from "~/tenants.server";

// Durability: an acknowledged batch must survive a crash (SIGKILL, no chance to
// flush anything) because the answer is sent only after its transaction commits
// (SQLite with synchronous=FULL, https://sqlite.org/pragma.html#pragma_synchronous).
// With a seeded uniform source in the child, the parent rebuilds the exact
// reservoirs the acknowledged batches must have produced.

const SEED = 9001;
const K = 32;

function startChild(databaseUrl: string): Promise<{ child: ChildProcess; url: string }> {
  const child = spawn(process.execPath, ["--import", "tsx", join(__dirname, "crash-child.ts")], {
    env: { ...process.env, DATABASE_URL: databaseUrl, WEIR_TEST_SEED: String(SEED) },
    stdio: ["ignore", "pipe", "inherit"],
  });
  return new Promise((resolve, reject) => {
    child.once("exit", (code) => reject(new Error(`child exited early with ${code}`)));
    createInterface({ input: child.stdout! }).on("line", (line) => {
      const ready = /^WEIR_CHILD_READY (\S+)$/.exec(line);
      if (ready) resolve({ child, url: ready[1] });
    });
  });
}

function killed(child: ChildProcess): Promise<void> {
  return new Promise((resolve) => {
    child.removeAllListeners("exit");
    child.once("exit", () => resolve());
    child.kill("SIGKILL");
  });
}

/** Batch b: records spread over three windows of the day, heavy-tailed bytes (invented test data). */
function batch(b: number, windowStart: number) {
  const u = seededUniform(b + 1);
  return Array.from({ length: 200 }, (_, i) => ({
    src: `198.51.100.${(b * 13 + i) % 250}`,
    dst: `2001:db8::${(i % 50).toString(16)}`,
    proto: 17,
    dport: 53,
    bytes: Math.round(60 / Math.pow(u(), 1 / 1.3)),
    packets: 1 + (i % 3),
    start: windowStart + (i % 3) * 300_000 + i,
  }));
}

describe("crash safety", () => {
  let dir: string;
  let db: Db;
  let key: string;
  let child: ChildProcess | undefined;
  const windowStart = windowStartOf(Date.UTC(2026, 10, 30, 12), 300);

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-crash-"));
    db = await createDb(`file:${join(dir, "weir.db")}`);
    await runMigrations(db);
    const tenant = await createTenant(db, { slug: "crash", sampleSize: K, windowSeconds: 300 });
    const collector = await ensureCollector(db, tenant.id, "edge");
    ({ key } = await createApiKey(db, { tenantId: tenant.id, collectorId: collector.id, scopes: "ingest" }));
  });
  afterAll(async () => {
    if (child && child.exitCode === null) await killed(child);
    closeDb(db);
    rmSync(dir, { recursive: true, force: true });
  });

  it("keeps every acknowledged batch through SIGKILL and restart, reservoirs intact", async () => {
    const started = await startChild(`file:${join(dir, "weir.db")}`);
    child = started.child;
    const sent: ReturnType<typeof batch>[] = [];
    for (let b = 0; b < 12; b++) {
      const records = batch(b, windowStart);
      const res = await fetch(`${started.url}/api/v1/flows`, {
        method: "POST",
        headers: { authorization: `Bearer ${key}`, "content-type": "application/json", "idempotency-key": `b-${b}` },
        body: JSON.stringify(records),
      });
      expect(res.status).toBe(200);
      sent.push(records);
    }
    // Killed right after the last acknowledgement: nothing is in flight.
    await killed(child);

    // The reservoirs the acknowledged batches must have produced, with the same draws in the same order.
    const uniform = seededUniform(SEED);
    const expected = new Map<number, Reservoir<number>>();
    const exact = new Map<number, { records: number; bytes: bigint; packets: bigint }>();
    for (const records of sent) {
      const byWindow = new Map<number, typeof records>();
      for (const r of records) {
        const w = windowStartOf(r.start, 300);
        byWindow.set(w, [...(byWindow.get(w) ?? []), r]);
      }
      for (const w of [...byWindow.keys()].sort((x, y) => x - y)) {
        if (!expected.has(w)) expected.set(w, new Reservoir<number>(K, { uniform }));
        if (!exact.has(w)) exact.set(w, { records: 0, bytes: 0n, packets: 0n });
        for (const r of byWindow.get(w)!) {
          expected.get(w)!.offer(0, r.bytes);
          const e = exact.get(w)!;
          e.records++;
          e.bytes += BigInt(r.bytes);
          e.packets += BigInt(r.packets);
        }
      }
    }

    // Restart on the same file; the server must come up and rebuild from SQLite.
    const again = await startChild(`file:${join(dir, "weir.db")}`);
    child = again.child;
    const health = await fetch(`${again.url}/healthz`);
    expect(health.status).toBe(200);
    const rows = (await db.$client.execute("SELECT id, window_start, k, tau, records, bytes, packets FROM reservoirs ORDER BY window_start")).rows;
    expect(rows.map((r) => Number(r.window_start))).toEqual([...expected.keys()].sort((x, y) => x - y));
    for (const row of rows) {
      const w = Number(row.window_start);
      const e = exact.get(w)!;
      expect({ records: Number(row.records), bytes: row.bytes, packets: row.packets }).toEqual({ records: e.records, bytes: e.bytes.toString(), packets: e.packets.toString() });
      expect(Number(row.tau)).toBe(expected.get(w)!.tau);
      const kept = (await db.$client.execute({ sql: "SELECT data FROM kept_records WHERE reservoir_id = ?", args: [row.id] })).rows;
      const priorities = kept.map((k) => decodeKeptRow(new Uint8Array(k.data as ArrayBuffer)).priority).sort((x, y) => y - x);
      expect(priorities).toEqual(expected.get(w)!.kept().map((k) => k.priority));
    }

    // A retried batch after the restart is recognised as a duplicate.
    const retry = await fetch(`${again.url}/api/v1/flows`, {
      method: "POST",
      headers: { authorization: `Bearer ${key}`, "content-type": "application/json", "idempotency-key": "b-11" },
      body: JSON.stringify(sent[11]),
    });
    expect((await retry.json()).duplicate).toBe(true);
    expect(parseFlowRecord(sent[0][0]).ok).toBe(true);
  });
});
