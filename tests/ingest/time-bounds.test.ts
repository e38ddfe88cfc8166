// Time sanity on ingest (app/ingest/time-check.ts) against an injected server clock: no timed
// assertions. Flow times are epoch milliseconds (RFC 7011 §6.1.8 dateTimeMilliseconds: since the
// Unix epoch); a start sent in epoch seconds, a common exporter mistake, lands in January 1970.
import { afterAll, beforeAll, describe, expect, test } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { packFlowRecords } from "~/ingest/kept-codec";
import { parseAddress } from "~/net/address";
import { ipfixMessages, testFlows } from "../collect/helpers";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { signIn } from "../helpers/session";

const NOW = Date.UTC(2024, 4, 1, 2, 10, 0); // the server clock: 02:10, so the open 5-minute window is 02:10–02:15
const DAY_MS = 86_400_000;
const base = { src: "198.51.100.7", dst: "203.0.113.9", sport: 49152, dport: 443, proto: 6, bytes: 1500, packets: 2 };

let t: TestServer;

beforeAll(async () => {
  // INGEST_REFUSE_EXPIRED on (the test helper turns it off for invented records of any age).
  t = await startTestServer({ now: () => NOW, env: { INGEST_REFUSE_EXPIRED: "true", INGEST_FUTURE_TOLERANCE_SECONDS: "300" } });
}, 60_000);
afterAll(async () => t?.close());

async function counters(collectorId: number) {
  const [row] = (
    await t.server.db.$client.execute({
      sql: "SELECT late_records, time_refused_records, clock_skewed_records, ignored_fields FROM collectors WHERE id = ?",
      args: [collectorId],
    })
  ).rows;
  return { late: Number(row.late_records), refused: Number(row.time_refused_records), skewed: Number(row.clock_skewed_records), ignored: Number(row.ignored_fields) };
}

async function storedRecords(tenantId: number): Promise<number> {
  const [row] = (await t.server.db.$client.execute({ sql: "SELECT COALESCE(SUM(records), 0) AS n FROM reservoirs WHERE tenant_id = ?", args: [tenantId] })).rows;
  return Number(row.n);
}

describe("times on POST /api/v1/flows", () => {
  test("a start in epoch seconds is refused before the floor, and the message says it looks like seconds", async () => {
    const { tenant, collector, key } = await tenantWithKey(t.server, "seconds");
    const seconds = Date.UTC(2024, 4, 1, 2, 0, 0) / 1000;
    const res = await postFlows(t.url, key, JSON.stringify([{ ...base, start: NOW - 60_000 }, { ...base, start: seconds, end: seconds + 5 }]));
    expect(res.status).toBe(400);
    const { error } = await res.json();
    expect(error.code).toBe("invalid_records");
    expect(error.invalidCount).toBe(1);
    expect(error.details).toHaveLength(1);
    expect(error.details[0]).toMatchObject({ index: 1, path: "start" });
    expect(error.details[0].message).toContain("is before 2000-01-01T00:00:00.000Z, the earliest time Weir accepts (INGEST_TIME_FLOOR)");
    expect(error.details[0].message).toContain("as seconds it would be 2024-05-01T02:00:00.000Z: the value looks like epoch seconds");
    // A batch is atomic: nothing stored, and the refusal counted for the collector.
    expect(await storedRecords(tenant.id)).toBe(0);
    expect(await counters(collector.id)).toEqual({ late: 0, refused: 1, skewed: 0, ignored: 0 });
  });

  test("a time more than the tolerance ahead of the clock is refused; within it, accepted and counted as clock-skewed", async () => {
    const { collector, key } = await tenantWithKey(t.server, "future");
    const tooFar = await postFlows(t.url, key, JSON.stringify([{ ...base, start: NOW, end: NOW + 300_001 }, { ...base, start: Date.UTC(2030, 0, 1) }]));
    expect(tooFar.status).toBe(400);
    const { error } = await tooFar.json();
    expect(error.details.map((d: { index: number; path: string }) => [d.index, d.path])).toEqual([[0, "end"], [1, "start"]]);
    expect(error.details[1].message).toBe(
      "start 2030-01-01T00:00:00.000Z is more than 300 s ahead of the server clock (2024-05-01T02:10:00.000Z; INGEST_FUTURE_TOLERANCE_SECONDS)",
    );
    const within = await postFlows(t.url, key, JSON.stringify([{ ...base, start: NOW, end: NOW + 300_000 }, { ...base, start: NOW + 1 }, { ...base, start: NOW - 1 }]));
    expect(within.status).toBe(200);
    // NOW − 1 ms lies in the window before the open one (02:05–02:10): late.
    expect(await within.json()).toMatchObject({ accepted: 3, clockSkewed: 2, late: 1 });
    expect(await counters(collector.id)).toEqual({ late: 1, refused: 2, skewed: 2, ignored: 0 });
  });

  test("late records within retention are accepted and counted; older than the tenant's retention keeps, refused naming it", async () => {
    const { tenant, collector, key } = await tenantWithKey(t.server, "late");
    // Default retention (tenants schema): fine windows 30 days, every window 365 days.
    const late = await postFlows(t.url, key, JSON.stringify([{ ...base, start: NOW - 3_600_000 }, { ...base, start: NOW - 300 * DAY_MS }, { ...base, start: NOW }]));
    expect(late.status).toBe(200);
    expect(await late.json()).toMatchObject({ accepted: 3, late: 2, clockSkewed: 0 });
    const expired = await postFlows(t.url, key, JSON.stringify([{ ...base, start: NOW - 366 * DAY_MS }]));
    expect(expired.status).toBe(400);
    const { error } = await expired.json();
    expect(error.details[0].message).toMatch(/^start 2023-05-01T02:10:00.000Z is older than the tenant's retention keeps: windows are deleted 365 days after they end \(the tenant's hourly retention, hourly_retention_days; fine windows roll up into hourly ones after 30 days, retention_days\)/);
    expect(await storedRecords(tenant.id)).toBe(3);
    expect(await counters(collector.id)).toEqual({ late: 2, refused: 1, skewed: 0, ignored: 0 });
  });

  test("values from 8.64e15 (the end of ECMAScript time) to 2^53−1 answer 400, not 500", async () => {
    const { key } = await tenantWithKey(t.server, "huge");
    for (const start of [8.64e15, 8.64e15 + 1, Number.MAX_SAFE_INTEGER]) {
      const res = await postFlows(t.url, key, JSON.stringify([{ ...base, start }]));
      expect(res.status).toBe(400);
      expect((await res.json()).error.details[0]).toMatchObject({ index: 0, path: "start", message: expect.stringContaining("is after 9999-12-31T23:59:59Z") });
    }
  });

  test("at most 100 details for a batch of refused records, every refused record counted", async () => {
    const { collector, key } = await tenantWithKey(t.server, "many");
    const res = await postFlows(t.url, key, JSON.stringify(Array.from({ length: 150 }, (_, i) => ({ ...base, start: 1_000_000 + i }))));
    expect(res.status).toBe(400);
    const { error } = await res.json();
    expect(error.invalidCount).toBe(150);
    expect(error.details).toHaveLength(100);
    expect((await counters(collector.id)).refused).toBe(150);
  });
});

