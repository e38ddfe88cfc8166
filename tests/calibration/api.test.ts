import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { runCalibrationChecks } from "~/calibration/check.server";
import type { CalibrationReport } from "~/calibration/report.server";
import { wilsonInterval } from "~/calibration/wilson";
import { windowChecks, type Tenant } from "~/db/schema.server";
import type { FlowRecord } from "~/flow/record";
import { windowStartOf } from "~/ingest/window";
import { parseAddress } from "~/net/address";
import { seededUniform } from "~/sampling/uniform";
import { createTenant, ensureCollector } from "~/tenants.server";
import { keyFor, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

// GET /api/v1/calibration and the Calibration page against a real server (temporary SQLite
// file). Authentication follows /api/v1/estimate: a query-scope key, or a console session with
// ?tenant= (401 unauthenticated, 403 wrong scope, 404 not a member; see tests/query and
// tests/console/slice.test.ts). The figures are checked against the window_checks rows read
// here and Wilson's interval (JASA 22, 1927; tested in wilson.test.ts).

const WINDOW_SECONDS = 300;
const WINDOW_MS = WINDOW_SECONDS * 1000;

/** Invented records in documentation space (RFC 5737); Pareto bytes, shape 1.2 (common practice for flow sizes). */
function records(seed: number, n: number, windowStart: number): FlowRecord[] {
  const u = seededUniform(seed);
  return Array.from({ length: n }, () => {
    const bytes = Math.max(40, Math.round(40 / Math.pow(u(), 1 / 1.2)));
    const start = windowStart + Math.floor(u() * WINDOW_MS);
    return {
      src: parseAddress(`192.0.2.${Math.floor(u() * 256)}`),
      dst: parseAddress(`198.51.100.${Math.floor(u() * 256)}`),
      sport: 1024 + Math.floor(u() * 60_000),
      dport: 443,
      proto: 6,
      bytes: BigInt(bytes),
      packets: BigInt(Math.max(1, Math.ceil(bytes / 1000))),
      start,
      end: start + 1000,
      ingressInterface: null,
      egressInterface: null,
      srcAs: null,
      dstAs: null,
    };
  });
}

describe("GET /api/v1/calibration and /t/:tenant/calibration", () => {
  let t: TestServer;
  let riverline: Tenant;
  const keys = { query: "", ingest: "", tributary: "" };
  let viewer: SignedIn;
  let outsider: SignedIn;

  async function feed(tenant: Tenant, collector: string, windows: number, seed: number) {
    const c = await ensureCollector(t.server.db, tenant.id, collector);
    // Closed windows of the last few hours, well inside the report's last day.
    const last = windowStartOf(Date.now(), WINDOW_SECONDS) - 3 * WINDOW_MS;
    for (let w = 0; w < windows; w++) {
      await t.server.manager.ingest({ tenant, collector: c, records: records(seed + w, 120, last - w * WINDOW_MS), receivedAt: Date.now() });
    }
  }

  beforeAll(async () => {
    // The server's own timer off: the test runs the checks itself.
    t = await startTestServer({ env: { CALIBRATION_INTERVAL_MINUTES: "0" }, uniform: seededUniform(64) });
    const r = await tenantWithKey(t.server, "riverline", { collector: "edge-1", scope: "query", sampleSize: 16, windowSeconds: WINDOW_SECONDS });
    riverline = r.tenant;
    keys.query = r.key;
    keys.ingest = (await keyFor(t.server, riverline.id, "edge-1", "ingest")).key;
    const tributary = await tenantWithKey(t.server, "tributary", { collector: "foreign-edge", scope: "query", sampleSize: 16, windowSeconds: WINDOW_SECONDS });
    keys.tributary = tributary.key;
    const quiet = await createTenant(t.server.db, { slug: "quiet", sampleSize: 16, windowSeconds: WINDOW_SECONDS });

    await feed(riverline, "edge-1", 24, 100);
    await feed(riverline, "edge-2", 12, 200);
    await feed(tributary.tenant, "foreign-edge", 5, 300);
    expect((await runCalibrationChecks(t.server.db, Date.now())).windows).toBe(24 + 12 + 5);

    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "vera@example.com")).id, riverline.id, "viewer");
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "vera@example.com")).id, quiet.id, "viewer");
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "oskar@example.org")).id, tributary.tenant.id, "admin");
    viewer = await signIn(t.url, "vera-viewer");
    outsider = await signIn(t.url, "oskar-outsider");
  });
  afterAll(() => t?.close());

  const withKey = (key: string | null, search = "") =>
    fetch(`${t.url}/api/v1/calibration${search}`, { headers: key === null ? {} : { authorization: `Bearer ${key}` } });

  /** The riverline checks as stored, per metric: [checked, covered]. */
  async function stored(): Promise<Map<string, [number, number]>> {
    const rows = (await t.server.db.select().from(windowChecks)).filter((r) => r.tenantId === riverline.id);
    const out = new Map<string, [number, number]>();
    for (const r of rows) {
      const [n, c] = out.get(r.metric) ?? [0, 0];
      out.set(r.metric, [n + 1, c + (r.covered ? 1 : 0)]);
    }
    return out;
  }

  describe("authentication, as /api/v1/estimate", () => {
    it("answers 401 without a key or session, and with an unknown key", async () => {
      const none = await withKey(null);
      expect(none.status).toBe(401);
      expect(((await none.json()) as any).error.code).toBe("unauthenticated");
      expect((await withKey("weir_00000000_AAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAA")).status).toBe(401);
      // ?tenant= without a session is not a way in either.
      expect((await withKey(null, "?tenant=riverline")).status).toBe(401);
    });

    it("answers 403 to an ingest-only key", async () => {
      const res = await withKey(keys.ingest);
      expect(res.status).toBe(403);
      expect(((await res.json()) as any).error.code).toBe("forbidden");
    });

    it("answers 404 to a session for a tenant it does not belong to, or one that does not exist, alike", async () => {
      for (const slug of ["riverline", "no-such-tenant"]) {
        const res = await outsider.fetch(`/api/v1/calibration?tenant=${slug}`);
        expect(res.status, slug).toBe(404);
        expect(((await res.json()) as any).error).toEqual({ code: "not_found", message: "No such tenant, or you are not a member of it." });
      }
    });

    it("answers 400 with the parameter named for a session without ?tenant=, a key naming another tenant, and unknown parameters", async () => {
      const cases: [Promise<Response>, string][] = [
        [viewer.fetch("/api/v1/calibration"), "tenant"],
        [withKey(keys.query, "?tenant=tributary"), "tenant"],
        [withKey(keys.query, "?from=2026-01-01"), "from"],
      ];
      for (const [pending, path] of cases) {
        const res = await pending;
        expect(res.status).toBe(400);
        const body = (await res.json()) as any;
        expect(body.error.code).toBe("invalid_query");
        expect(body.error.details[0].path).toBe(path);
      }
    });

    it("answers 405 to POST", async () => {
      const res = await fetch(`${t.url}/api/v1/calibration`, { method: "POST", headers: { authorization: `Bearer ${keys.query}` } });
      expect(res.status).toBe(405);
      expect(((await res.json()) as any).error.code).toBe("method_not_allowed");
    });
  });

  describe("the report", () => {
    it("gives a query key its own tenant's windows only, per period, metric, collector and window length, as the stored checks count them", async () => {
      const res = await withKey(keys.query);
      expect(res.status).toBe(200);
      expect(res.headers.get("cache-control")).toBe("no-store");
      const report = (await res.json()) as CalibrationReport;
      expect(report.tenant).toBe("riverline");
      expect(report.coverageInterval.name).toBe("wilson");
      expect(report.periods.map((p) => p.period)).toEqual(["day", "week", "month"]);
      expect(JSON.stringify(report)).not.toContain("foreign-edge");
      const counts = await stored();
      for (const p of report.periods) {
        // Every window lies in the last day, so every period holds all of them.
        for (const metric of ["bytes", "packets", "flows"]) {
          const [checked, covered] = counts.get(metric)!;
          expect(checked).toBe(36);
          const all = p.overall.find((r) => r.metric === metric)!;
          expect(all).toMatchObject({ checked, covered, coverage: covered / checked, coverage95: wilsonInterval(covered, checked) });
        }
        expect(p.rows.map((r) => [r.collector, r.windowSeconds, r.metric, r.checked])).toEqual([
          ["edge-1", 300, "bytes", 24],
          ["edge-1", 300, "packets", 24],
          ["edge-1", 300, "flows", 24],
          ["edge-2", 300, "bytes", 12],
          ["edge-2", 300, "packets", 12],
          ["edge-2", 300, "flows", 12],
        ]);
      }
    });

    it("gives a viewer's session the same report with ?tenant=", async () => {
      const viaSession = await viewer.fetch("/api/v1/calibration?tenant=riverline");
      expect(viaSession.status).toBe(200);
      const viaKey = (await (await withKey(keys.query)).json()) as CalibrationReport;
      const session = (await viaSession.json()) as CalibrationReport;
      // The same figures; only the instant each was read differs.
      const figures = (r: CalibrationReport) => r.periods.map(({ period, overall, rows }) => ({ period, overall, rows }));
      expect(figures(session)).toEqual(figures(viaKey));
    });
  });

  describe("the Calibration page", () => {
    it("shows a viewer each period's coverage with its Wilson interval, from the stored checks", async () => {
      const res = await viewer.fetch("/t/riverline/calibration");
      expect(res.status).toBe(200);
      const html = await res.text();
      expect(html).toContain("<h1");
      expect(html).toContain("Calibration");
      for (const title of ["Last day", "Last week", "Last 30 days"]) expect(html).toContain(title);
      const [checked, covered] = (await stored()).get("bytes")!;
      const [low, high] = wilsonInterval(covered, checked)!;
      // React puts comment markers between adjacent text parts; compare the text alone.
      const text = html.replace(/<!-- -->/g, "");
      expect(text).toContain(`${(100 * low).toFixed(1)}% – ${(100 * high).toFixed(1)}%`);
      expect(text).toContain(`${((100 * covered) / checked).toFixed(1)}%`);
      expect(text).toContain("edge-2");
      expect(text).not.toContain("No window checked yet");
    });

    it("shows the empty state where no window was checked", async () => {
      const res = await viewer.fetch("/t/quiet/calibration");
      expect(res.status).toBe(200);
      expect(await res.text()).toContain("No window checked yet");
    });

    it("is 404 for a non-member and sends a stranger to sign in", async () => {
      expect((await outsider.fetch("/t/riverline/calibration")).status).toBe(404);
      const stranger = await fetch(`${t.url}/t/riverline/calibration`, { redirect: "manual" });
      expect(stranger.status).toBe(302);
      expect(stranger.headers.get("location")).toMatch(/^\/signin\?/);
    });

    it("is linked from the Intake page's header, not from the main navigation", async () => {
      const intake = await (await viewer.fetch("/t/riverline/intake")).text();
      expect(intake).toContain('href="/t/riverline/calibration"');
      const slice = await (await viewer.fetch("/t/riverline/slice")).text();
      expect(slice).not.toContain('href="/t/riverline/calibration"');
    });
  });
});
