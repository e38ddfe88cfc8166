import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// How long POST /api/v1/flows remembers an Idempotency-Key, on a clock the test moves (the
// server's injected `now`, which the ingest route takes as the batch's receive time). The key
// must be remembered for IDEMPOTENCY_TTL_HOURS (a retry within it gets the first answer again,
// marked duplicate, and counts nothing), and forgotten after it, so the key may name a new
// batch (common practice for idempotency keys: a retry window, then the key is free again).
// Keys are swept at most once a minute (IDEMPOTENCY_SWEEP_EVERY_MS in
// app/ingest/manager.server.ts), so "after" means at the first sweep past the TTL.

const TTL_HOURS = 2;
// Hours to milliseconds by definition: 3600 s an hour, 1000 ms a second.
const TTL_MS = TTL_HOURS * 3600 * 1000;
const SWEEP_MS = 60 * 1000;
const T0 = Date.UTC(2024, 4, 4, 6, 0);

/** A small invented batch in documentation space (RFC 5737), dated at T0. */
const batch = JSON.stringify(
  Array.from({ length: 7 }, (_, i) => ({
    src: `203.0.113.${10 + i}`,
    dst: "198.51.100.53",
    sport: 33000 + i,
    dport: 53,
    proto: 17,
    bytes: 80 + 10 * i,
    packets: 1,
    start: T0 + 1000 * i,
    end: T0 + 1000 * i + 5,
  })),
);
// Its exact counters, summed here from the batch above.
const BATCH_RECORDS = 7;
const BATCH_BYTES = Array.from({ length: 7 }, (_, i) => 80 + 10 * i).reduce((a, b) => a + b, 0);

describe("Idempotency-Key lifetime", () => {
  let t: TestServer;
  let key: string;
  let tenantId: number;
  let clock = T0;

  /** What the tenant's reservoirs and batch log hold, read from SQLite. */
  async function counted() {
    const client = t.server.db.$client;
    const [r] = (await client.execute({ sql: "SELECT coalesce(sum(records), 0) AS records, coalesce(sum(CAST(bytes AS INTEGER)), 0) AS bytes FROM reservoirs WHERE tenant_id = ?", args: [tenantId] })).rows;
    const [b] = (await client.execute({ sql: "SELECT count(*) AS n FROM ingest_batches WHERE tenant_id = ?", args: [tenantId] })).rows;
    return { records: Number(r.records), bytes: Number(r.bytes), batches: Number(b.n) };
  }

  async function send(at: number, idempotencyKey: string) {
    clock = at;
    const res = await postFlows(t.url, key, batch, { "idempotency-key": idempotencyKey });
    expect(res.status, await res.clone().text()).toBe(200);
    return (await res.json()) as { duplicate: boolean; accepted: number } & Record<string, unknown>;
  }

  beforeAll(async () => {
    t = await startTestServer({ env: { IDEMPOTENCY_TTL_HOURS: String(TTL_HOURS) }, now: () => clock });
    const made = await tenantWithKey(t.server, "retrying", { sampleSize: 64 });
    key = made.key;
    tenantId = made.tenant.id;
  });
  afterAll(() => t?.close());

  it("a retry 1 ms before the TTL is a duplicate (same answer, nothing counted twice); at the first sweep after it, the key names a new batch", async () => {
    const first = await send(T0, "nightly-export-1");
    expect(first.duplicate).toBe(false);
    expect(first.accepted).toBe(BATCH_RECORDS);
    expect(await counted()).toEqual({ records: BATCH_RECORDS, bytes: BATCH_BYTES, batches: 1 });

    // 1 ms within the TTL, with a sweep running at that moment (a minute after the last): the
    // stored answer again, marked duplicate; the counters and the batch log unchanged.
    const before = await send(T0 + TTL_MS - 1, "nightly-export-1");
    expect(before).toEqual({ ...first, duplicate: true });
    expect(await counted()).toEqual({ records: BATCH_RECORDS, bytes: BATCH_BYTES, batches: 1 });

    // Past the TTL, at the next sweep (a minute later): the key is free, the batch is applied again and counted twice.
    const after = await send(T0 + TTL_MS - 1 + SWEEP_MS, "nightly-export-1");
    expect(after.duplicate).toBe(false);
    expect(after.accepted).toBe(BATCH_RECORDS);
    expect(await counted()).toEqual({ records: 2 * BATCH_RECORDS, bytes: 2 * BATCH_BYTES, batches: 2 });

    // And the key is remembered again from that new batch on.
    const again = await send(T0 + TTL_MS - 1 + 2 * SWEEP_MS, "nightly-export-1");
    expect(again).toEqual({ ...after, duplicate: true });
    expect(await counted()).toEqual({ records: 2 * BATCH_RECORDS, bytes: 2 * BATCH_BYTES, batches: 2 });
  });

  it("exactly at the TTL, with a sweep running then, the key is still remembered (\"at least this long\")", async () => {
    // Later than every time of the test above, so a sweep runs at each step below whatever ran before.
    const t1 = T0 + 3 * TTL_MS;
    const first = await send(t1, "nightly-export-2");
    expect(first.duplicate).toBe(false);
    const base = await counted();
    // A minute before the TTL and exactly at it: duplicates, nothing counted.
    expect(await send(t1 + TTL_MS - SWEEP_MS, "nightly-export-2")).toEqual({ ...first, duplicate: true });
    expect(await send(t1 + TTL_MS, "nightly-export-2")).toEqual({ ...first, duplicate: true });
    expect(await counted()).toEqual(base);
    // The next sweep frees it.
    expect((await send(t1 + TTL_MS + SWEEP_MS, "nightly-export-2")).duplicate).toBe(false);
    expect(await counted()).toEqual({ records: base.records + BATCH_RECORDS, bytes: base.bytes + BATCH_BYTES, batches: base.batches + 1 });
  });
});
