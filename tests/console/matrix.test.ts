import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import type { Role } from "~/db/schema.server";
import { parseFlowRecord } from "~/flow/record";
import { createTenant, ensureCollector } from "~/tenants.server";
import { startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

// Every console route and session-reachable API route × every role × a member of another
// tenant × nobody signed in. The server decides (throwing guards in loaders and actions);
// what the UI hides is not tested here. Role model from the product design: admin ⊃
// engineer ⊃ viewer; a tenant the user does not belong to answers 404 so its existence
// does not leak (common practice for multi-tenant services).

type Who = Role | "outsider" | "anonymous";
const WHO: Who[] = ["admin", "engineer", "viewer", "outsider", "anonymous"];
const LOGIN: Record<Exclude<Who, "anonymous">, string> = { admin: "ada-admin", engineer: "eli-engineer", viewer: "vera-viewer", outsider: "oskar-outsider" };

/** The least role for each console page (GET) and each form (POST). */
const PAGES: [path: string, least: Role][] = [
  ["/t/matrix", "viewer"],
  ["/t/matrix/slice", "viewer"],
  ["/t/matrix/intake", "viewer"],
  ["/t/matrix/intake-data", "viewer"],
  ["/t/matrix/exporters", "viewer"],
  ["/t/matrix/exporters-data", "viewer"],
  ["/t/matrix/calibration", "viewer"],
  ["/t/matrix/merge", "engineer"],
  // A sample file holds kept flow records whole: engineers and admins, as uploads (a range around the test's one record).
  [`/t/matrix/merge/export?from=${encodeURIComponent(new Date(Date.now() - 86_400_000).toISOString())}&to=${encodeURIComponent(new Date(Date.now() + 3_600_000).toISOString())}`, "engineer"],
  ["/t/matrix/keys", "admin"],
  ["/t/matrix/people", "admin"],
  ["/t/matrix/ledger", "admin"],
  ["/t/matrix/settings", "admin"],
];
const FORMS: [path: string, least: Role][] = [
  ["/t/matrix/merge", "engineer"],
  // The sample-file upload takes multipart; the URL-encoded body below is refused (4xx) once the gate lets it through.
  ["/t/matrix/merge/upload", "engineer"],
  // Claims and releases of exporters.
  ["/t/matrix/exporters", "admin"],
  ["/t/matrix/keys", "admin"],
  ["/t/matrix/people", "admin"],
  ["/t/matrix/settings", "admin"],
];
const RANK: Record<Role, number> = { viewer: 0, engineer: 1, admin: 2 };

function expected(who: Who, least: Role, okStatus: number[]): number[] {
  if (who === "anonymous") return [302];
  if (who === "outsider") return [404];
  return RANK[who] >= RANK[least] ? okStatus : [403];
}

describe("access matrix: console routes and API routes × roles × a foreign tenant", () => {
  let t: TestServer;
  const clients = new Map<Who, SignedIn>();
  let queryKey: string;

  beforeAll(async () => {
    t = await startTestServer();
    const tenant = await createTenant(t.server.db, { slug: "matrix" });
    const other = await createTenant(t.server.db, { slug: "elsewhere" });
    for (const [role, email] of [["admin", "ada@example.com"], ["engineer", "eli@example.com"], ["viewer", "vera@example.com"]] as const) {
      await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, email)).id, tenant.id, role);
    }
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "oskar@example.org")).id, other.id, "admin");
    for (const who of WHO) if (who !== "anonymous") clients.set(who, await signIn(t.url, LOGIN[who]));
    ({ key: queryKey } = await tenantWithKey(t.server, "matrix-keys", { scope: "query" }));
    // Data in the tenant under test, so a leak would show as windows > 0.
    const collector = await ensureCollector(t.server.db, tenant.id, "edge-1");
    const record = parseFlowRecord({ src: "192.0.2.1", dst: "198.51.100.1", proto: 6, bytes: 1500, packets: 1 });
    if (!record.ok) throw new Error("test record invalid");
    await t.server.manager.ingest({ tenant, collector, records: [record.record], receivedAt: Date.now() });
  });
  afterAll(() => t?.close());

  const request = (who: Who, path: string, init: RequestInit = {}) =>
    who === "anonymous" ? fetch(`${t.url}${path}`, { redirect: "manual", ...init }) : clients.get(who)!.fetch(path, init);

  for (const [path, least] of PAGES) {
    for (const who of WHO) {
      it(`GET ${path} as ${who}`, async () => {
        const res = await request(who, path);
        // The tenant root redirects members to Slice.
        const ok = path === "/t/matrix" ? [302] : [200];
        expect(expected(who, least, ok)).toContain(res.status);
        if (who === "anonymous") expect(res.headers.get("location")).toMatch(/^\/signin\?returnTo=/);
      });
    }
  }

  for (const [path, least] of FORMS) {
    for (const who of WHO) {
      if (RANK[least] === 0) continue;
      it(`forged POST ${path} as ${who} is refused unless allowed`, async () => {
        const res = await request(who, path, { method: "POST", headers: { "content-type": "application/x-www-form-urlencoded" }, body: "intent=nothing" });
        if (who !== "anonymous" && who !== "outsider" && RANK[who] >= RANK[least]) {
          // Let through the gate: the body is judged (and refused as a 4xx), never a 403, 404 or sign-in redirect.
          expect([302, 403, 404]).not.toContain(res.status);
          expect(res.status).toBeLessThan(500);
        } else expect(expected(who, least, [])).toContain(res.status);
      });
    }
  }

  for (const who of WHO) {
    it(`GET /api/v1/estimate?tenant=matrix with the session of ${who}`, async () => {
      const from = Date.now() - 3600_000;
      const res = await request(who, `/api/v1/estimate?tenant=matrix&from=${from}&to=${Date.now() + 600_000}`);
      expect(who === "anonymous" ? [401] : who === "outsider" ? [404] : [200]).toContain(res.status);
      if (res.status === 200) expect((await res.json()).exact.records).toBe(1);
    });
  }

  it("a query key of one tenant never reads another tenant's estimates through ?tenant=", async () => {
    const res = await fetch(`${t.url}/api/v1/estimate?tenant=matrix&from=0&to=${Date.now() + 600_000}`, { headers: { authorization: `Bearer ${queryKey}` } });
    // The key decides the tenant; the parameter must not widen it.
    if (res.status === 200) expect((await res.json()).windows).toBe(0);
    else expect([400, 403, 404]).toContain(res.status);
  });

  for (const who of WHO) {
    it(`POST /api/v1/flows with the session of ${who} is refused (API keys only)`, async () => {
      const res = await request(who, "/api/v1/flows", { method: "POST", headers: { "content-type": "application/json" }, body: "[]" });
      expect(res.status).toBe(401);
    });
  }
});
