import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { readStoredWindows } from "~/samples/store.server";
import { coordinatedUniform, flowKeyBytes } from "~/sampling/coordinated";
import { runRetention } from "~/retention/rollup.server";
import { createTenant } from "~/tenants.server";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

// The Settings page of the console (/t/:tenant/settings) against a real server: an admin's
// change is validated, recorded in the ledger with old and new values, and used by the
// windows that ingest opens afterwards, while existing reservoirs keep their own k and
// length (each is a separate priority sample: Duffield, Lund, Thorup, J. ACM 54(6), 2007).

// Documentation addresses (RFC 5737); record times in a fixed past hour, so windows do not depend on the clock.
const T0 = Date.UTC(2026, 0, 5, 2, 1);
const HOUR_MS = 3600_000;
const flowsAt = (start: number, n: number) =>
  Array.from({ length: n }, (_, i) => ({
    src: `192.0.2.${i % 250}`,
    dst: "198.51.100.7",
    proto: 6,
    dport: 443,
    bytes: 100 + 37 * i,
    packets: 1 + (i % 4),
    start,
  }));

// A ticked checkbox posts "on"; an unticked one posts nothing (HTML Living Standard, form submission).
const form = (
  values: Partial<Record<"sampleSize" | "windowSeconds" | "weightAttribute" | "retentionDays" | "hourlyRetentionDays" | "hourlySampleSize" | "coordinated", string>>,
) => ({
  sampleSize: "64",
  windowSeconds: "300",
  weightAttribute: "bytes",
  retentionDays: "30",
  hourlyRetentionDays: "365",
  ...values,
});

