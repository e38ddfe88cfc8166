import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { createTenant } from "~/tenants.server";
import { startTestServer, type TestServer } from "../helpers/server";
import { signIn } from "../helpers/session";

// Console sign-in through the local fake GitHub (OAuth 2.0 authorization code flow,
// RFC 6749 §4.1: authorize → code → token), sessions and tenant guards.
describe("console sign-in", () => {
  let t: TestServer;
  beforeAll(async () => {
    t = await startTestServer();
    const tenant = await createTenant(t.server.db, { slug: "riverline" });
    await createTenant(t.server.db, { slug: "tributary" });
    const ada = await ensureUserByEmail(t.server.db, "ada@example.com");
    await setMembership(t.server.db, ada.id, tenant.id, "admin");
  });
  afterAll(() => t?.close());

  it("sends an anonymous visitor of a console page to sign in, with a way back", async () => {
    const res = await fetch(`${t.url}/t/riverline`, { redirect: "manual" });
    expect(res.status).toBe(302);
    expect(res.headers.get("location")).toBe("/signin?returnTo=%2Ft%2Friverline");
  });

  it("signs in through the fake GitHub, links the granted e-mail and lands on the tenant", async () => {
    const ada = await signIn(t.url, "ada-admin");
    const home = await ada.fetch("/console");
    expect(home.status).toBe(302);
    expect(home.headers.get("location")).toBe("/t/riverline/slice");
    const layout = await ada.fetch("/t/riverline");
    expect(layout.status).toBe(302);
    const row = (await t.server.db.$client.execute("SELECT github_id, login FROM users WHERE email = 'ada@example.com'")).rows[0];
    expect(row).toMatchObject({ github_id: 1001, login: "ada-admin" });
    const ledger = (await t.server.db.$client.execute("SELECT action, actor FROM audit_log WHERE action = 'sign-in'")).rows;
    expect(ledger.map((r) => r.actor)).toContain("ada-admin");
  });

  it("answers 404 for a tenant the user does not belong to, and for one that does not exist", async () => {
    const ada = await signIn(t.url, "ada-admin");
    expect((await ada.fetch("/t/tributary")).status).toBe(404);
    expect((await ada.fetch("/t/no-such-tenant")).status).toBe(404);
  });

  it("shows a person without tenants how to get access", async () => {
    const oskar = await signIn(t.url, "oskar-outsider");
    const page = await oskar.fetch("/console");
    expect(page.status).toBe(200);
    expect(await page.text()).toContain("You do not belong to any tenant yet");
  });

  it("signs out with a POST and forgets the session", async () => {
    const ada = await signIn(t.url, "ada-admin");
    const out = await ada.post("/signout", {});
    expect(out.status).toBe(302);
    ada.jar.store(out);
    expect((await ada.fetch("/console")).headers.get("location")).toMatch(/^\/signin/);
  });

  it("refuses to return to another site after sign-in (no open redirect)", async () => {
    const eve = await signIn(t.url, "ada-admin", "//attacker.example/");
    const landing = await eve.fetch("/signin?returnTo=//attacker.example/");
    expect(landing.headers.get("location")).toBe("/console");
  });
});
