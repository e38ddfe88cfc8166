import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { claimExporter } from "~/exporters/claims.server";
import type { ExportersSnapshot } from "~/routes/console.exporters-data";
import { createTenant } from "~/tenants.server";
import { startTestServer, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

// The Exporters page (/t/:tenant/exporters) and its data (/t/:tenant/exporters-data) against
// a real server. Role model from the product design (admin ⊃ engineer ⊃ viewer; only admins
// change anything; a tenant the user does not belong to answers 404); claim rules from
// issue 9 (claims of two tenants never overlap; unclaimed exporters feed nobody and only
// admins see them; claims and releases go to the Ledger). The exporters rows stand in for
// what the listeners write. Each test makes the claims it changes itself; the ones it only
// reads are made in beforeAll, so the tests hold in any order.

/** The page's text as a reader sees it: React separates adjacent text parts with empty comments. */
async function visible(res: Response): Promise<string> {
  return (await res.text()).replaceAll("<!-- -->", "").replaceAll("&#x27;", "'").replaceAll("&quot;", '"');
}

describe("console Exporters", () => {
  let t: TestServer;
  let ada: SignedIn, eli: SignedIn, vera: SignedIn, oskar: SignedIn;
  const sql = async (q: string, args: (string | number | null)[] = []) => (await t.server.db.$client.execute({ sql: q, args })).rows;
  const claims = async (slug: string) =>
    (await sql("SELECT c.cidr, c.domain_id, k.name AS collector FROM exporter_claims c JOIN collectors k ON k.id = c.collector_id JOIN tenants t ON t.id = c.tenant_id WHERE t.slug = ? ORDER BY c.id", [slug])).map((r) => ({ ...r }));
  async function snapshot(who: SignedIn, slug = "riverline"): Promise<ExportersSnapshot> {
    const res = await who.fetch(`/t/${slug}/exporters-data`);
    expect(res.status).toBe(200);
    expect(res.headers.get("cache-control")).toBe("no-store");
    return (await res.json()) as ExportersSnapshot;
  }
  async function observed(address: string, domainId: number, transport: string, extra: Record<string, string | number | null> = {}) {
    const now = Date.now();
    const row: Record<string, string | number | null> = { address, domain_id: domainId, transport, first_seen_at: now - 3600_000, last_seen_at: now - 2000, messages: 40, records: 1200, ...extra };
    const columns = Object.keys(row);
    await sql(`INSERT INTO exporters (${columns.join(", ")}) VALUES (${columns.map(() => "?").join(", ")})`, Object.values(row));
  }

  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await createTenant(t.server.db, { slug: "riverline", name: "Riverline (test)" });
    const tributary = await createTenant(t.server.db, { slug: "tributary", name: "Tributary (test)" });
    const grants = [
      ["ada@example.com", riverline.id, "admin"],
      ["eli@example.com", riverline.id, "engineer"],
      ["vera@example.com", riverline.id, "viewer"],
      ["oskar@example.org", tributary.id, "admin"],
    ] as const;
    for (const [email, tenantId, role] of grants) await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, email)).id, tenantId, role);
    [ada, eli, vera, oskar] = await Promise.all(["ada-admin", "eli-engineer", "vera-viewer", "oskar-outsider"].map((login) => signIn(t.url, login)));

    // What the listeners would have written: a router of riverline, one of tributary, and a stranger.
    const templates = JSON.stringify([{ id: 256, options: false, fields: ["sourceIPv4Address", "destinationIPv4Address", "octetDeltaCount"], refreshedAt: Date.now() - 60_000 }]);
    await observed("192.0.2.1", 0, "ipfix-udp", { templates, sampling_interval: 512, lost: 30, malformed: 2, last_error: "set length 70 runs past the message end (64)", enterprise_elements: JSON.stringify([{ enterprise: 29305, id: 1, count: 12 }]) });
    await observed("198.51.100.7", 3, "netflow9-udp", { lost_unit: "packets" });
    await observed("203.0.113.99", 256, "ipfix-tcp", { unclaimed_messages: 40, records: 0 });
    await observed("192.0.2.50", 9, "ipfix-udp");
    await observed("192.0.2.80", 0, "ipfix-udp");
    // Claims the read-only tests look at.
    const actor = { id: null, label: "test set-up" };
    await claimExporter(t.server.db, { tenantId: riverline.id, collector: "pop-north", cidr: "192.0.2.1", domainId: null, actor });
    await claimExporter(t.server.db, { tenantId: tributary.id, collector: "edge", cidr: "198.51.100.0/24", domainId: 3, actor });
  });
  afterAll(() => t?.close());

  it("lets an admin claim an exporter for a new collector through the form, and writes the Ledger", async () => {
    const res = await ada.post("/t/riverline/exporters", { intent: "claim", cidr: "192.0.2.50", domain: "9", collector: "pop-west" });
    expect(res.status).toBe(200);
    expect(await visible(res)).toContain("Claimed 192.0.2.50/32, domain 9 for collector pop-west (new collector)");
    expect(await claims("riverline")).toContainEqual({ cidr: "192.0.2.50/32", domain_id: 9, collector: "pop-west" });
    const [audit] = await sql("SELECT actor, detail FROM audit_log WHERE action = 'exporter.claim' AND target = '192.0.2.50/32, domain 9'");
    expect(audit.actor).toBe("ada-admin");
    expect(JSON.parse(String(audit.detail))).toEqual({ cidr: "192.0.2.50/32", domain: 9, collector: "pop-west", newCollector: true });

    // The observed exporter now feeds riverline's new collector, and left the unclaimed list.
    const s = await snapshot(ada);
    expect(s.claimed.find((e) => e.address === "192.0.2.50")).toMatchObject({ domainId: 9, collector: "pop-west", claim: { cidr: "192.0.2.50/32", domainId: 9 } });
    expect(s.claims.find((c) => c.cidr === "192.0.2.50/32")).toMatchObject({ domainId: 9, collector: "pop-west", exporters: 1 });
    expect(s.unclaimed?.exporters.map((u) => u.address)).not.toContain("192.0.2.50");
  });

  it("gives every member the counters of the tenant's claimed exporters", async () => {
    const s = await snapshot(vera);
    expect(s.claimed.find((e) => e.address === "192.0.2.1")).toMatchObject({
      domainId: 0,
      transport: "ipfix-udp",
      collector: "pop-north",
      samplingInterval: 512,
      lost: 30,
      lostUnit: "records",
      malformed: 2,
      lastError: "set length 70 runs past the message end (64)",
      templates: [{ id: 256, fields: ["sourceIPv4Address", "destinationIPv4Address", "octetDeltaCount"] }],
      enterpriseElements: [{ enterprise: 29305, id: 1, count: 12 }],
    });
    expect(s.claims.find((c) => c.cidr === "192.0.2.1/32")).toMatchObject({ domainId: null, collector: "pop-north", exporters: 1 });
  });

  it("refuses a cross-site POST (Origin of another site) before the action runs", async () => {
    // The session cookie is SameSite=Lax (RFC 6265bis §5.4.7) and React Router refuses an
    // Origin that is not the request's own (Fetch standard, the Origin header; common practice against CSRF).
    const forged = await ada.fetch("/t/riverline/exporters", {
      method: "POST",
      headers: { "content-type": "application/x-www-form-urlencoded", origin: "https://attacker.example" },
      body: new URLSearchParams({ intent: "claim", cidr: "192.0.2.66", collector: "pop-north" }),
    });
    expect(forged.status).toBe(400);
    // The same post from the console's own origin goes through: the check is on the origin, not the header.
    const own = await ada.fetch("/t/riverline/exporters", {
      method: "POST",
      headers: { "content-type": "application/x-www-form-urlencoded", origin: t.url },
      body: new URLSearchParams({ intent: "claim", cidr: "192.0.2.67", collector: "pop-north" }),
    });
    expect(own.status).toBe(200);
    expect((await claims("riverline")).map((c) => c.cidr)).toEqual(expect.arrayContaining(["192.0.2.67/32"]));
    expect((await claims("riverline")).map((c) => c.cidr)).not.toContain("192.0.2.66/32");
  });

  it("answers 403 to an engineer's or a viewer's claim or release, and changes nothing", async () => {
    const before = await claims("riverline");
    for (const who of [eli, vera]) {
      const claim = await who.post("/t/riverline/exporters", { intent: "claim", cidr: "192.0.2.90", domain: "", collector: "pop-south" });
      expect(claim.status).toBe(403);
      const release = await who.post("/t/riverline/exporters", { intent: "release", cidr: "192.0.2.1", domain: "" });
      expect(release.status).toBe(403);
    }
    expect(await claims("riverline")).toEqual(before);
  });

  it("shows engineers and viewers the claimed part, read-only, and never the unclaimed exporters", async () => {
    for (const who of [eli, vera]) {
      const page = await visible(await who.fetch("/t/riverline/exporters"));
      expect(page).toContain("Where to send");
      expect(page).toContain("Claimed exporters");
      expect(page).not.toContain("New claim");
      expect(page).not.toContain("Unclaimed exporters");
      const s = await snapshot(who);
      expect(s.canClaim).toBe(false);
      expect(s.unclaimed).toBeNull();
      expect(s.claimed.map((e) => e.address)).toContain("192.0.2.1");
      expect(JSON.stringify(s)).not.toContain("203.0.113.99");
      expect(JSON.stringify(s)).not.toContain("198.51.100.7");
    }
    const admin = await visible(await ada.fetch("/t/riverline/exporters"));
    expect(admin).toContain("New claim");
    expect(admin).toContain("Unclaimed exporters");
    expect(admin).toContain("sent to this deployment's listeners without matching any tenant's claim");
  });

  it("lists unclaimed exporters for admins, deployment-wide, grouped by address", async () => {
    const s = await snapshot(ada);
    expect(s.canClaim).toBe(true);
    const addresses = s.unclaimed?.exporters.map((u) => u.address) ?? [];
    expect(addresses).toContain("203.0.113.99");
    // Claimed ones are not listed, whichever tenant holds them.
    expect(addresses).not.toContain("192.0.2.1");
    expect(addresses).not.toContain("198.51.100.7");
    expect(s.unclaimed?.exporters.find((u) => u.address === "203.0.113.99")).toMatchObject({
      messages: 40,
      unclaimedMessages: 40,
      domains: [{ domainId: 256, transport: "ipfix-tcp" }],
    });
  });

  it("explains where to point a device, that UDP sources can be forged, and that unclaimed exporters feed nobody", async () => {
    const page = await visible(await vera.fetch("/t/riverline/exporters"));
    // The test server runs without listeners, so each shows as off.
    expect(page).toMatch(/IPFIX over UDP<\/dt><dd[^>]*><span[^>]*>off<\/span>/);
    expect(page).toContain("UDP source addresses can be forged");
    expect(page).toContain("filter the listener ports");
    expect(page).toContain("An exporter that no claim matches feeds nobody");
  });

  it("refuses another tenant's overlapping claim with a clear message that does not name the tenant", async () => {
    // RFC 4632 §3.1: 192.0.2.0/24 contains riverline's 192.0.2.1/32.
    const res = await oskar.post("/t/tributary/exporters", { intent: "claim", cidr: "192.0.2.0/24", domain: "", collector: "edge" });
    expect(res.status).toBe(409);
    const page = await visible(res);
    expect(page).toMatch(/192\.0\.2\.0\/24, every domain overlaps 192\.0\.2\.\d+\/32, (every domain|domain \d+), which another tenant of this deployment has claimed/);
    expect(page).not.toMatch(/riverline/i);
    expect((await claims("tributary")).map((c) => c.cidr)).not.toContain("192.0.2.0/24");
  });

  it("never lists one tenant's claimed exporters for another", async () => {
    const theirs = await snapshot(oskar, "tributary");
    expect(theirs.claimed.map((e) => [e.address, e.collector])).toEqual([["198.51.100.7", "edge"]]);
    expect(JSON.stringify(theirs.claimed)).not.toContain("192.0.2.");
    expect(theirs.claims.map((c) => c.cidr)).toEqual(["198.51.100.0/24"]);
    const ours = await snapshot(ada);
    expect(ours.claimed.map((e) => e.address)).not.toContain("198.51.100.7");
    expect(JSON.stringify(ours.claims)).not.toContain("198.51.100.0/24");
  });

  it("answers 404 to a member of another tenant, for the page, its data and the action", async () => {
    expect((await oskar.fetch("/t/riverline/exporters")).status).toBe(404);
    const data = await oskar.fetch("/t/riverline/exporters-data");
    expect(data.status).toBe(404);
    expect(await data.text()).not.toContain("192.0.2.1");
    expect((await oskar.post("/t/riverline/exporters", { intent: "release", cidr: "192.0.2.1", domain: "" })).status).toBe(404);
    const anonymous = await fetch(`${t.url}/t/riverline/exporters-data`, { redirect: "manual" });
    expect(anonymous.status).toBe(302);
  });

  it("explains bad input per field with 400", async () => {
    // RFC 4632 §3.1: the address of a prefix has its host bits zero.
    const hostBits = await ada.post("/t/riverline/exporters", { intent: "claim", cidr: "192.0.2.1/24", domain: "", collector: "pop-north", from: "form" });
    expect(hostBits.status).toBe(400);
    expect(await visible(hostBits)).toContain("192.0.2.1/24 has host bits set; did you mean 192.0.2.0/24?");
    // RFC 7011 §3.1: the Observation Domain ID is an unsigned 32-bit number.
    const domain = await ada.post("/t/riverline/exporters", { intent: "claim", cidr: "192.0.2.9", domain: "-1", collector: "pop-north", from: "form" });
    expect(domain.status).toBe(400);
    expect(await visible(domain)).toContain("must be a whole number from 0 to 4294967295");
  });

  it("lets an admin release a claim; the release goes to the Ledger and the exporter is unclaimed again", async () => {
    const riverline = (await sql("SELECT id FROM tenants WHERE slug = 'riverline'"))[0].id as number;
    await claimExporter(t.server.db, { tenantId: riverline, collector: "pop-east", cidr: "192.0.2.80", domainId: null, actor: { id: null, label: "test set-up" } });
    expect((await snapshot(ada)).claimed.map((e) => e.address)).toContain("192.0.2.80");

    const res = await ada.post("/t/riverline/exporters", { intent: "release", cidr: "192.0.2.80/32", domain: "" });
    expect(res.status).toBe(200);
    expect(await visible(res)).toContain("Released 192.0.2.80/32, every domain of collector pop-east");
    const [audit] = await sql("SELECT actor, detail FROM audit_log WHERE action = 'exporter.release' AND target = '192.0.2.80/32, every domain'");
    expect(audit.actor).toBe("ada-admin");
    expect(JSON.parse(String(audit.detail))).toEqual({ cidr: "192.0.2.80/32", domain: "every", collector: "pop-east" });
    const s = await snapshot(ada);
    expect(s.claimed.map((e) => e.address)).not.toContain("192.0.2.80");
    expect(s.unclaimed?.exporters.map((u) => u.address)).toContain("192.0.2.80");
    const again = await ada.post("/t/riverline/exporters", { intent: "release", cidr: "192.0.2.80/32", domain: "" });
    expect(again.status).toBe(404);
    expect(await visible(again)).toContain("This tenant has no claim on 192.0.2.80/32, every domain.");
  });
});

