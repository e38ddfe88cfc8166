import { setTimeout as sleep } from "node:timers/promises";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { parseFlowRecord } from "~/flow/record";
import type { WindowAnswer } from "~/ingest/manager.server";
import { windowStartOf } from "~/ingest/window";
import type { IntakeSnapshot } from "~/routes/console.intake-data";
import { ensureCollector } from "~/tenants.server";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

// Intake: per-collector ingest health from /t/:tenant/intake-data, checked against batches
// posted through the real ingest API. Counters per window are exact (the reservoirs count
// every record, kept or not); a reservoir keeps exactly min(k, n) of n records and τ is the
// (k+1)-th highest priority (Duffield, Lund, Thorup, J. ACM 54(6), 2007), so fill and τ must
// be those the ingest answer reported for the open window.

// Hour-long windows, so the "open window" of the test stays the same from post to read.
const WINDOW_SECONDS = 3600;
const WINDOW_MS = WINDOW_SECONDS * 1000;
const K = 16;

interface Sent {
  src: string;
  dst: string;
  proto: number;
  bytes: number;
  packets: number;
  start: number;
}

function batch(count: number, windowStart: number, seed: number): Sent[] {
  return Array.from({ length: count }, (_, i) => ({
    src: `198.51.100.${(i + seed) % 256}`,
    dst: `203.0.113.${(i * 3 + seed) % 256}`,
    proto: 6,
    bytes: 100 + ((i * 7919 + seed * 104_729) % 90_000),
    packets: 1 + (i % 9),
    start: windowStart + 1000 + i,
  }));
}

const sum = (records: Sent[], field: "bytes" | "packets") => records.reduce((s, r) => s + r[field], 0);