describe("console Settings", () => {
  let t: TestServer;
  let ada: SignedIn, eli: SignedIn, vera: SignedIn, oskar: SignedIn;
  const sql = async (q: string, args: (string | number)[] = []) => (await t.server.db.$client.execute({ sql: q, args })).rows;
  const post = (key: string, records: object[]) => postFlows(t.url, key, JSON.stringify(records));
  let slugs = 0;

  /** A fresh tenant (k 64, 5-minute windows) with an ingest key and this file's members, so tests do not share settings. */
  async function tenant() {
    const made = await tenantWithKey(t.server, `riverline-${++slugs}`, { sampleSize: 64, windowSeconds: 300 });
    const grants = [
      ["ada@example.com", "admin"],
      ["eli@example.com", "engineer"],
      ["vera@example.com", "viewer"],
    ] as const;
    for (const [email, role] of grants) await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, email)).id, made.tenant.id, role);
    return { ...made, path: `/t/${made.tenant.slug}/settings` };
  }
  const reservoirsOf = (tenantId: number) =>
    sql("SELECT window_start, window_seconds, k, records FROM reservoirs WHERE tenant_id = ? ORDER BY window_seconds, window_start", [tenantId]);
  const settingsOf = async (tenantId: number) =>
    (await sql("SELECT sample_size, window_seconds, weight_attribute, retention_days FROM tenants WHERE id = ?", [tenantId]))[0];

  beforeAll(async () => {
    t = await startTestServer();
    const tributary = await createTenant(t.server.db, { slug: "tributary" });
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "oskar@example.org")).id, tributary.id, "admin");
    [ada, eli, vera, oskar] = await Promise.all(["ada-admin", "eli-engineer", "vera-viewer", "oskar-outsider"].map((login) => signIn(t.url, login)));
  });
  afterAll(() => t?.close());

  it("shows the current settings, that changes apply to new windows, and the privacy caution", async () => {
    const { path } = await tenant();
    const res = await ada.fetch(path);
    expect(res.status).toBe(200);
    const html = await res.text();
    expect(html).toMatch(/id="sampleSize"[^>]*value="64"/);
    expect(html).toMatch(/<option value="300" selected="">5 minutes<\/option>/);
    expect(html).toContain("A change applies to windows created from now on");
    expect(html).toContain("can be personal data");
    expect(html).toContain("follow your data-protection policy and local law");
  });

  it("saves a new k and window length, records old and new in the ledger, and later windows use them while an existing one keeps its own", async () => {
    const { tenant: row, key, path } = await tenant();
    expect((await post(key, flowsAt(T0, 10))).status).toBe(200);
    expect(await reservoirsOf(row.id)).toEqual([{ window_start: Date.UTC(2026, 0, 5, 2, 0), window_seconds: 300, k: 64, records: 10 }]);

    const saved = await ada.post(path, form({ sampleSize: "32", windowSeconds: "900" }));
    expect(saved.status).toBe(200);
    const html = await saved.text();
    expect(html).toContain("Sample size k: 64 → 32");
    expect(html).toContain("Window length: 5 minutes → 15 minutes");
    expect(await settingsOf(row.id)).toEqual({ sample_size: 32, window_seconds: 900, weight_attribute: "bytes", retention_days: 30 });

    const ledger = await sql("SELECT actor, detail FROM audit_log WHERE tenant_id = ? AND action = 'settings.update'", [row.id]);
    expect(ledger).toHaveLength(1);
    expect(ledger[0].actor).toBe("ada-admin");
    expect(JSON.parse(String(ledger[0].detail))).toEqual({ old: { sampleSize: 64, windowSeconds: 300 }, new: { sampleSize: 32, windowSeconds: 900 } });

    // The same instant and an hour later: both land in new 15-minute windows with k = 32.
    const after = await post(key, [...flowsAt(T0, 5), ...flowsAt(T0 + HOUR_MS, 5)]);
    expect(after.status).toBe(200);
    const answer = await after.json();
    expect(answer.windows.map((w: { start: string; end: string; k: number }) => [w.start, w.end, w.k])).toEqual([
      ["2026-01-05T02:00:00.000Z", "2026-01-05T02:15:00.000Z", 32],
      ["2026-01-05T03:00:00.000Z", "2026-01-05T03:15:00.000Z", 32],
    ]);
    expect(await reservoirsOf(row.id)).toEqual([
      { window_start: Date.UTC(2026, 0, 5, 2, 0), window_seconds: 300, k: 64, records: 10 },
      { window_start: Date.UTC(2026, 0, 5, 2, 0), window_seconds: 900, k: 32, records: 5 },
      { window_start: Date.UTC(2026, 0, 5, 3, 0), window_seconds: 900, k: 32, records: 5 },
    ]);
  });

  it("keeps an existing window's k when k changes: its reservoir still keeps at most the old k", async () => {
    const { tenant: row, key, path } = await tenant();
    await t.server.db.$client.execute({ sql: "UPDATE tenants SET sample_size = 16 WHERE id = ?", args: [row.id] });
    expect((await post(key, flowsAt(T0, 40))).status).toBe(200);

    expect((await ada.post(path, form({ sampleSize: "128" }))).status).toBe(200);
    const same = await (await post(key, flowsAt(T0, 40))).json();
    // k records kept, never more (the reservoir's bound, Duffield–Lund–Thorup §2).
    expect(same.windows).toEqual([expect.objectContaining({ start: "2026-01-05T02:00:00.000Z", records: 40, k: 16, kept: 16 })]);
    const next = await (await post(key, flowsAt(T0 + HOUR_MS, 40))).json();
    // Fewer records than k: the new window keeps every one of them.
    expect(next.windows).toEqual([expect.objectContaining({ start: "2026-01-05T03:00:00.000Z", records: 40, k: 128, kept: 40 })]);
  });

  it("answers 400 naming the field for each invalid value, and changes nothing", async () => {
    const { tenant: row, path } = await tenant();
    const cases: [Record<string, string>, string][] = [
      [form({ sampleSize: "8" }), "Sample size k must be at least 16."],
      [form({ sampleSize: "70000" }), "Sample size k must be at most 65536."],
      [form({ sampleSize: "12.5" }), "Sample size k must be a whole number."],
      [form({ sampleSize: "" }), "Sample size k is required."],
      [form({ windowSeconds: "120" }), "Window length must be one of 60, 300, 900, 3600 seconds."],
      [form({ weightAttribute: "flows" }), "Weight attribute must be bytes or packets."],
      [form({ retentionDays: "0" }), "Fine windows kept (days) must be at least 1."],
      [form({ retentionDays: "4000", hourlyRetentionDays: "4000" }), "Fine windows kept (days) must be at most 3650."],
      [{ sampleSize: "64", windowSeconds: "300", weightAttribute: "bytes", hourlyRetentionDays: "365" }, "Fine windows kept (days) is required."],
      [form({ hourlyRetentionDays: "3651" }), "Hourly windows kept until (days old) must be at most 3650."],
      [form({ hourlyRetentionDays: "" }), "Hourly windows kept until (days old) is required."],
      [form({ coordinated: "yes" }), "Coordinated priorities must be ticked or not."],
    ];
    for (const [fields, message] of cases) {
      const res = await ada.post(path, fields);
      expect(res.status, message).toBe(400);
      const html = await res.text();
      expect(html, message).toContain(message);
      expect(html, message).toContain("Not saved");
    }
    expect(await settingsOf(row.id)).toEqual({ sample_size: 64, window_seconds: 300, weight_attribute: "bytes", retention_days: 30 });
    expect(await sql("SELECT id FROM audit_log WHERE tenant_id = ?", [row.id])).toHaveLength(0);
  });

  it("saves weight and retention, and says so when nothing changed without writing to the ledger", async () => {
    const { tenant: row, path } = await tenant();
    const saved = await ada.post(path, form({ weightAttribute: "packets", retentionDays: "7" }));
    expect(saved.status).toBe(200);
    expect(await saved.text()).toContain("Fine windows kept (days): 30 days → 7 days");
    expect(await settingsOf(row.id)).toMatchObject({ weight_attribute: "packets", retention_days: 7 });

    const unchanged = await ada.post(path, form({ weightAttribute: "packets", retentionDays: "7" }));
    expect(unchanged.status).toBe(200);
    expect(await unchanged.text()).toContain("nothing had changed");
    const ledger = await sql("SELECT detail FROM audit_log WHERE tenant_id = ? AND action = 'settings.update'", [row.id]);
    expect(ledger.map((r) => JSON.parse(String(r.detail)))).toEqual([
      { old: { weightAttribute: "bytes", retentionDays: 30 }, new: { weightAttribute: "packets", retentionDays: 7 } },
    ]);
  });

  it("answers 403 to engineers and viewers, on GET and on a forged POST, and changes nothing", async () => {
    const { tenant: row, path } = await tenant();
    for (const member of [eli, vera]) {
      expect((await member.fetch(path)).status).toBe(403);
      expect((await member.post(path, form({ sampleSize: "16", retentionDays: "3650" }))).status).toBe(403);
    }
    expect(await settingsOf(row.id)).toEqual({ sample_size: 64, window_seconds: 300, weight_attribute: "bytes", retention_days: 30 });
    expect(await sql("SELECT id FROM audit_log WHERE tenant_id = ?", [row.id])).toHaveLength(0);
  });

  it("answers 404 to a member of another tenant, on GET and POST", async () => {
    const { tenant: row, path } = await tenant();
    expect((await oskar.fetch(path)).status).toBe(404);
    expect((await oskar.post(path, form({ sampleSize: "16" }))).status).toBe(404);
    expect((await settingsOf(row.id)).sample_size).toBe(64);
  });

  describe("retention with a roll-up, and coordinated priorities", () => {
    const checkbox = (html: string) => /<input id="coordinated"[^>]*>/.exec(html)?.[0] ?? "";
    const retentionOf = async (tenantId: number) =>
      (await sql("SELECT retention_days, hourly_retention_days, coordinated, coordination_secret FROM tenants WHERE id = ?", [tenantId]))[0];

    it("shows both retention fields, what the roll-up does, the privacy caution and the coordination checkbox", async () => {
      const { path } = await tenant();
      const html = await (await ada.fetch(path)).text();
      expect(html).toMatch(/id="retentionDays"[^>]*value="30"/);
      expect(html).toMatch(/id="hourlyRetentionDays"[^>]*value="365"/);
      expect(html).toContain("Fine windows kept (days)");
      expect(html).toContain("Hourly windows kept until (days old)");
      expect(html).toContain("Fine windows (shorter than an hour) become hourly ones after N days (the first field): the same unbiased estimates");
      expect(html).toContain("with wider intervals for every subset");
      expect(html).toContain("Every window is deleted M days (the second field, at least N) after it ended");
      expect(html).toContain("can be personal data");
      expect(checkbox(html)).toMatch(/type="checkbox"/);
      expect(checkbox(html)).not.toContain("checked");
      expect(html).toContain("so a merge of those collectors counts it once");
      expect(html).toContain("windows sampled before are merged as independent samples");
    });

    it("refuses hourly days below the fine-window days with a clear message, and accepts them equal", async () => {
      const { tenant: row, path } = await tenant();
      for (const fields of [form({ retentionDays: "30", hourlyRetentionDays: "29" }), form({ retentionDays: "400" })]) {
        const res = await ada.post(path, fields);
        expect(res.status).toBe(400);
        const html = await res.text();
        expect(html).toMatch(/Hourly windows kept until \(days old\) must be at least (30|400), the days fine windows are kept/);
        expect(html).toContain("Not saved");
      }
      expect(await retentionOf(row.id)).toMatchObject({ retention_days: 30, hourly_retention_days: 365 });

      // M = N: fine windows are deleted at N days, without a roll-up.
      const saved = await ada.post(path, form({ retentionDays: "90", hourlyRetentionDays: "90" }));
      expect(saved.status).toBe(200);
      const html = await saved.text();
      expect(html).toContain("Fine windows kept (days): 30 days → 90 days");
      expect(html).toContain("Hourly windows kept until (days old): 365 days → 90 days");
      expect(await retentionOf(row.id)).toMatchObject({ retention_days: 90, hourly_retention_days: 90 });
      const ledger = await sql("SELECT detail FROM audit_log WHERE tenant_id = ? AND action = 'settings.update'", [row.id]);
      expect(ledger.map((r) => JSON.parse(String(r.detail)))).toEqual([
        { old: { retentionDays: 30, hourlyRetentionDays: 365 }, new: { retentionDays: 90, hourlyRetentionDays: 90 } },
      ]);
    });

    it("makes a coordination secret when coordination is first turned on, never changes it, and never shows it", async () => {
      const { tenant: row, key, path } = await tenant();
      expect(await retentionOf(row.id)).toMatchObject({ coordinated: 0, coordination_secret: null });

      const on = await ada.post(path, form({ coordinated: "on" }));
      expect(on.status).toBe(200);
      expect(await on.text()).toContain("Coordinated priorities: off → on");
      const first = await retentionOf(row.id);
      expect(first.coordinated).toBe(1);
      // 16 random bytes as hex (the SipHash-2-4 key size: Aumasson, Bernstein, "SipHash: a fast short-input PRF", 2012).
      const secret = String(first.coordination_secret);
      expect(secret).toMatch(/^[0-9a-f]{32}$/);
      const page = await (await ada.fetch(path)).text();
      expect(checkbox(page)).toContain('checked=""');
      expect(page).not.toContain(secret);

      expect((await ada.post(path, form({}))).status).toBe(200);
      expect(await retentionOf(row.id)).toMatchObject({ coordinated: 0, coordination_secret: secret });
      expect((await ada.post(path, form({ coordinated: "on" }))).status).toBe(200);
      expect(await retentionOf(row.id)).toMatchObject({ coordinated: 1, coordination_secret: secret });

      const ledger = await sql("SELECT detail FROM audit_log WHERE tenant_id = ? AND action = 'settings.update' ORDER BY id", [row.id]);
      expect(ledger.map((r) => JSON.parse(String(r.detail)))).toEqual([
        { old: { coordinated: false }, new: { coordinated: true } },
        { old: { coordinated: true }, new: { coordinated: false } },
        { old: { coordinated: false }, new: { coordinated: true } },
      ]);
      for (const r of ledger) expect(String(r.detail)).not.toContain(secret);

      // From now on the same flow sent by two collectors gets the same priority w/u, with u
      // from the keyed hash of its flow key (DESIGN: coordinated priorities).
      const other = await keyFor(t.server, row.id, "edge-2");
      const flow = { src: "192.0.2.10", dst: "198.51.100.20", proto: 17, sport: 5353, dport: 53, bytes: 900, packets: 3, start: T0 };
      for (const k of [key, other.key]) expect((await post(k, [flow])).status).toBe(200);
      const kept = (await readStoredWindows(t.server.db.$client, row.id, { from: T0 - HOUR_MS, to: T0 + HOUR_MS })).map((w) => w.kept[0]);
      expect(kept).toHaveLength(2);
      expect(kept[0].priority).toBe(kept[1].priority);
      const u = coordinatedUniform(Uint8Array.from(Buffer.from(secret, "hex")), flowKeyBytes(kept[0].item));
      expect(kept[0].priority).toBe(900 / u);
    });
  });

  it("validates the hourly sample size against k × windows per hour, records it in the ledger, and the roll-up keeps that many", async () => {
    const { tenant: row, key, path } = await tenant();
    // k = 64, 5-minute windows: an hour's fine windows keep at most 12 × 64 = 768 records
    // together, so a larger hourly K has nothing more to keep (app/sampling/rollup.ts).
    const cases: [Record<string, string>, string][] = [
      [form({ hourlySampleSize: "769" }), "Hourly sample size must be at most 768, the sum of the k of the 12 fine windows of an hour (64 × 12): more has nothing to keep."],
      [form({ hourlySampleSize: "8" }), "Hourly sample size must be at least 16."],
      [form({ hourlySampleSize: "1e3" }), "Hourly sample size must be a whole number."],
      [form({ windowSeconds: "3600", hourlySampleSize: "128" }), "Hourly sample size must be at most 64: hour-long windows are not rolled up, so it cannot exceed k."],
    ];
    for (const [fields, message] of cases) {
      const res = await ada.post(path, fields);
      expect(res.status, message).toBe(400);
      expect(await res.text(), message).toContain(message);
    }
    expect(await sql("SELECT id FROM audit_log WHERE tenant_id = ?", [row.id])).toHaveLength(0);

    const saved = await ada.post(path, form({ hourlySampleSize: "256" }));
    expect(saved.status).toBe(200);
    expect(await saved.text()).toContain("Hourly sample size: the sample size k → 256");
    expect((await sql("SELECT hourly_sample_size FROM tenants WHERE id = ?", [row.id]))[0].hourly_sample_size).toBe(256);
    const ledger = await sql("SELECT detail FROM audit_log WHERE tenant_id = ? AND action = 'settings.update'", [row.id]);
    expect(ledger.map((r) => JSON.parse(String(r.detail)))).toEqual([{ old: { hourlySampleSize: null }, new: { hourlySampleSize: 256 } }]);

    // Twelve 5-minute windows of 100 records each (64 kept in each), then a roll-up far later.
    const hour = Date.UTC(2026, 0, 5, 2, 0);
    for (let w = 0; w < 12; w++) expect((await post(key, flowsAt(hour + w * 300_000, 100))).status).toBe(200);
    // The records' own sums, computed here from what was sent.
    const sent = Array.from({ length: 12 }, (_, w) => flowsAt(hour + w * 300_000, 100)).flat();
    const exact = { records: sent.length, bytes: sent.reduce((s, r) => s + r.bytes, 0), packets: sent.reduce((s, r) => s + r.packets, 0) };
    await runRetention({ db: t.server.db, node: "test-node" }, hour + 40 * 24 * HOUR_MS, { tenant: row.slug });
    const hourly = await sql("SELECT window_seconds, k, records, bytes, packets, (SELECT count(*) FROM kept_records k WHERE k.reservoir_id = r.id) AS kept FROM reservoirs r WHERE tenant_id = ?", [row.id]);
    expect(hourly).toHaveLength(1);
    // Exact counters add up exactly (DLT 2007 merge: counters are not sampled).
    expect(hourly[0]).toMatchObject({ window_seconds: 3600, k: 256, records: exact.records });
    expect([Number(hourly[0].bytes), Number(hourly[0].packets)]).toEqual([exact.bytes, exact.packets]);
    // More than the tenant's k (what the merge rule of DLT 2007 alone would keep), at most K.
    expect(Number(hourly[0].kept)).toBeGreaterThan(64);
    expect(Number(hourly[0].kept)).toBeLessThanOrEqual(256);
  });

  it("shows the sample-size advisor with the tenant's own figures", async () => {
    const { key, path } = await tenant();
    const now = Date.now();
    expect((await post(key, flowsAt(now - 3 * HOUR_MS, 200))).status).toBe(200);
    const html = await (await ada.fetch(path)).text();
    expect(html).toContain("Sample-size advisor");
    expect(html).toContain("From the 1 most recent fine windows (at most 96, within the last 24 hours");
    expect(html).toMatch(/64 \(current\)/);
  });
});