describe("console Exporters with the listeners running", () => {
  let t: TestServer;
  let vera: SignedIn;
  beforeAll(async () => {
    // Free ports from the OS for the two UDP listeners; TCP off.
    t = await startTestServer({ collect: { ipfixUdpPort: 0, netflowUdpPort: 0, ipfixTcpPort: null } });
    const tenant = await createTenant(t.server.db, { slug: "riverline" });
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "vera@example.com")).id, tenant.id, "viewer");
    vera = await signIn(t.url, "vera-viewer");
  });
  afterAll(() => t?.close());

  it("tells where to point a device: the ports the listeners are bound to, and which are off", async () => {
    const { ipfixUdp, netflowUdp } = t.server.collection.ports;
    expect(ipfixUdp).toBeGreaterThan(0);
    const page = await visible(await vera.fetch("/t/riverline/exporters"));
    expect(page).toMatch(new RegExp(`IPFIX over UDP</dt><dd[^>]*>port ${ipfixUdp}</dd>`));
    expect(page).toMatch(new RegExp(`NetFlow v9 over UDP</dt><dd[^>]*>port ${netflowUdp}</dd>`));
    expect(page).toMatch(/IPFIX over TCP<\/dt><dd[^>]*><span[^>]*>off<\/span>/);
  });
});