describe("Intake: ingest health per collector", () => {
  let t: TestServer;
  let viewer: SignedIn;
  let outsider: SignedIn;
  let open: number;
  let before: number;
  let after: number;
  const sent = { open: [] as Sent[], previous: [] as Sent[], older: [] as Sent[] };
  let openAnswer: WindowAnswer;

  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await tenantWithKey(t.server, "riverline", { collector: "edge-1", sampleSize: K, windowSeconds: WINDOW_SECONDS });
    riverlineKey = riverline.key;
    // A collector with a key that never sends anything.
    await keyFor(t.server, riverline.tenant.id, "edge-2");
    const tributary = await tenantWithKey(t.server, "tributary", { collector: "foreign-edge", windowSeconds: WINDOW_SECONDS });
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "vera@example.com")).id, riverline.tenant.id, "viewer");
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "oskar@example.org")).id, tributary.tenant.id, "admin");
    viewer = await signIn(t.url, "vera-viewer");
    outsider = await signIn(t.url, "oskar-outsider");

    // Keep clear of a window boundary, so every batch and the read see the same open window.
    const left = WINDOW_MS - (Date.now() % WINDOW_MS);
    if (left < 20_000) await sleep(left + 100);

    before = Date.now();
    open = windowStartOf(before, WINDOW_SECONDS);
    sent.open = batch(40, open, 1);
    sent.previous = batch(10, open - WINDOW_MS, 2);
    sent.older = batch(5, open - 2 * WINDOW_MS, 3);
    for (const records of [sent.older, sent.previous, sent.open]) {
      const res = await postFlows(t.url, riverline.key, JSON.stringify(records));
      expect(res.status, await res.clone().text()).toBe(200);
      const answer = (await res.json()) as { windows: WindowAnswer[] };
      if (records === sent.open) openAnswer = answer.windows[0];
    }
    // Another tenant's collector, busy in the same windows.
    expect((await postFlows(t.url, tributary.key, JSON.stringify(batch(30, open, 4)))).status).toBe(200);

    // A collector last heard from three windows ago (receive time as the ingest path records it).
    const stale = await ensureCollector(t.server.db, riverline.tenant.id, "edge-3");
    const record = parseFlowRecord({ src: "192.0.2.9", dst: "198.51.100.9", proto: 17, bytes: 500, packets: 1, start: open - 3 * WINDOW_MS });
    if (!record.ok) throw new Error("test record invalid");
    await t.server.manager.ingest({ tenant: riverline.tenant, collector: stale, records: [record.record], receivedAt: before - 3 * WINDOW_MS });
    after = Date.now();
  });
  afterAll(() => t?.close());

  let riverlineKey = "";

  async function snapshot(who: SignedIn = viewer): Promise<IntakeSnapshot> {
    const res = await who.fetch("/t/riverline/intake-data");
    expect(res.status).toBe(200);
    expect(res.headers.get("content-type")).toMatch(/^application\/json/);
    expect(res.headers.get("cache-control")).toBe("no-store");
    return (await res.json()) as IntakeSnapshot;
  }

  it("lists the tenant's collectors only, by name", async () => {
    const s = await snapshot();
    expect(s.collectors.map((c) => c.name)).toEqual(["edge-1", "edge-2", "edge-3"]);
    expect(JSON.stringify(s)).not.toContain("foreign-edge");
    expect(s).toMatchObject({ windowSeconds: WINDOW_SECONDS, sampleSize: K, weightAttribute: "bytes", rateSeconds: 60 });
  });

  it("shows the open window and the three before it, with exact records and bytes per window", async () => {
    const s = await snapshot();
    expect(s.windows).toEqual([open - 3 * WINDOW_MS, open - 2 * WINDOW_MS, open - WINDOW_MS, open]);
    const edge1 = s.collectors.find((c) => c.name === "edge-1")!;
    expect(edge1.windows).toEqual([
      { start: open - 3 * WINDOW_MS, records: 0, bytes: 0, packets: 0 },
      { start: open - 2 * WINDOW_MS, records: 5, bytes: sum(sent.older, "bytes"), packets: sum(sent.older, "packets") },
      { start: open - WINDOW_MS, records: 10, bytes: sum(sent.previous, "bytes"), packets: sum(sent.previous, "packets") },
      { start: open, records: 40, bytes: sum(sent.open, "bytes"), packets: sum(sent.open, "packets") },
    ]);
  });

  it("counts the records received in the last minute (55 in 3 batches → 55/60 per second)", async () => {
    const edge1 = (await snapshot()).collectors.find((c) => c.name === "edge-1")!;
    expect(edge1.recordsLastMinute).toBe(55);
    expect(edge1.batchesLastMinute).toBe(3);
    expect(edge1.recordsPerSecond).toBeCloseTo(55 / 60, 12);
  });

  it("gives the open window's fill and τ: min(k, n) kept, τ as the ingest answer reported it", async () => {
    const edge1 = (await snapshot()).collectors.find((c) => c.name === "edge-1")!;
    expect(openAnswer).toMatchObject({ kept: K, k: K, records: 40 });
    expect(openAnswer.tau).toBeGreaterThan(0);
    expect(edge1.open).toEqual([{ node: "node-1", kept: K, k: K, tau: openAnswer.tau, records: 40 }]);
    expect(edge1.quiet).toBe(false);
    expect(edge1.lastSeenAt).toBeGreaterThanOrEqual(before);
    expect(edge1.lastSeenAt).toBeLessThanOrEqual(after);
  });

  it("marks a collector never seen, and one not seen for more than two windows, as quiet", async () => {
    const s = await snapshot();
    const edge2 = s.collectors.find((c) => c.name === "edge-2")!;
    expect(edge2).toMatchObject({ quiet: true, lastSeenAt: null, recordsLastMinute: 0, recordsPerSecond: 0, open: [] });
    expect(edge2.windows.every((w) => w.records === 0 && w.bytes === 0)).toBe(true);
    const edge3 = s.collectors.find((c) => c.name === "edge-3")!;
    expect(edge3.quiet).toBe(true);
    expect(s.now - edge3.lastSeenAt!).toBeGreaterThan(2 * WINDOW_MS);
    // Its batch was received three windows ago: not part of the last minute.
    expect(edge3.recordsLastMinute).toBe(0);
    expect(edge3.windows[0]).toEqual({ start: open - 3 * WINDOW_MS, records: 1, bytes: 500, packets: 1 });
  });

  it("tells a collector that only received sample files (imports only) from one that never sent: not quiet", async () => {
    const range = `from=${open - 3 * WINDOW_MS}&to=${open + WINDOW_MS}&collectors=edge-1`;
    const file = await fetch(`${t.url}/api/v1/samples?${range}`, { headers: { authorization: `Bearer ${riverlineKey}` } });
    expect(file.status).toBe(200);
    // A key imports only into its own collector: an ingest key of archive.
    const riverlineId = Number((await t.server.db.$client.execute("SELECT id FROM tenants WHERE slug = 'riverline'")).rows[0][0]);
    const archiveKey = (await keyFor(t.server, riverlineId, "archive", "ingest")).key;
    const imported = await fetch(`${t.url}/api/v1/samples?collector=archive`, {
      method: "POST",
      headers: { authorization: `Bearer ${archiveKey}`, "content-type": "application/json" },
      body: await file.text(),
    });
    expect(imported.status).toBe(200);
    const s = await snapshot();
    expect(s.collectors.find((c) => c.name === "archive")).toMatchObject({ lastSeenAt: null, importsOnly: true, quiet: false, recordsLastMinute: 0, copyOf: ["edge-1"] });
    expect(s.collectors.find((c) => c.name === "edge-2")).toMatchObject({ lastSeenAt: null, importsOnly: false, quiet: true });
  });

  it("serves the page and its data to a viewer; 404 to a member of another tenant; sign-in for nobody", async () => {
    const page = await viewer.fetch("/t/riverline/intake");
    expect(page.status).toBe(200);
    const html = await page.text();
    expect(html).toMatch(/>Intake</);
    // The figures arrive by polling in the browser; the server renders the loading state.
    expect(html).toContain("Reading ingest counters");

    expect((await outsider.fetch("/t/riverline/intake")).status).toBe(404);
    const foreign = await outsider.fetch("/t/riverline/intake-data");
    expect(foreign.status).toBe(404);
    expect(await foreign.text()).not.toContain("edge-1");
    // The outsider's own tenant shows only its own collector.
    const own = await outsider.fetch("/t/tributary/intake-data");
    expect(((await own.json()) as IntakeSnapshot).collectors.map((c) => c.name)).toEqual(["foreign-edge"]);

    const anonymous = await fetch(`${t.url}/t/riverline/intake-data`, { redirect: "manual" });
    expect(anonymous.status).toBe(302);
    expect(anonymous.headers.get("location")).toMatch(/^\/signin\?returnTo=/);
  });
});