describe("times in IPFIX files (RFC 5655)", () => {
  const file = (startMs: number) => {
    const parts = ipfixMessages(testFlows(20, 7, startMs), 5);
    const out = new Uint8Array(parts.reduce((n, p) => n + p.byteLength, 0));
    parts.reduce((at, p) => (out.set(p, at), at + p.byteLength), 0);
    return out;
  };

  test("posted to the API: a file dated a day ahead is refused whole, one dated now is stored", async () => {
    const { tenant, key } = await tenantWithKey(t.server, "ipfix-file", { sampleSize: 1024 });
    const ahead = await postFlows(t.url, key, file(NOW + DAY_MS), { "content-type": "application/ipfix" });
    expect(ahead.status).toBe(400);
    const { error } = await ahead.json();
    expect(error).toMatchObject({ code: "invalid_records", invalidCount: 20 });
    expect(error.details[0].message).toContain("ahead of the server clock");
    expect(await storedRecords(tenant.id)).toBe(0);
    const now = await postFlows(t.url, key, file(NOW - 60_000), { "content-type": "application/ipfix" });
    expect(now.status).toBe(200);
    expect(await storedRecords(tenant.id)).toBe(20);
  });

  test("uploaded on the Merge page: the same 400, not a 500", async () => {
    const { tenant } = await tenantWithKey(t.server, "riverline", { sampleSize: 1024 });
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "eli@example.com")).id, tenant.id, "engineer");
    const eli = await signIn(t.url, "eli-engineer");
    const body = new FormData();
    body.set("collector", "site-c");
    body.set("file", new Blob([file(NOW + DAY_MS)], { type: "application/ipfix" }), "ahead.ipfix");
    const res = await eli.fetch("/t/riverline/merge/upload", { method: "POST", body });
    expect(res.status).toBe(400);
    expect((await res.json()).error).toMatchObject({ code: "invalid_records", invalidCount: 20 });
    expect(await storedRecords(tenant.id)).toBe(0);
  });
});

describe("times from the listeners (no client to answer)", () => {
  test("records with refused times are dropped and counted; the rest are stored", async () => {
    const { tenant, collector } = await tenantWithKey(t.server, "native");
    const record = (start: number | null) => ({
      src: parseAddress("192.0.2.1"), dst: parseAddress("198.51.100.2"), sport: 1, dport: 2, proto: 17, bytes: 100n, packets: 1n,
      start, end: start, ingressInterface: null, egressInterface: null, srcAs: null, dstAs: null,
    });
    const answer = await t.server.manager.ingest({
      tenant: { id: tenant.id, sampleSize: 64, windowSeconds: 300, weightAttribute: "bytes", retentionDays: 30, hourlyRetentionDays: 365 },
      collector: { id: collector.id, name: collector.name },
      records: packFlowRecords([record(NOW - 1000), record(NOW + 3_600_000), record(1_714_528_800), record(null), record(NOW + 1000)]),
      receivedAt: t.server.manager.now(),
      source: "ipfix-udp",
    });
    expect(answer).toMatchObject({ accepted: 3, late: 1, clockSkewed: 1 });
    expect(await storedRecords(tenant.id)).toBe(3);
    expect(await counters(collector.id)).toEqual({ late: 1, refused: 2, skewed: 1, ignored: 0 });
  });
});
