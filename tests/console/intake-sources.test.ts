import { createElement } from "react";
import { renderToStaticMarkup } from "react-dom/server";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { createApiKey, revokeApiKey, scopesFor } from "~/auth/api-keys.server";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { IntakeTable } from "~/components/intake/IntakeTable";
import { claimExporter } from "~/exporters/claims.server";
import type { IntakeSnapshot } from "~/routes/console.intake-data";
import { createTenant, ensureCollector } from "~/tenants.server";
import { postFlows, startTestServer, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

// Intake: where each collector's records come from over the last 24 hours, from the source
// that each ingest batch records (JSON over HTTP, an IPFIX file, a listener: issue 9), next
// to the active ingest keys and exporter claims that can feed it. Batches of the listeners and
// of IPFIX files are written here as rows, standing in for what those paths store.

const HOUR_MS = 3_600_000;

/** The page's text as a reader sees it. */
const text = (html: string) => html.replace(/<[^>]+>/g, "").replaceAll("&#x27;", "'");

describe("Intake: where records come from", () => {
  let t: TestServer;
  let vera: SignedIn;
  let snapshot: IntakeSnapshot;
  const sql = async (q: string, args: (string | number | null)[] = []) => (await t.server.db.$client.execute({ sql: q, args })).rows;

  beforeAll(async () => {
    t = await startTestServer();
    const db = t.server.db;
    const tenant = await createTenant(db, { slug: "riverline", windowSeconds: 3600 });
    await setMembership(db, (await ensureUserByEmail(db, "vera@example.com")).id, tenant.id, "viewer");
    vera = await signIn(t.url, "vera-viewer");
    const actor = { id: null, label: "test set-up" };

    // keys-only: two ingest keys, one JSON batch of 3 records; a query key and a revoked key do not count.
    const keysOnly = await ensureCollector(db, tenant.id, "keys-only");
    const { key } = await createApiKey(db, { tenantId: tenant.id, collectorId: keysOnly.id, scopes: scopesFor("ingest") });
    await createApiKey(db, { tenantId: tenant.id, collectorId: keysOnly.id, scopes: scopesFor("both") });
    await createApiKey(db, { tenantId: tenant.id, collectorId: keysOnly.id, scopes: scopesFor("query") });
    const revoked = await createApiKey(db, { tenantId: tenant.id, collectorId: keysOnly.id, scopes: scopesFor("ingest") });
    await revokeApiKey(db, revoked.prefix, tenant.id);
    const flows = [1, 2, 3].map((i) => ({ src: `192.0.2.${i}`, dst: "198.51.100.1", proto: 6, bytes: 100 * i, packets: i }));
    expect((await postFlows(t.url, key, JSON.stringify(flows))).status).toBe(200);

    // pop-north: two exporter claims, listener batches over UDP (IPFIX and NetFlow v9) and one older than a day.
    const popNorth = await ensureCollector(db, tenant.id, "pop-north");
    await claimExporter(db, { tenantId: tenant.id, collector: "pop-north", cidr: "192.0.2.1", domainId: 0, actor });
    await claimExporter(db, { tenantId: tenant.id, collector: "pop-north", cidr: "203.0.113.0/24", domainId: null, actor });
    const now = Date.now();
    const batch = (collectorId: number, source: string, records: number, receivedAt: number) =>
      sql("INSERT INTO ingest_batches (tenant_id, collector_id, received_at, record_count, bytes, source, response) VALUES (?, ?, ?, ?, '0', ?, '{}')", [tenant.id, collectorId, receivedAt, records, source]);
    await batch(popNorth.id, "ipfix-udp", 500, now - HOUR_MS);
    await batch(popNorth.id, "ipfix-udp", 700, now - 2 * HOUR_MS);
    await batch(popNorth.id, "netflow9-udp", 40, now - 3 * HOUR_MS);
    await batch(popNorth.id, "ipfix-tcp", 9999, now - 25 * HOUR_MS);

    // archive: only IPFIX files, no key left and no claim.
    const archive = await ensureCollector(db, tenant.id, "archive");
    await batch(archive.id, "ipfix-file", 120, now - 5 * HOUR_MS);

    // silent: a claim that has not delivered anything yet; nothing-yet: no way in at all.
    await claimExporter(db, { tenantId: tenant.id, collector: "silent", cidr: "2001:db8::/48", domainId: null, actor });
    await ensureCollector(db, tenant.id, "nothing-yet");

    const res = await vera.fetch("/t/riverline/intake-data");
    expect(res.status).toBe(200);
    snapshot = (await res.json()) as IntakeSnapshot;
  });
  afterAll(() => t?.close());

  const sourcesOf = (name: string) => snapshot.collectors.find((c) => c.name === name)!.sources;

  it("counts the JSON batches and the active ingest keys of a collector fed over HTTP", () => {
    expect(snapshot.sourcesHours).toBe(24);
    // Keys with the ingest scope and no revocation (the query key reads estimates, the revoked one answers 401).
    expect(sourcesOf("keys-only")).toEqual({ received: { json: { batches: 1, records: 3 } }, activeKeys: 2, exporterClaims: 0 });
  });

  it("counts a collector's exporter claims and its listener batches of the last 24 hours per transport", () => {
    expect(sourcesOf("pop-north")).toEqual({
      received: { "ipfix-udp": { batches: 2, records: 1200 }, "netflow9-udp": { batches: 1, records: 40 } },
      activeKeys: 0,
      exporterClaims: 2,
    });
  });

  it("tells IPFIX files, an idle claim and no way in at all apart", () => {
    expect(sourcesOf("archive")).toEqual({ received: { "ipfix-file": { batches: 1, records: 120 } }, activeKeys: 0, exporterClaims: 0 });
    expect(sourcesOf("silent")).toEqual({ received: {}, activeKeys: 0, exporterClaims: 1 });
    expect(sourcesOf("nothing-yet")).toEqual({ received: {}, activeKeys: 0, exporterClaims: 0 });
  });

  it("shows them compactly under each collector's name", () => {
    const html = renderToStaticMarkup(createElement(IntakeTable, { snapshot }));
    const line = (name: string) => {
      const row = new RegExp(`<th scope="row"[^>]*><span[^>]*>${name}</span>(.*?)</th>`).exec(html)?.[1] ?? "";
      return text(row).replace(/^quiet/, "");
    };
    expect(line("keys-only")).toBe("keys 2");
    expect(line("pop-north")).toBe("exporters 2");
    expect(line("archive")).toBe("files");
    expect(line("silent")).toBe("exporters 1");
    expect(line("nothing-yet")).toBe("no key or exporter");
    // Bright when records came that way in the last day, dim when the way in only exists.
    expect(html).toMatch(/title="1 exporter claim; from the listeners in the last 24 h: nothing"><span class="text-river-400">exporters 1/);
    expect(html).toMatch(/title="2 exporter claims; from the listeners in the last 24 h: IPFIX over UDP: 1,200 records in 2 batches; NetFlow v9 over UDP: 40 records in 1 batch"><span class="text-river-100">exporters 2/);
  });
});
