import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { recordAudit } from "~/audit.server";
import { describeDetail } from "~/people/ledger-format";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import type { Role } from "~/db/schema.server";
import { createTenant } from "~/tenants.server";
import { startTestServer, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

/** The page's text as a reader sees it: React separates adjacent text parts with empty comments. */
async function visible(res: Response): Promise<string> {
  return (await res.text()).replaceAll("<!-- -->", "");
}

/** The action of each rendered ledger row, top to bottom. */
function actionsShown(html: string): string[] {
  return [...html.matchAll(/<tr [^>]*data-action="([^"]+)"/g)].map((m) => m[1]);
}

const DAY = 86_400_000;
const MARCH_1 = Date.parse("2025-03-01T00:00:00Z");

// The Ledger: a tenant's audit entries plus its members' sign-ins, filtered and paged in the URL.
describe("Ledger", () => {
  let t: TestServer;
  let ada: SignedIn;
  beforeAll(async () => {
    t = await startTestServer();
    const db = t.server.db;
    const riverline = await createTenant(db, { slug: "riverline", name: "Riverline" });
    const tributary = await createTenant(db, { slug: "tributary", name: "Tributary" });
    const grant = async (email: string, tenantId: number, role: Role) => {
      const user = await ensureUserByEmail(db, email);
      await setMembership(db, user.id, tenantId, role);
      return user;
    };
    const adaUser = await grant("ada@example.com", riverline.id, "admin");
    const eliUser = await grant("eli@example.com", riverline.id, "engineer");
    await grant("vera@example.com", riverline.id, "viewer");
    const oskarUser = await grant("oskar@example.org", tributary.id, "admin");

    // 120 key entries, one an hour from 1 March 2025 00:00 UTC: pages of 50, 50 and 20.
    for (let i = 0; i < 120; i++) {
      await recordAudit(db, { tenantId: riverline.id, actor: { id: adaUser.id, label: "ada-admin" }, action: "key.create", target: `weir_0000${String(i).padStart(4, "0")}`, detail: { collector: "pop-north", scopes: "ingest" } });
      await db.$client.execute({ sql: "UPDATE audit_log SET at = ? WHERE id = (SELECT max(id) FROM audit_log)", args: [MARCH_1 + i * 3600_000] });
    }
    const at = async (ms: number) => db.$client.execute({ sql: "UPDATE audit_log SET at = ? WHERE id = (SELECT max(id) FROM audit_log)", args: [ms] });
    await recordAudit(db, { tenantId: riverline.id, actor: { id: eliUser.id, label: "eli-engineer" }, action: "settings.update", target: "sample size", detail: { from: 1024, to: 2048 } });
    await at(MARCH_1 + 10 * DAY);
    // A roll-up run with its real particulars (rollup.server.ts), against a collector with a long name.
    await recordAudit(db, { tenantId: riverline.id, actor: { id: null, label: "retention" }, action: "retention.run", target: "pop-north-metro-aggregation-router-07", detail: { asOf: "2025-03-11T04:00:00.000Z", hoursRolledUp: 3, windowsDeleted: 12 } });
    await at(MARCH_1 + 10 * DAY);
    // Not riverline's: another tenant's entry, and the sign-in of someone who is not a member.
    await recordAudit(db, { tenantId: tributary.id, actor: { id: oskarUser.id, label: "oskar-outsider" }, action: "key.revoke", target: "weir_tributary1" });
    await at(MARCH_1 + 10 * DAY);
    await recordAudit(db, { tenantId: null, actor: { id: oskarUser.id, label: "oskar-outsider" }, action: "sign-in", target: "oskar@example.org" });
    await at(MARCH_1 + 10 * DAY);
    // A member's sign-in (outside any tenant) belongs in riverline's ledger.
    await recordAudit(db, { tenantId: null, actor: { id: eliUser.id, label: "eli-engineer" }, action: "sign-in", target: "eli@example.com" });
    await at(MARCH_1 + 10 * DAY);

    ada = await signIn(t.url, "ada-admin");
  });
  afterAll(() => t?.close());

  it("shows the tenant's entries and its members' sign-ins, newest first, 50 a page", async () => {
    const res = await ada.fetch("/t/riverline/ledger");
    expect(res.status).toBe(200);
    const html = await visible(res);
    const shown = actionsShown(html);
    expect(shown).toHaveLength(50);
    // Ada's own sign-in for this test is the newest entry.
    expect(shown[0]).toBe("sign-in");
    expect(html).toContain("page 1 of 3");
    expect(html).not.toContain("weir_tributary1");
    expect(html).not.toContain("oskar-outsider");

    const third = await visible(await ada.fetch("/t/riverline/ledger?action=key.create&page=3"));
    // 120 key entries: pages of 50, 50 and 20.
    expect(actionsShown(third)).toHaveLength(20);
    expect(third).toContain("Entries 101–120 of 120");
    // Common practice for audit logs: exact UTC time to the second, written as every console time is
    // (formatUtc: 24-hour, "YYYY-MM-DD HH:MM", UTC); the oldest entry ends the last page.
    expect(third).toContain("2025-03-01 00:00:00 UTC");
    expect(third).not.toMatch(/\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}Z/);
    expect(third).toContain("weir_00000000");
    const past = await ada.fetch("/t/riverline/ledger?action=key.create&page=4");
    expect(past.status).toBe(200);
    expect(await visible(past)).toContain("There is no page 4");
  });

  it("filters by action, actor and dates, keeping the filters in the page links", async () => {
    const settings = await visible(await ada.fetch("/t/riverline/ledger?action=settings.update"));
    expect(actionsShown(settings)).toEqual(["settings.update"]);
    // Details are read from the JSON, {from: 1024, to: 2048}, as a key/value row.
    expect(settings).toMatch(/<dt[^>]*>change<\/dt><dd[^>]*>1024 → 2048<\/dd>/);

    // Matched case-insensitively within the login.
    const eli = actionsShown(await visible(await ada.fetch("/t/riverline/ledger?actor=ELI")));
    expect(eli).toContain("settings.update");
    expect(eli).toContain("sign-in");
    expect(eli.every((a) => a === "settings.update" || a === "sign-in")).toBe(true);

    // From and To are UTC days, To included: 2 March holds the entries of hours 24..47.
    const day = await visible(await ada.fetch("/t/riverline/ledger?action=key.create&from=2025-03-02&to=2025-03-02"));
    expect(actionsShown(day)).toHaveLength(24);
    expect(day).toContain("2025-03-02 23:00:00 UTC");
    expect(day).not.toContain("2025-03-03 00:00:00 UTC");

    const paged = await visible(await ada.fetch("/t/riverline/ledger?action=key.create&from=2025-03-01&to=2025-03-05"));
    expect(paged).toContain("page 1 of 3");
    expect(paged).toContain('href="/t/riverline/ledger?action=key.create&amp;from=2025-03-01&amp;to=2025-03-05&amp;page=2"');

    const none = await visible(await ada.fetch("/t/riverline/ledger?from=2030-01-01"));
    expect(actionsShown(none)).toEqual([]);
    expect(none).toContain("No entries match these filters");
  });

  it("shows particulars as key/value rows, in the console's time format, and never splits names mid-word", async () => {
    const html = await visible(await ada.fetch("/t/riverline/ledger?action=retention.run"));
    expect(actionsShown(html)).toEqual(["retention.run"]);
    expect(html).toMatch(/<dt[^>]*>as of<\/dt><dd[^>]*>2025-03-11 04:00:00 UTC<\/dd>/);
    expect(html).toMatch(/<dt[^>]*>hours rolled up<\/dt><dd[^>]*>3<\/dd>/);
    expect(html).toMatch(/<dt[^>]*>windows deleted<\/dt><dd[^>]*>12<\/dd>/);
    // No raw JSON in the table, and no CSS that breaks a word at any letter (CSS Text 3 §5.2 word-break: break-all).
    const table = html.slice(html.indexOf("<table"), html.indexOf("</table>"));
    expect(table).not.toMatch(/\{&quot;|\{"/);
    expect(table).not.toContain("break-all");
    expect(table).toContain("pop-north-metro-aggregation-router-07");
  });

  it("answers 400 with the reason for filters it cannot use", async () => {
    const res = await ada.fetch("/t/riverline/ledger?from=2025-03-05&to=2025-03-01");
    expect(res.status).toBe(400);
    expect(await visible(res)).toContain("To must not be before the From date");
    const bad = await ada.fetch("/t/riverline/ledger?from=yesterday&page=0");
    expect(bad.status).toBe(400);
    const text = await visible(bad);
    expect(text).toContain("From must be a date like 2025-03-01");
    expect(text).toContain("Page must be 1 or more");
  });

  it("answers 403 to engineers and viewers and 404 to members of another tenant", async () => {
    for (const login of ["eli-engineer", "vera-viewer"]) {
      const member = await signIn(t.url, login);
      expect((await member.fetch("/t/riverline/ledger")).status, login).toBe(403);
    }
    const oskar = await signIn(t.url, "oskar-outsider");
    expect((await oskar.fetch("/t/riverline/ledger")).status).toBe(404);
    // Oskar's own tenant shows his entries and none of riverline's.
    const own = await visible(await oskar.fetch("/t/tributary/ledger"));
    expect(own).toContain("weir_tributary1");
    expect(own).not.toContain("weir_00000000");
  });
});

describe("ledger particulars as rows (describeDetail)", () => {
  it("reads before/after objects field by field, lists, times, and keeps unreadable text as stored", () => {
    // settings.update stores { old: {...}, new: {...} } (settings.server.ts).
    expect(describeDetail(JSON.stringify({ old: { sampleSize: 1024, windowSeconds: 300 }, new: { sampleSize: 2048, windowSeconds: 60 } }))).toEqual([
      { label: "sample size", value: "1024 → 2048" },
      { label: "window seconds", value: "300 → 60" },
    ]);
    expect(describeDetail(JSON.stringify({ role: "engineer", expiresAt: Date.UTC(2025, 2, 8, 14, 5, 9) }))).toEqual([
      { label: "role", value: "engineer" },
      { label: "expires at", value: "2025-03-08 14:05:09 UTC" },
    ]);
    expect(describeDetail(JSON.stringify({ collectors: ["pop-a", "pop-b"] }))).toEqual([{ label: "collectors", value: "pop-a, pop-b" }]);
    expect(describeDetail("not json")).toEqual([{ label: "", value: "not json" }]);
    expect(describeDetail(null)).toEqual([]);
  });
});

// The development page of caught mail (the fake SMTP server is in use whenever SMTP_URL is unset).
describe("/dev/mail", () => {
  let t: TestServer;
  beforeAll(async () => {
    t = await startTestServer();
  });
  afterAll(() => t?.close());

  it("lists caught messages, newest first", async () => {
    const empty = await visible(await fetch(`${t.url}/dev/mail`));
    expect(empty).toContain("No mail caught yet");

    await t.server.mail.send({ to: "first@example.net", subject: "First test message", text: "Hello from the ledger test." });
    // RFC 2047 encoded words: a non-ASCII subject travels encoded and is shown decoded.
    await t.server.mail.send({ to: "second@example.net", subject: "Zweite Nachricht – Grüße", text: "Open http://127.0.0.1/invite/example to accept." });
    const res = await fetch(`${t.url}/dev/mail`);
    expect(res.status).toBe(200);
    const html = await visible(res);
    expect(html).toContain("2 messages, newest first");
    const second = html.indexOf("Zweite Nachricht – Grüße");
    const first = html.indexOf("First test message");
    expect(second).toBeGreaterThan(-1);
    expect(first).toBeGreaterThan(second);
    expect(html).toContain("first@example.net");
    expect(html).toContain('<a href="http://127.0.0.1/invite/example"');
  });
});
