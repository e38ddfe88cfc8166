import { createHash } from "node:crypto";
import { createServer } from "node:net";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import type { Role } from "~/db/schema.server";
import { createTenant } from "~/tenants.server";
import { startFakeSmtp, type FakeSmtp } from "../../scripts/fakes/smtp";
import { startTestServer, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

const TOKEN_IN_LINK = /\/invite\/([A-Za-z0-9_-]{43})\b/;

/** The page's text as a reader sees it: React separates adjacent text parts with empty comments. */
async function visible(res: Response): Promise<string> {
  return (await res.text()).replaceAll("<!-- -->", "");
}

/** A free loopback port, so a server's PUBLIC_URL can name its own address before it starts. */
function freePort(): Promise<number> {
  return new Promise((resolve, reject) => {
    const probe = createServer().listen(0, "127.0.0.1", () => {
      const { port } = probe.address() as { port: number };
      probe.close(() => resolve(port));
    });
    probe.on("error", reject);
  });
}

async function rows(t: TestServer, sql: string, args: (string | number)[] = []) {
  return (await t.server.db.$client.execute({ sql, args })).rows;
}

async function roleOf(t: TestServer, email: string, slug: string): Promise<Role | undefined> {
  const [row] = await rows(t, "SELECT m.role FROM memberships m JOIN users u ON u.id = m.user_id JOIN tenants t ON t.id = m.tenant_id WHERE u.email = ? AND t.slug = ?", [email, slug]);
  return row?.role as Role | undefined;
}

async function userId(t: TestServer, email: string): Promise<number> {
  const [row] = await rows(t, "SELECT id FROM users WHERE email = ?", [email]);
  return Number(row.id);
}

/** The invitation link of the one message the fake SMTP server caught for that address. */
function caughtLink(t: TestServer, to: string): { link: string; token: string } {
  const messages = t.server.mail.caught()!.filter((m) => m.to.includes(to));
  expect(messages).toHaveLength(1);
  const match = TOKEN_IN_LINK.exec(messages[0].text);
  expect(match, "the e-mail holds the invitation link").not.toBeNull();
  const link = messages[0].text.split(/\s+/).find((w) => TOKEN_IN_LINK.test(w))!;
  return { link, token: match![1] };
}

// People: members, roles, e-mailed invitations (over SMTP, RFC 5321, to the local fake) and
// the last-admin rule, all through the real server and the fake GitHub sign-in.
describe("People", () => {
  let t: TestServer;
  let ada: SignedIn;
  beforeAll(async () => {
    t = await startTestServer();
    const db = t.server.db;
    const riverline = await createTenant(db, { slug: "riverline", name: "Riverline" });
    const tributary = await createTenant(db, { slug: "tributary", name: "Tributary" });
    const solo = await createTenant(db, { slug: "solo", name: "Solo" });
    const grant = async (email: string, tenantId: number, role: Role) => setMembership(db, (await ensureUserByEmail(db, email)).id, tenantId, role);
    await grant("ada@example.com", riverline.id, "admin");
    await grant("ada@example.com", solo.id, "admin");
    await grant("eli@example.com", riverline.id, "engineer");
    await grant("eli@example.com", solo.id, "engineer");
    await grant("vera@example.com", riverline.id, "viewer");
    await grant("oskar@example.org", tributary.id, "admin");
    ada = await signIn(t.url, "ada-admin");
  });
  afterAll(() => t?.close());

  it("invites by e-mail; the invitee signs in, accepts once and becomes an engineer", async () => {
    const sent = await ada.post("/t/riverline/people", { intent: "invite", email: "Nina@Example.net", role: "engineer" });
    expect(sent.status).toBe(200);
    expect(await sent.text()).toContain("Invitation sent to nina@example.net");

    // RFC 5321: one message, delivered to the envelope recipient; RFC 5322 headers name sender and subject.
    const [message] = t.server.mail.caught()!.filter((m) => m.to.includes("nina@example.net"));
    expect(message.from).toBe("Weir <weir@localhost>");
    expect(message.subject).toBe("Ada Admin invited you to Riverline on Weir");
    expect(message.text).toContain("Ada Admin (ada@example.com) invited you");
    const { link, token } = caughtLink(t, "nina@example.net");
    expect(link).toBe(`${t.url}/invite/${token}`);

    // Common practice for bearer tokens: only a hash is stored, never the token itself.
    const [invite] = await rows(t, "SELECT token_hash, role, expires_at - created_at AS ttl FROM invites WHERE email = 'nina@example.net'");
    expect(invite.token_hash).toBe(createHash("sha256").update(token).digest("hex"));
    expect(invite.role).toBe("engineer");
    expect(invite.ttl).toBe(7 * 24 * 3600_000);
    expect(JSON.stringify(await rows(t, "SELECT * FROM invites"))).not.toContain(token);

    const pending = await (await ada.fetch("/t/riverline/people")).text();
    expect(pending).toMatch(/data-email="nina@example.net"/);

    // Opened signed out: who invited which address to which tenant as what, then a sign-in that comes back here.
    const anonymous = await fetch(`${t.url}/invite/${token}`, { redirect: "manual" });
    expect(anonymous.status).toBe(200);
    const before = await visible(anonymous);
    expect(before).toContain("Join Riverline as an engineer");
    expect(before.replace(/<[^>]+>/g, "")).toContain("ada-admin invited nina@example.net to the tenant Riverline");
    expect(before).toContain("An engineer slices traffic");
    expect(before).toMatch(/<form [^>]*action="\/auth\/github" method="post">/);
    expect(before).toContain(`<input type="hidden" name="returnTo" value="/invite/${token}"/>`);

    const nina = await signIn(t.url, "nina-newcomer");
    const page = await nina.fetch(`/invite/${token}`);
    expect(page.status).toBe(200);
    expect(await visible(page)).toContain("Join Riverline as an engineer");

    const accepted = await nina.post(`/invite/${token}`, {});
    expect(accepted.status).toBe(302);
    expect(accepted.headers.get("location")).toBe("/t/riverline/slice");
    expect(await roleOf(t, "nina@example.net", "riverline")).toBe("engineer");

    // Works once: the second use is refused (410 Gone, RFC 9110 §15.5.11) and changes nothing.
    const again = await nina.post(`/invite/${token}`, {});
    expect(again.status).toBe(410);
    expect(await again.text()).toContain("used meanwhile");
    const reopened = await nina.fetch(`/invite/${token}`);
    expect(reopened.status).toBe(410);
    expect(await reopened.text()).toContain("This invitation was already used");
    expect(await rows(t, "SELECT count(*) AS n FROM memberships m JOIN users u ON u.id = m.user_id WHERE u.email = 'nina@example.net'")).toEqual([expect.objectContaining({ n: 1 })]);

    const ledger = await rows(t, "SELECT action, actor, target, detail FROM audit_log WHERE action IN ('member.invite', 'invite.accept') AND target = 'nina@example.net' ORDER BY id");
    expect(ledger.map((r) => [r.action, r.actor])).toEqual([
      ["member.invite", "ada-admin"],
      ["invite.accept", "nina-newcomer"],
    ]);
    expect(JSON.parse(String(ledger[1].detail))).toEqual({ role: "engineer", invitedAs: "engineer", outcome: "joined" });
  });

  it("refuses an expired invitation with 410 and grants nothing", async () => {
    await ada.post("/t/riverline/people", { intent: "invite", email: "oskar@example.org", role: "viewer" });
    const { token } = caughtLink(t, "oskar@example.org");
    await rows(t, "UPDATE invites SET expires_at = ? WHERE email = 'oskar@example.org'", [Date.now() - 1000]);

    const oskar = await signIn(t.url, "oskar-outsider");
    const page = await oskar.fetch(`/invite/${token}`);
    expect(page.status).toBe(410);
    expect(await page.text()).toContain("This invitation has expired");
    const post = await oskar.post(`/invite/${token}`, {});
    expect(post.status).toBe(410);
    expect(await roleOf(t, "oskar@example.org", "riverline")).toBeUndefined();
    // An expired invitation is no longer pending.
    expect(await (await ada.fetch("/t/riverline/people")).text()).not.toContain('data-email="oskar@example.org"');
  });

  it("revokes a pending invitation, after which its link answers 410", async () => {
    await ada.post("/t/riverline/people", { intent: "invite", email: "revoked@example.net", role: "admin" });
    const { token } = caughtLink(t, "revoked@example.net");
    const [invite] = await rows(t, "SELECT id FROM invites WHERE email = 'revoked@example.net'");
    const revoked = await ada.post("/t/riverline/people", { intent: "revoke", inviteId: String(invite.id) });
    expect(revoked.status).toBe(200);
    expect(await revoked.text()).toContain("is revoked");

    const vera = await signIn(t.url, "vera-viewer");
    const page = await vera.fetch(`/invite/${token}`);
    expect(page.status).toBe(410);
    expect(await page.text()).toContain("This invitation was withdrawn");
    expect((await vera.post(`/invite/${token}`, {})).status).toBe(410);
    expect(await roleOf(t, "vera@example.com", "riverline")).toBe("viewer");
    expect((await rows(t, "SELECT actor, target FROM audit_log WHERE action = 'invite.revoke'"))[0]).toMatchObject({ actor: "ada-admin", target: "revoked@example.net" });
    // Revoking twice finds nothing pending.
    expect((await ada.post("/t/riverline/people", { intent: "revoke", inviteId: String(invite.id) })).status).toBe(404);
  });

  it("signed out, a link that cannot be used gets one plain 404 naming no tenant or person, whatever the reason", async () => {
    const pageOf = async (token: string) => {
      const res = await fetch(`${t.url}/invite/${token}`, { redirect: "manual" });
      return { status: res.status, text: await visible(res) };
    };
    await ada.post("/t/riverline/people", { intent: "invite", email: "late@example.net", role: "admin" });
    const expired = caughtLink(t, "late@example.net").token;
    await rows(t, "UPDATE invites SET expires_at = ? WHERE email = 'late@example.net'", [Date.now() - 1000]);
    await ada.post("/t/riverline/people", { intent: "invite", email: "gone@example.net", role: "viewer" });
    const withdrawn = caughtLink(t, "gone@example.net").token;
    const [gone] = await rows(t, "SELECT id FROM invites WHERE email = 'gone@example.net'");
    await ada.post("/t/riverline/people", { intent: "revoke", inviteId: String(gone.id) });
    // 43 characters of the token alphabet, but no invitation has it.
    const never = "A".repeat(43);

    const pages = [await pageOf(expired), await pageOf(withdrawn), await pageOf(never), await pageOf("short")];
    for (const page of pages) {
      expect(page.status).toBe(404);
      expect(page.text).toContain("This invitation link cannot be used");
      expect(page.text).not.toMatch(/Riverline|ada-admin|Ada Admin|late@example|gone@example|Sign in with GitHub/);
    }
    // The same page for every reason (common practice: a dead bearer link reveals nothing).
    const body = (text: string) => text.slice(text.indexOf("<main"), text.indexOf("</main>"));
    expect(new Set(pages.map((p) => body(p.text))).size).toBe(1);
  });

  it("answers 404 for a link that is no invitation", async () => {
    const vera = await signIn(t.url, "vera-viewer");
    const unknown = await vera.fetch(`/invite/${"A".repeat(43)}`);
    expect(unknown.status).toBe(404);
    expect(await unknown.text()).toContain("This invitation link is not valid");
    expect((await vera.fetch("/invite/too-short")).status).toBe(404);
    expect((await vera.post(`/invite/${"B".repeat(43)}`, {})).status).toBe(404);
  });

  it("keeps a member's higher role when they accept an invitation for a lower one", async () => {
    await ada.post("/t/riverline/people", { intent: "invite", email: "eli-second@example.com", role: "viewer" });
    const { token } = caughtLink(t, "eli-second@example.com");
    const eli = await signIn(t.url, "eli-engineer");
    const page = await visible(await eli.fetch(`/invite/${token}`));
    expect(page).toContain("You already belong to Riverline as an engineer");
    expect((await eli.post(`/invite/${token}`, {})).status).toBe(302);
    expect(await roleOf(t, "eli@example.com", "riverline")).toBe("engineer");
  });

  it("refuses to invite a current member or to invite the same address twice, with 409", async () => {
    const member = await ada.post("/t/riverline/people", { intent: "invite", email: "vera@example.com", role: "admin" });
    expect(member.status).toBe(409);
    expect(await member.text()).toContain("vera@example.com already belongs to Riverline as a viewer");

    expect((await ada.post("/t/riverline/people", { intent: "invite", email: "twice@example.net", role: "viewer" })).status).toBe(200);
    const twice = await ada.post("/t/riverline/people", { intent: "invite", email: "twice@example.net", role: "viewer" });
    expect(twice.status).toBe(409);
    expect(await twice.text()).toContain("already has an invitation waiting");
    expect(t.server.mail.caught()!.filter((m) => m.to.includes("twice@example.net"))).toHaveLength(1);
  });

  it("answers 400 with the reason for a malformed form", async () => {
    const bad = await ada.post("/t/riverline/people", { intent: "invite", email: "not-an-address", role: "engineer" });
    expect(bad.status).toBe(400);
    expect(await bad.text()).toContain("E-mail must be an e-mail address");
    const role = await ada.post("/t/riverline/people", { intent: "invite", email: "x@example.net", role: "owner" });
    expect(role.status).toBe(400);
    expect(await role.text()).toContain("Role must be one of viewer, engineer, admin");
    const unknown = await ada.post("/t/riverline/people", { intent: "promote-everyone" });
    expect(unknown.status).toBe(400);
    expect(await unknown.text()).toContain("Unknown request");
    const id = await ada.post("/t/riverline/people", { intent: "role", userId: "abc", role: "admin" });
    expect(id.status).toBe(400);
    expect(await id.text()).toContain("Member id must be an id");
    // Not a form at all: 415 Unsupported Media Type (RFC 9110 §15.5.16).
    const json = await ada.fetch("/t/riverline/people", { method: "POST", headers: { "content-type": "application/json" }, body: JSON.stringify({ intent: "revoke", inviteId: 1 }) });
    expect(json.status).toBe(415);
    expect(await rows(t, "SELECT id FROM invites WHERE email IN ('not-an-address', 'x@example.net')")).toEqual([]);
  });

  it("changes a role and removes a member, both in the ledger", async () => {
    const db = t.server.db;
    const dana = await ensureUserByEmail(db, "dana@example.com");
    const [riverline] = await rows(t, "SELECT id FROM tenants WHERE slug = 'riverline'");
    await setMembership(db, dana.id, Number(riverline.id), "viewer");

    const promoted = await ada.post("/t/riverline/people", { intent: "role", userId: String(dana.id), role: "engineer" });
    expect(promoted.status).toBe(200);
    expect(await promoted.text()).toContain("dana@example.com is now an engineer (was a viewer)");
    expect(await roleOf(t, "dana@example.com", "riverline")).toBe("engineer");

    const removed = await ada.post("/t/riverline/people", { intent: "remove", userId: String(dana.id) });
    expect(removed.status).toBe(200);
    expect(await roleOf(t, "dana@example.com", "riverline")).toBeUndefined();
    // A person who is no longer a member cannot be changed (404, not a silent success).
    expect((await ada.post("/t/riverline/people", { intent: "remove", userId: String(dana.id) })).status).toBe(404);

    const ledger = await (await ada.fetch("/t/riverline/ledger?actor=ada-admin")).text();
    expect(ledger).toMatch(/data-action="member.role"/);
    expect(ledger).toContain("viewer → engineer");
    expect(ledger).toMatch(/data-action="member.remove"/);
    expect(ledger).toMatch(/<dt[^>]*>role<\/dt><dd[^>]*>engineer<\/dd>/);
  });

  it("never removes or demotes the last admin: 409 with the reason, nothing changed, control disabled", async () => {
    const adaId = await userId(t, "ada@example.com");
    const demote = await ada.post("/t/solo/people", { intent: "role", userId: String(adaId), role: "engineer" });
    expect(demote.status).toBe(409);
    expect(await demote.text()).toContain("This is the only admin of Solo");
    const remove = await ada.post("/t/solo/people", { intent: "remove", userId: String(adaId) });
    expect(remove.status).toBe(409);
    expect(await remove.text()).toContain("The only admin of Solo cannot be removed");
    expect(await roleOf(t, "ada@example.com", "solo")).toBe("admin");
    expect(await rows(t, "SELECT id FROM audit_log WHERE tenant_id = (SELECT id FROM tenants WHERE slug = 'solo')")).toEqual([]);

    const page = await (await ada.fetch("/t/solo/people")).text();
    expect(page).toContain("The only admin: make another member an admin before changing or removing this one.");
    expect(page).toMatch(new RegExp(`<select id="role-${adaId}"[^>]*disabled`));

    // With a second admin the first may step down.
    const eliId = await userId(t, "eli@example.com");
    expect((await ada.post("/t/solo/people", { intent: "role", userId: String(eliId), role: "admin" })).status).toBe(200);
    const stepDown = await ada.post("/t/solo/people", { intent: "role", userId: String(adaId), role: "engineer" });
    expect(stepDown.status).toBe(302);
    expect(stepDown.headers.get("location")).toBe("/t/solo/slice");
    expect(await roleOf(t, "ada@example.com", "solo")).toBe("engineer");
  });

  it("answers 403 to engineers and viewers, for the page and for every forged POST", async () => {
    const adaId = String(await userId(t, "ada@example.com"));
    const forged: Record<string, string>[] = [
      { intent: "invite", email: "forged@example.net", role: "admin" },
      { intent: "role", userId: adaId, role: "viewer" },
      { intent: "remove", userId: adaId },
      { intent: "revoke", inviteId: "1" },
    ];
    for (const login of ["eli-engineer", "vera-viewer"]) {
      const member = await signIn(t.url, login);
      const page = await member.fetch("/t/riverline/people");
      expect(page.status, login).toBe(403);
      expect(await page.text()).toContain("This needs the admin role");
      for (const fields of forged) expect((await member.post("/t/riverline/people", fields)).status, `${login} ${fields.intent}`).toBe(403);
    }
    expect(await roleOf(t, "ada@example.com", "riverline")).toBe("admin");
    expect(await rows(t, "SELECT id FROM invites WHERE email = 'forged@example.net'")).toEqual([]);
    expect(t.server.mail.caught()!.filter((m) => m.to.includes("forged@example.net"))).toEqual([]);
  });

  it("answers 404 to a member of another tenant, so the tenant's existence is not revealed", async () => {
    const oskar = await signIn(t.url, "oskar-outsider");
    expect((await oskar.fetch("/t/riverline/people")).status).toBe(404);
    expect((await oskar.post("/t/riverline/people", { intent: "invite", email: "oskar-friend@example.org", role: "admin" })).status).toBe(404);
    expect(await rows(t, "SELECT id FROM invites WHERE email = 'oskar-friend@example.org'")).toEqual([]);
  });
});

// With SMTP_URL set, Weir talks to that relay (here a separately started fake) and runs no fake of its own.
describe("People with a configured SMTP relay", () => {
  let relay: FakeSmtp;
  let t: TestServer;
  let ada: SignedIn;
  beforeAll(async () => {
    relay = await startFakeSmtp();
    // PUBLIC_URL names the host differently from the request (localhost, not 127.0.0.1), so the link shows which one it used.
    const port = await freePort();
    t = await startTestServer({
      env: { PORT: String(port), PUBLIC_URL: `http://localhost:${port}`, SMTP_URL: `smtp://${relay.host}:${relay.port}`, MAIL_FROM: "Weir Invitations <invites@example.com>" },
    });
    const tenant = await createTenant(t.server.db, { slug: "riverline", name: "Riverline" });
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "ada@example.com")).id, tenant.id, "admin");
    ada = await signIn(t.url, "ada-admin");
  });
  afterAll(async () => {
    await t?.close();
    await relay?.close();
  });

  it("sends the invitation through the relay, with the PUBLIC_URL link, and has no caught-mail page", async () => {
    expect(t.server.mail.caught()).toBeNull();
    expect((await fetch(`${t.url}/dev/mail`)).status).toBe(404);
    expect((await ada.post("/t/riverline/people", { intent: "invite", email: "nina@example.net", role: "viewer" })).status).toBe(200);
    const [message] = relay.caught();
    expect(message).toMatchObject({ from: "Weir Invitations <invites@example.com>", to: ["nina@example.net"] });
    expect(message.text).toContain(`\nhttp://localhost:${t.server.port}/invite/`);
  });

  it("makes no invitation when the relay cannot be reached (503 with the reason)", async () => {
    await relay.close();
    const res = await ada.post("/t/riverline/people", { intent: "invite", email: "unlucky@example.net", role: "viewer" });
    expect(res.status).toBe(503);
    expect(await res.text()).toContain("could not be sent");
    expect((await t.server.db.$client.execute("SELECT id FROM invites WHERE email = 'unlucky@example.net'")).rows).toEqual([]);
  });
});
