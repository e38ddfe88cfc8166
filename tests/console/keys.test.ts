import { createHash } from "node:crypto";
import { readdirSync, readFileSync } from "node:fs";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { createApiKey, scopesFor } from "~/auth/api-keys.server";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { createTenant, ensureCollector } from "~/tenants.server";
import { postFlows, startTestServer, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

// The Keys page of the console (/t/:tenant/keys) against a real server: keys are made
// through the form action, shown once, stored as SHA-256 only, and revoked for good.

const SECRET = /value="(weir_[0-9a-f]{8}_[A-Za-z0-9_-]{32})"/;
const flows = JSON.stringify([{ src: "192.0.2.10", dst: "198.51.100.20", sport: 51000, dport: 443, proto: 6, bytes: 1500, packets: 3 }]);
const sha256 = (text: string) => createHash("sha256").update(text).digest("hex");

describe("console Keys", () => {
  let t: TestServer;
  let riverlineId: number;
  let ada: SignedIn, eli: SignedIn, vera: SignedIn, oskar: SignedIn;
  const sql = async (q: string, args: (string | number)[] = []) => (await t.server.db.$client.execute({ sql: q, args })).rows;

  /** Creates a key through the form action, as the browser's form would post it. */
  async function createKey(client: SignedIn, collector: string, scope = "ingest") {
    const res = await client.post("/t/riverline/keys", { intent: "create", collector, scope });
    const html = await res.text();
    const secret = SECRET.exec(html)?.[1];
    return { res, html, secret, prefix: secret?.slice(0, "weir_".length + 8) };
  }
  /** The table row of one key, as rendered. */
  async function rowOf(prefix: string) {
    const html = await (await ada.fetch("/t/riverline/keys")).text();
    return new RegExp(`<tr[^>]*data-prefix="${prefix}"[^>]*>(.*?)</tr>`).exec(html)?.[1] ?? "";
  }

  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await createTenant(t.server.db, { slug: "riverline", name: "Riverline (test)" });
    const tributary = await createTenant(t.server.db, { slug: "tributary" });
    riverlineId = riverline.id;
    await ensureCollector(t.server.db, riverline.id, "pop-north");
    const grants = [
      ["ada@example.com", riverline.id, "admin"],
      ["eli@example.com", riverline.id, "engineer"],
      ["vera@example.com", riverline.id, "viewer"],
      ["oskar@example.org", tributary.id, "admin"],
    ] as const;
    for (const [email, tenantId, role] of grants) {
      const user = await ensureUserByEmail(t.server.db, email);
      await setMembership(t.server.db, user.id, tenantId, role);
    }
    [ada, eli, vera, oskar] = await Promise.all(["ada-admin", "eli-engineer", "vera-viewer", "oskar-outsider"].map((login) => signIn(t.url, login)));
  });
  afterAll(() => t?.close());

  it("creates a key for a new collector and shows its secret once, storing only the SHA-256", async () => {
    const { res, html, secret, prefix } = await createKey(ada, "pop-west");
    expect(res.status).toBe(200);
    expect(secret).toBeDefined();
    expect(html).toContain("it will not be shown again");
    // The ready curl line carries the secret as a Bearer token (RFC 6750 §2.1).
    expect(html).toContain(`-H &quot;Authorization: Bearer ${secret}&quot;`);
    // A page holding a secret must not be cached anywhere (RFC 9111 §5.2.2.5, no-store).
    expect(res.headers.get("cache-control")).toBe("no-store");

    // FIPS 180-4 SHA-256, computed with node:crypto.
    const [row] = await sql("SELECT k.hash, k.scopes, k.created_by, c.name FROM api_keys k JOIN collectors c ON c.id = k.collector_id WHERE k.prefix = ?", [
      prefix!,
    ]);
    expect(row).toMatchObject({ hash: sha256(secret!), scopes: "ingest", created_by: "ada-admin", name: "pop-west" });
    // Nothing on disk holds the secret itself: not the database, its WAL, nor the ledger.
    for (const file of readdirSync(t.dir)) expect(readFileSync(join(t.dir, file)).includes(secret!)).toBe(false);
    const [audit] = await sql("SELECT actor, target, detail FROM audit_log WHERE action = 'key.create' AND target = ?", [prefix!]);
    expect(audit.actor).toBe("ada-admin");
    expect(JSON.parse(String(audit.detail))).toEqual({ prefix, collector: "pop-west", scope: "ingest" });

    // The key works at once (common practice: a key is usable as soon as it is shown).
    expect((await postFlows(t.url, secret!, flows)).status).toBe(200);

    const page = await ada.fetch("/t/riverline/keys");
    expect(page.status).toBe(200);
    const listed = await page.text();
    expect(listed).toContain(prefix);
    expect(listed).not.toContain(secret);
  });

  it("lists keys newest first with who created them and when they were last used", async () => {
    const older = await createKey(ada, "pop-north", "both");
    const newer = await createKey(ada, "pop-north", "query");
    const html = await (await ada.fetch("/t/riverline/keys")).text();
    expect(html.indexOf(newer.prefix!)).toBeLessThan(html.indexOf(older.prefix!));

    expect(await rowOf(older.prefix!)).toMatch(/ingest \+ query.*pop-north.*ada-admin.*never.*active/);
    expect((await postFlows(t.url, older.secret!, flows)).status).toBe(200);
    const used = await rowOf(older.prefix!);
    expect(used).not.toContain("never");
    expect(used).toMatch(/\d{4}-\d{2}-\d{2} \d{2}:\d{2}.*\d{4}-\d{2}-\d{2} \d{2}:\d{2}/);
  });

  it("makes a query key that reads estimates but may not post flows", async () => {
    const { secret, html } = await createKey(ada, "dashboard-1", "query");
    expect(html).toContain("/api/v1/estimate");
    // Insufficient scope is 403, not 401 (RFC 6750 §3.1).
    expect((await postFlows(t.url, secret!, flows)).status).toBe(403);
    const from = new Date(Date.now() - 3600_000).toISOString();
    const to = new Date(Date.now() + 60_000).toISOString();
    const estimate = await fetch(`${t.url}/api/v1/estimate?${new URLSearchParams({ from, to })}`, { headers: { authorization: `Bearer ${secret}` } });
    expect(estimate.status).toBe(200);
  });

  it("revokes after a confirm step, and the key answers 401 at once", async () => {
    const { secret, prefix } = await createKey(ada, "pop-south");
    expect((await postFlows(t.url, secret!, flows)).status).toBe(200);

    const confirm = await (await ada.fetch(`/t/riverline/keys?revoke=${prefix}`)).text();
    expect(confirm).toContain(`Revoke ${prefix} of collector pop-south?`);
    expect(confirm).toContain("Revoke key</button>");
    expect(await rowOf(prefix!)).toContain("active");

    const revoked = await ada.post("/t/riverline/keys", { intent: "revoke", prefix: prefix! });
    expect(revoked.status).toBe(200);
    expect(await revoked.text()).toContain(`Key ${prefix} (collector pop-south) is revoked`);
    // RFC 6750 §3.1: a revoked token is invalid_token, answered with 401.
    expect((await postFlows(t.url, secret!, flows)).status).toBe(401);
    expect(await rowOf(prefix!)).toContain("revoked");

    const again = await ada.post("/t/riverline/keys", { intent: "revoke", prefix: prefix! });
    expect(again.status).toBe(200);
    expect(await again.text()).toContain("was already revoked");
    const ledger = await sql("SELECT actor, detail FROM audit_log WHERE action = 'key.revoke' AND target = ?", [prefix!]);
    expect(ledger).toHaveLength(1);
    expect(ledger[0].actor).toBe("ada-admin");
    expect(JSON.parse(String(ledger[0].detail))).toMatchObject({ prefix, collector: "pop-south" });
  });

  it("rejects invalid collector names with 400 and a message, creating nothing", async () => {
    const before = await sql("SELECT (SELECT COUNT(*) FROM api_keys) AS keys, (SELECT COUNT(*) FROM collectors) AS collectors");
    for (const name of ["", "   ", "-edge", "edge 1", "pop/north", "x".repeat(65)]) {
      const { res, html, secret } = await createKey(ada, name);
      expect(res.status, name).toBe(400);
      expect(html, name).toContain(name.trim() === "" ? "Collector name is required." : "Collector name must be 1–64 letters, digits");
      expect(secret).toBeUndefined();
    }
    const scope = await ada.post("/t/riverline/keys", { intent: "create", collector: "pop-east", scope: "admin" });
    expect(scope.status).toBe(400);
    expect(await scope.text()).toContain("Scope must be ingest, query or both.");
    expect(await sql("SELECT (SELECT COUNT(*) FROM api_keys) AS keys, (SELECT COUNT(*) FROM collectors) AS collectors")).toEqual(before);
  });

  it("answers 400 to a malformed revoke or an unknown intent, and 404 to another tenant's key, which stays active", async () => {
    const malformed = await ada.post("/t/riverline/keys", { intent: "revoke", prefix: "weir_nothex!" });
    expect(malformed.status).toBe(400);
    expect(await malformed.text()).toContain("Could not revoke: the key prefix must be weir_ followed by 8 hex digits.");
    const missing = await ada.post("/t/riverline/keys", { intent: "revoke" });
    expect(missing.status).toBe(400);
    expect(await missing.text()).toContain("Could not revoke: the key prefix is missing.");
    const unknown = await ada.post("/t/riverline/keys", { intent: "rotate" });
    expect(unknown.status).toBe(400);
    expect(await unknown.text()).toContain("The form must say whether to create or revoke a key.");

    const tributary = await sql("SELECT id FROM tenants WHERE slug = 'tributary'");
    const tenantId = Number(tributary[0].id);
    const gateway = await ensureCollector(t.server.db, tenantId, "office-gw");
    const foreign = await createApiKey(t.server.db, { tenantId, collectorId: gateway.id, scopes: scopesFor("ingest") });
    const res = await ada.post("/t/riverline/keys", { intent: "revoke", prefix: foreign.prefix });
    expect(res.status).toBe(404);
    expect(await res.text()).toContain(`This tenant has no key ${foreign.prefix}.`);
    expect((await postFlows(t.url, foreign.key, flows)).status).toBe(200);
  });

  it("answers 403 to engineers and viewers, on GET and on forged create and revoke POSTs", async () => {
    const target = await createApiKey(t.server.db, {
      tenantId: riverlineId,
      collectorId: (await ensureCollector(t.server.db, riverlineId, "pop-north")).id,
      scopes: "ingest",
    });
    const keysBefore = await sql("SELECT COUNT(*) AS n FROM api_keys");
    for (const member of [eli, vera]) {
      expect((await member.fetch("/t/riverline/keys")).status).toBe(403);
      const created = await member.post("/t/riverline/keys", { intent: "create", collector: "sneaky-1", scope: "both" });
      expect(created.status).toBe(403);
      expect(SECRET.test(await created.text())).toBe(false);
      expect((await member.post("/t/riverline/keys", { intent: "revoke", prefix: target.prefix })).status).toBe(403);
    }
    expect(await sql("SELECT COUNT(*) AS n FROM api_keys")).toEqual(keysBefore);
    expect(await sql("SELECT id FROM collectors WHERE name = 'sneaky-1'")).toHaveLength(0);
    expect((await postFlows(t.url, target.key, flows)).status).toBe(200);
  });

  it("answers 404 to a member of another tenant, so the tenant's existence is not revealed", async () => {
    expect((await oskar.fetch("/t/riverline/keys")).status).toBe(404);
    expect((await oskar.post("/t/riverline/keys", { intent: "create", collector: "intruder", scope: "ingest" })).status).toBe(404);
    expect(await sql("SELECT id FROM collectors WHERE name = 'intruder'")).toHaveLength(0);
  });

  it("explains what keys are for when a tenant has none", async () => {
    const empty = await createTenant(t.server.db, { slug: "estuary" });
    const oskarUser = await ensureUserByEmail(t.server.db, "oskar@example.org");
    await setMembership(t.server.db, oskarUser.id, empty.id, "admin");
    const html = await (await oskar.fetch("/t/estuary/keys")).text();
    expect(html).toContain("No keys yet");
    expect(html).toContain("Authorization: Bearer &lt;key&gt;");
    expect(html).toContain("a query key reads estimates");
  });
});
