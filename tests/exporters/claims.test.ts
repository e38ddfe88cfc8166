import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, beforeEach, describe, expect, it } from "vitest";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import {
  claimExporter,
  claimRefusal,
  claimsFingerprint,
  listClaims,
  listExportersForTenant,
  listUnclaimedExporters,
  loadClaimIndex,
  releaseExporter,
} from "~/exporters/claims.server";
import { parseAddress } from "~/net/address";
import { createTenant, ensureCollector } from "~/tenants.server";

// Claims and releases against a real SQLite database: the rules come from issue 9 (claims of
// two tenants never overlap, the most specific claim wins, claims and releases go to the
// Ledger) and CIDR semantics from RFC 4632 §3.1; the exporters rows stand in for what the
// collection service writes.

const ADMIN = { id: null, label: "test admin" };

/** The refusal a promise rejects with, as route modules see it (by code). */
async function refusal(promise: Promise<unknown>) {
  try {
    await promise;
  } catch (error) {
    const found = claimRefusal(error);
    if (found) return found;
    throw error;
  }
  throw new Error("expected a refusal");
}

describe("exporter claims", () => {
  let dir: string;
  let db: Db;
  let riverline: number;
  let tributary: number;
  const sql = async (q: string, args: (string | number | null)[] = []) => (await db.$client.execute({ sql: q, args })).rows;

  async function observed(address: string, domainId: number, transport = "ipfix-udp", extra: Record<string, string | number | null> = {}) {
    const row: Record<string, string | number | null> = { address, domain_id: domainId, transport, first_seen_at: 1000, last_seen_at: 2000, messages: 10, records: 300, ...extra };
    const columns = Object.keys(row);
    await sql(`INSERT INTO exporters (${columns.join(", ")}) VALUES (${columns.map(() => "?").join(", ")})`, Object.values(row));
  }

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-claims-"));
    db = await createDb(`file:${join(dir, "weir.db")}`);
    await runMigrations(db);
    riverline = (await createTenant(db, { slug: "riverline" })).id;
    tributary = (await createTenant(db, { slug: "tributary" })).id;
  });
  afterAll(() => {
    if (db) closeDb(db);
    rmSync(dir, { recursive: true, force: true });
  });
  beforeEach(async () => {
    // Collectors too (their claims go with them): each test starts from tenants alone.
    await sql("DELETE FROM collectors");
    await sql("DELETE FROM exporter_claims");
    await sql("DELETE FROM exporters");
    await sql("DELETE FROM audit_log");
  });

  it("claims an address for a new collector, normalised to a /32, and writes the Ledger", async () => {
    const made = await claimExporter(db, { tenantId: riverline, collector: "pop-north", cidr: "192.0.2.1", domainId: null, actor: ADMIN });
    expect(made).toMatchObject({ cidr: "192.0.2.1/32", domainId: null, collector: "pop-north", newCollector: true });
    const [collector] = await sql("SELECT kind FROM collectors WHERE tenant_id = ? AND name = 'pop-north'", [riverline]);
    expect(collector.kind).toBe("stream");
    expect(await listClaims(db, riverline)).toMatchObject([{ cidr: "192.0.2.1/32", domainId: null, collector: "pop-north", createdBy: "test admin" }]);
    const [audit] = await sql("SELECT tenant_id, actor, action, target, detail FROM audit_log");
    expect(audit).toMatchObject({ tenant_id: riverline, actor: "test admin", action: "exporter.claim", target: "192.0.2.1/32, every domain" });
    expect(JSON.parse(String(audit.detail))).toEqual({ cidr: "192.0.2.1/32", domain: "every", collector: "pop-north", newCollector: true });
  });

  it("refuses another tenant's overlapping claim, naming the claimed CIDR but not the tenant", async () => {
    await claimExporter(db, { tenantId: riverline, collector: "pop-north", cidr: "198.51.100.0/25", domainId: null, actor: ADMIN });
    // RFC 4632 §3.1: 198.51.100.0/26 lies inside 198.51.100.0/25.
    const refused = await refusal(claimExporter(db, { tenantId: tributary, collector: "edge", cidr: "198.51.100.0/26", domainId: 4, actor: ADMIN }));
    expect(refused).toMatchObject({ code: "claim-overlap", status: 409, field: "cidr" });
    expect(refused.message).toContain("overlaps 198.51.100.0/25, every domain");
    expect(refused.message).toContain("another tenant");
    expect(refused.message).not.toContain("riverline");
    // Nothing was left behind: no claim, no collector, no Ledger entry for the refused one.
    expect(await listClaims(db, tributary)).toEqual([]);
    expect(await sql("SELECT 1 FROM collectors WHERE tenant_id = ? AND name = 'edge'", [tributary])).toHaveLength(0);
    expect(await sql("SELECT 1 FROM audit_log WHERE tenant_id = ?", [tributary])).toHaveLength(0);
    // A wider claim over it is refused too (the ranges nest the other way).
    expect((await refusal(claimExporter(db, { tenantId: tributary, collector: "edge", cidr: "198.51.100.0/24", actor: ADMIN }))).code).toBe("claim-overlap");
    // Disjoint: the neighbouring /25 (RFC 4632 §3.1), the other half of the documentation block (RFC 5737).
    await claimExporter(db, { tenantId: tributary, collector: "edge", cidr: "198.51.100.128/25", actor: ADMIN });
  });

  it("lets two tenants claim one range for different observation domains, not for the same one", async () => {
    await claimExporter(db, { tenantId: riverline, collector: "pop-north", cidr: "203.0.113.7", domainId: 1, actor: ADMIN });
    await claimExporter(db, { tenantId: tributary, collector: "edge", cidr: "203.0.113.7", domainId: "2", actor: ADMIN });
    const same = await refusal(claimExporter(db, { tenantId: tributary, collector: "edge", cidr: "203.0.113.7", domainId: 1, actor: ADMIN }));
    expect(same.message).toContain("overlaps 203.0.113.7/32, domain 1");
    // A claim of every domain would take riverline's domain 1 as well.
    expect((await refusal(claimExporter(db, { tenantId: tributary, collector: "edge", cidr: "203.0.113.0/24", actor: ADMIN }))).code).toBe("claim-overlap");
  });

  it("lets one tenant nest claims, refuses the same CIDR and domain twice, and refuses a merged collector's name", async () => {
    await claimExporter(db, { tenantId: riverline, collector: "pop-north", cidr: "192.0.2.0/24", actor: ADMIN });
    await claimExporter(db, { tenantId: riverline, collector: "pop-south", cidr: "192.0.2.128/25", actor: ADMIN });
    await claimExporter(db, { tenantId: riverline, collector: "pop-south", cidr: "192.0.2.0/24", domainId: 9, actor: ADMIN });
    const again = await refusal(claimExporter(db, { tenantId: riverline, collector: "pop-west", cidr: "::ffff:192.0.2.0/120", actor: ADMIN }));
    expect(again).toMatchObject({ code: "claim-duplicate", status: 409 });
    expect(again.message).toContain("already claimed for collector pop-north");

    await sql("INSERT INTO collectors (tenant_id, name, kind, created_at) VALUES (?, 'both-pops', 'merge', 0)", [riverline]);
    const merged = await refusal(claimExporter(db, { tenantId: riverline, collector: "both-pops", cidr: "192.0.2.200", actor: ADMIN }));
    expect(merged).toMatchObject({ code: "claim-merged-collector", field: "collector" });
    expect(merged.message).toContain("merged collector");
  });

  it("explains bad input per field", async () => {
    const hostBits = await refusal(claimExporter(db, { tenantId: riverline, collector: "pop-north", cidr: "192.0.2.1/24", actor: ADMIN }));
    expect(hostBits).toMatchObject({ code: "claim-invalid", status: 400, field: "cidr" });
    expect(hostBits.message).toContain("did you mean 192.0.2.0/24?");
    // RFC 7011 §3.1: the Observation Domain ID is 32 bits, so 2^32 is out of range.
    const domain = await refusal(claimExporter(db, { tenantId: riverline, collector: "pop-north", cidr: "192.0.2.1", domainId: "4294967296", actor: ADMIN }));
    expect(domain).toMatchObject({ code: "claim-invalid", field: "domain" });
    expect(domain.message).toContain("from 0 to 4294967295");
    expect((await refusal(claimExporter(db, { tenantId: riverline, collector: " ", cidr: "192.0.2.1", actor: ADMIN }))).field).toBe("collector");
  });

  it("releases a claim by CIDR (and domain when the range is claimed for several), writing the Ledger", async () => {
    await claimExporter(db, { tenantId: riverline, collector: "pop-north", cidr: "192.0.2.0/24", actor: ADMIN });
    await claimExporter(db, { tenantId: riverline, collector: "pop-south", cidr: "192.0.2.0/24", domainId: 3, actor: ADMIN });
    const ambiguous = await refusal(releaseExporter(db, { tenantId: riverline, cidr: "192.0.2.0/24", actor: ADMIN }));
    expect(ambiguous).toMatchObject({ code: "claim-ambiguous", field: "domain" });
    expect(ambiguous.message).toContain("every domain, domain 3");
    // Another tenant cannot release it.
    expect((await refusal(releaseExporter(db, { tenantId: tributary, cidr: "192.0.2.0/24", domainId: 3, actor: ADMIN }))).code).toBe("claim-not-found");

    expect(await releaseExporter(db, { tenantId: riverline, cidr: "192.0.2.0/24", domainId: "3", actor: ADMIN })).toEqual({ cidr: "192.0.2.0/24", domainId: 3, collector: "pop-south" });
    expect(await releaseExporter(db, { tenantId: riverline, cidr: "192.0.2.0/24", actor: ADMIN })).toMatchObject({ domainId: null, collector: "pop-north" });
    expect(await listClaims(db, riverline)).toEqual([]);
    const audit = await sql("SELECT action, target FROM audit_log WHERE action = 'exporter.release' ORDER BY id");
    expect(audit.map((r) => [r.action, r.target])).toEqual([
      ["exporter.release", "192.0.2.0/24, domain 3"],
      ["exporter.release", "192.0.2.0/24, every domain"],
    ]);
    expect((await refusal(releaseExporter(db, { tenantId: riverline, cidr: "192.0.2.0/24", actor: ADMIN }))).status).toBe(404);
  });

  it("changes the fingerprint on every claim and release, even a release followed by a claim", async () => {
    const prints = [await claimsFingerprint(db)];
    await claimExporter(db, { tenantId: riverline, collector: "pop-north", cidr: "192.0.2.1", actor: ADMIN });
    prints.push(await claimsFingerprint(db));
    await releaseExporter(db, { tenantId: riverline, cidr: "192.0.2.1", actor: ADMIN });
    await claimExporter(db, { tenantId: riverline, collector: "pop-north", cidr: "192.0.2.2", actor: ADMIN });
    prints.push(await claimsFingerprint(db));
    await sql("DELETE FROM collectors WHERE name = 'pop-north'");
    prints.push(await claimsFingerprint(db));
    // Each step changed the claims, so each print differs from the one before it (what the
    // collection service compares); the last is the first again because the claims are again none.
    for (let i = 1; i < prints.length; i++) expect(prints[i]).not.toBe(prints[i - 1]);
    expect(prints[3]).toBe(prints[0]);
  });

  it("loads every tenant's claims into one index", async () => {
    await claimExporter(db, { tenantId: riverline, collector: "pop-north", cidr: "192.0.2.0/24", actor: ADMIN });
    await claimExporter(db, { tenantId: tributary, collector: "edge", cidr: "2001:db8::/32", domainId: 5, actor: ADMIN });
    const index = await loadClaimIndex(db);
    const [north] = await sql("SELECT id FROM collectors WHERE tenant_id = ? AND name = 'pop-north'", [riverline]);
    expect(index.resolve(parseAddress("192.0.2.44"), 0)).toMatchObject({ tenantId: riverline, collectorId: Number(north.id) });
    expect(index.resolve(parseAddress("2001:db8::9"), 5)?.tenantId).toBe(tributary);
    expect(index.resolve(parseAddress("2001:db8::9"), 6)).toBeNull();
  });

  it("lists observed exporters per tenant through the claims, and the unclaimed ones grouped by address", async () => {
    await claimExporter(db, { tenantId: riverline, collector: "pop-north", cidr: "192.0.2.0/24", actor: ADMIN });
    await claimExporter(db, { tenantId: riverline, collector: "pop-south", cidr: "192.0.2.9", domainId: 2, actor: ADMIN });
    await claimExporter(db, { tenantId: tributary, collector: "edge", cidr: "198.51.100.1", actor: ADMIN });
    const templates = JSON.stringify([{ id: 256, options: false, fields: ["sourceIPv4Address", "octetDeltaCount"], refreshedAt: 1500 }]);
    await observed("192.0.2.9", 2, "ipfix-udp", { templates, sampling_interval: 100 });
    await observed("192.0.2.9", 3);
    await observed("198.51.100.1", 0, "netflow9-udp", { lost_unit: "packets" });
    await observed("203.0.113.50", 7, "ipfix-tcp", { unclaimed_messages: 10, last_seen_at: 5000 });
    await observed("203.0.113.50", 1, "ipfix-udp", { unclaimed_messages: 4, messages: 4, records: 0, first_seen_at: 500 });
    await observed("2001:db8::1", 0, "ipfix-udp", { unclaimed_messages: 1, last_seen_at: 3000 });

    const mine = await listExportersForTenant(db, riverline);
    // Most specific claim wins: domain 2 of .9 goes to pop-south's /32, domain 3 to pop-north's /24.
    expect(mine.map((e) => [e.address, e.domainId, e.collector, e.claim.cidr])).toEqual([
      ["192.0.2.9", 3, "pop-north", "192.0.2.0/24"],
      ["192.0.2.9", 2, "pop-south", "192.0.2.9/32"],
    ]);
    expect(mine[1]).toMatchObject({ samplingInterval: 100, templates: [{ id: 256, fields: ["sourceIPv4Address", "octetDeltaCount"] }] });
    expect((await listExportersForTenant(db, tributary)).map((e) => [e.address, e.lostUnit])).toEqual([["198.51.100.1", "packets"]]);

    const unclaimed = await listUnclaimedExporters(db);
    expect(unclaimed.map((u) => u.address)).toEqual(["203.0.113.50", "2001:db8::1"]);
    expect(unclaimed[0]).toMatchObject({ firstSeenAt: 500, lastSeenAt: 5000, messages: 14, unclaimedMessages: 14, records: 300 });
    expect(unclaimed[0].domains.map((d) => [d.domainId, d.transport])).toEqual([
      [1, "ipfix-udp"],
      [7, "ipfix-tcp"],
    ]);

    // Claiming one makes it leave the unclaimed list and join the tenant's exporters.
    await claimExporter(db, { tenantId: tributary, collector: "edge", cidr: "203.0.113.50", domainId: 7, actor: ADMIN });
    expect((await listUnclaimedExporters(db)).find((u) => u.address === "203.0.113.50")?.domains.map((d) => d.domainId)).toEqual([1]);
    expect((await listExportersForTenant(db, tributary)).map((e) => e.address)).toContain("203.0.113.50");
    expect((await listExportersForTenant(db, riverline)).map((e) => e.address)).not.toContain("203.0.113.50");
  });
});
