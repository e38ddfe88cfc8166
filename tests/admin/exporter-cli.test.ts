// `npm run admin -- exporter …` as a user runs it: a child process against a temporary
// database. Claim rules from issue 9 (claims of two tenants never overlap; claims and
// releases go to the Ledger), CIDR text from RFC 4632 §3.1; the exporters rows stand in for
// what the collection service writes.
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { admin } from "../helpers/admin";

/** The rows of a table `admin` printed: columns are separated by two or more spaces. */
function tableRows(text: string): string[][] {
  return text.trimEnd().split("\n").map((line) => line.split(/ {2,}/));
}

describe("npm run admin -- exporter", () => {
  let dir: string;
  let url: string;
  let db: Db;
  const run = (...args: string[]) => admin(url, args);
  const sql = async (q: string, args: (string | number)[] = []) => (await db.$client.execute({ sql: q, args })).rows;

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-admin-exporter-"));
    url = `file:${join(dir, "weir.db")}`;
    // "listing" and "empty" belong to one test each, so the tests hold in any order.
    for (const slug of ["riverline", "tributary", "listing", "empty"]) {
      const made = await run("tenant", "create", slug);
      expect(made, made.stderr).toMatchObject({ code: 0 });
    }
    db = await createDb(url);
  });
  afterAll(() => {
    if (db) closeDb(db);
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it("claims an address for a new collector, lists it with the exporters seen, and releases it", async () => {
    const claimed = await run("exporter", "claim", "listing", "pop-north", "192.0.2.1", "--domain", "7");
    expect(claimed.code, claimed.stderr).toBe(0);
    expect(claimed.stdout).toBe("Claimed 192.0.2.1/32, domain 7 for listing/pop-north (new collector). A running server applies it within a few seconds.\n");
    const wide = await run("exporter", "claim", "listing", "pop-north", "198.51.100.0/24");
    expect(wide.code, wide.stderr).toBe(0);
    expect(wide.stdout).not.toContain("new collector");

    await sql(
      "INSERT INTO exporters (address, domain_id, transport, first_seen_at, last_seen_at, messages, records, lost, lost_unit, malformed) VALUES " +
        "('192.0.2.1', 7, 'ipfix-udp', 0, ?, 12, 360, 30, 'records', 1), ('192.0.2.1', 8, 'ipfix-udp', 0, ?, 5, 50, 0, 'records', 0), ('198.51.100.20', 0, 'netflow9-udp', 0, ?, 4, 80, 2, 'packets', 0)",
      [Date.UTC(2026, 0, 5, 10, 30), Date.UTC(2026, 0, 5, 10, 30), Date.UTC(2026, 0, 5, 11, 0)],
    );
    const listed = await run("exporter", "list", "listing");
    expect(listed.code, listed.stderr).toBe(0);
    const [claims, seen] = listed.stdout.split("\n\n");
    const claimRows = tableRows(claims);
    expect(claimRows[0]).toEqual(["CIDR", "DOMAIN", "COLLECTOR", "CLAIMED BY", "CLAIMED"]);
    expect(claimRows.slice(1).map((r) => r.slice(0, 4))).toEqual([
      ["192.0.2.1/32", "7", "pop-north", "admin CLI"],
      ["198.51.100.0/24", "every", "pop-north", "admin CLI"],
    ]);
    const seenRows = tableRows(seen);
    expect(seenRows[0]).toEqual(["EXPORTER", "DOMAIN", "TRANSPORT", "COLLECTOR", "CLAIM", "MESSAGES", "RECORDS", "LOST", "MALFORMED", "LAST SEEN"]);
    // Domain 8 of 192.0.2.1 matches no claim (the /32 names domain 7), so it is not this tenant's.
    expect(seenRows.slice(1)).toEqual([
      ["192.0.2.1", "7", "ipfix-udp", "pop-north", "192.0.2.1/32", "12", "360", "30 records", "1", "2026-01-05 10:30Z"],
      ["198.51.100.20", "0", "netflow9-udp", "pop-north", "198.51.100.0/24", "4", "80", "2 packets", "0", "2026-01-05 11:00Z"],
    ]);

    const released = await run("exporter", "release", "listing", "192.0.2.1");
    expect(released.code, released.stderr).toBe(0);
    expect(released.stdout).toMatch(/^Released 192\.0\.2\.1\/32, domain 7 of listing\/pop-north; /);
    const ledger = await sql("SELECT actor, action, target FROM audit_log a JOIN tenants t ON t.id = a.tenant_id WHERE t.slug = 'listing' AND action LIKE 'exporter.%' ORDER BY a.id");
    expect(ledger.map((r) => [r.actor, r.action, r.target])).toEqual([
      ["admin CLI", "exporter.claim", "192.0.2.1/32, domain 7"],
      ["admin CLI", "exporter.claim", "198.51.100.0/24, every domain"],
      ["admin CLI", "exporter.release", "192.0.2.1/32, domain 7"],
    ]);
  });

  it("says how to claim when a tenant has no claims", async () => {
    const listed = await run("exporter", "list", "empty");
    expect(listed).toMatchObject({ code: 0, stdout: "No exporter claims for empty. Claim one with: npm run admin -- exporter claim empty <collector> <address-or-cidr>\n" });
  });

  it("refuses another tenant's overlapping claim with exit 2, naming the range but not the tenant", async () => {
    expect((await run("exporter", "claim", "riverline", "pop-south", "203.0.113.0/24")).code).toBe(0);
    const refused = await run("exporter", "claim", "tributary", "edge", "203.0.113.128/25");
    expect(refused.code).toBe(2);
    expect(refused.stderr).toMatch(/^admin: 203\.0\.113\.128\/25, every domain overlaps 203\.0\.113\.0\/24, every domain, which another tenant/);
    expect(refused.stderr).not.toContain("riverline");
    expect(await sql("SELECT 1 FROM collectors c JOIN tenants t ON t.id = c.tenant_id WHERE t.slug = 'tributary'")).toHaveLength(0);
  });

  it.concurrent.for<[string[], RegExp]>([
    [["exporter", "claim", "riverline", "pop-north", "192.0.2.1/24"], /^admin: <address-or-cidr>: 192\.0\.2\.1\/24 has host bits set; did you mean 192\.0\.2\.0\/24\?$/],
    [["exporter", "claim", "riverline", "pop-north", "192.0.2.256"], /^admin: <address-or-cidr>: invalid prefix "192\.0\.2\.256": .*over 255$/],
    // RFC 7011 §3.1: a 32-bit Observation Domain ID.
    [["exporter", "claim", "riverline", "pop-north", "192.0.2.2", "--domain", "4294967296"], /^admin: --domain must be a whole number from 0 to 4294967295 .*, got '4294967296'$/],
    [["exporter", "claim", "riverline", "pop-north", "192.0.2.2", "--domain", "five"], /^admin: --domain must be a whole number/],
    [["exporter", "claim", "riverline", "bad name", "192.0.2.2"], /^admin: <collector>: must be 1–64 letters/],
    [["exporter", "claim", "nobody", "pop-north", "192.0.2.2"], /^admin: no tenant 'nobody'/],
    [["exporter", "claim", "riverline", "pop-north"], /^admin: 'exporter claim' needs <tenant> <collector> <address-or-cidr>$/],
    [["exporter", "release", "riverline", "192.0.2.99"], /^admin: This tenant has no claim on 192\.0\.2\.99\/32\.$/],
    [["exporter", "release", "riverline", "192.0.2.99", "--domain", "1"], /^admin: This tenant has no claim on 192\.0\.2\.99\/32, domain 1\.$/],
    [["exporter", "list", "nobody"], /^admin: no tenant 'nobody'/],
  ])("exits 2 with one line on stderr for %j", async ([args, message], { expect }) => {
    const result = await run(...args);
    expect(result.code).toBe(2);
    expect(result.stdout).toBe("");
    expect(result.stderr.endsWith("\n") && !result.stderr.trimEnd().includes("\n"), result.stderr).toBe(true);
    expect(result.stderr.trimEnd()).toMatch(message);
  });

  it("asks which domain to release when one range is claimed for several", async () => {
    expect((await run("exporter", "claim", "tributary", "edge", "2001:db8::/48", "--domain", "1")).code).toBe(0);
    expect((await run("exporter", "claim", "tributary", "edge", "2001:DB8:0::/48", "--domain", "2")).code).toBe(0);
    const ambiguous = await run("exporter", "release", "tributary", "2001:db8::/48");
    expect(ambiguous.code).toBe(2);
    expect(ambiguous.stderr).toBe("admin: 2001:db8::/48 is claimed more than once (domain 1, domain 2); say which observation domain to release.\n");
    const released = await run("exporter", "release", "tributary", "2001:db8::/48", "--domain", "2");
    expect(released.code, released.stderr).toBe(0);
    expect(await sql("SELECT cidr, domain_id FROM exporter_claims WHERE cidr = '2001:db8::/48'")).toMatchObject([{ cidr: "2001:db8::/48", domain_id: 1 }]);
  });
});
