import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import type { EstimateAnswer } from "~/query/answer";
import { createTenant } from "~/tenants.server";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

// Slice: estimates read with a console session (`?tenant=`) instead of an API key, and the
// Slice page itself. The session path must give exactly the answer of the key path for the
// same question, since both run the same estimator (Duffield, Lund, Thorup, J. ACM 54(6),
// 2007) over the same reservoirs; a tenant the user does not belong to answers 404, as every
// console page does, so its existence does not leak (common practice for multi-tenant services).

const T0 = Date.UTC(2024, 4, 1, 2, 0);
const WINDOW_MS = 300_000;
const FROM = new Date(T0).toISOString();
const TO = new Date(T0 + 4 * WINDOW_MS).toISOString();

/**
 * 600 invented records over four 5-minute windows, in documentation space (RFC 5737, RFC 3849),
 * with sizes spread over three orders of magnitude so that k = 64 keeps a real sample (τ > 0).
 */
function records() {
  return Array.from({ length: 600 }, (_, i) => ({
    src: i % 5 === 0 ? `2001:db8:1::${(i % 200).toString(16)}` : `198.51.100.${i % 256}`,
    dst: i % 3 === 0 ? `203.0.113.${(i * 7) % 256}` : `192.0.2.${(i * 11) % 256}`,
    sport: 1024 + ((i * 37) % 60000),
    dport: [443, 80, 53][i % 3],
    proto: i % 3 === 2 ? 17 : 6,
    bytes: 40 + ((i * 7919) % 100_000),
    packets: 1 + (i % 70),
    start: T0 + (i % 4) * WINDOW_MS + i,
  }));
}

describe("Slice: estimates with a console session, and the page", () => {
  let t: TestServer;
  let key: string;
  const people = {} as Record<"viewer" | "engineer" | "admin" | "outsider", SignedIn>;

  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await tenantWithKey(t.server, "riverline", { scope: "both", sampleSize: 64 });
    key = riverline.key;
    const tributary = await tenantWithKey(t.server, "tributary", { scope: "both", collector: "office-gw" });
    await createTenant(t.server.db, { slug: "empty-one" });
    const grant = async (email: string, tenantId: number, role: "viewer" | "engineer" | "admin") =>
      setMembership(t.server.db, (await ensureUserByEmail(t.server.db, email)).id, tenantId, role);
    await grant("vera@example.com", riverline.tenant.id, "viewer");
    await grant("eli@example.com", riverline.tenant.id, "engineer");
    await grant("ada@example.com", riverline.tenant.id, "admin");
    await grant("oskar@example.org", tributary.tenant.id, "admin");
    const emptyOne = await t.server.db.$client.execute("SELECT id FROM tenants WHERE slug = 'empty-one'");
    await grant("vera@example.com", Number(emptyOne.rows[0].id), "viewer");

    const res = await postFlows(t.url, key, JSON.stringify(records()));
    expect(res.status, await res.clone().text()).toBe(200);
    // The other tenant has its own records in the same windows: they must never show up in riverline's answers.
    const foreign = await postFlows(t.url, tributary.key, JSON.stringify([{ src: "198.51.100.1", dst: "203.0.113.1", proto: 6, bytes: 999_999, packets: 9, start: T0 }]));
    expect(foreign.status).toBe(200);

    people.viewer = await signIn(t.url, "vera-viewer");
    people.engineer = await signIn(t.url, "eli-engineer");
    people.admin = await signIn(t.url, "ada-admin");
    people.outsider = await signIn(t.url, "oskar-outsider");
  });
  afterAll(() => t?.close());

  const withKey = (path: string, init: RequestInit = {}) =>
    fetch(`${t.url}${path}`, { ...init, headers: { ...(init.headers as Record<string, string>), authorization: `Bearer ${key}` } });
  const json = async (res: Response) => ({ status: res.status, body: await res.json() });

  const questions: [string, string, object][] = [
    ["everything", `from=${FROM}&to=${TO}`, { from: FROM, to: TO }],
    [
      "a source /24 to HTTPS, by destination /24 (RFC 4632)",
      `from=${FROM}&to=${TO}&src=198.51.100.0/24&dport=443&groupBy=dst&prefixLength=24`,
      { from: FROM, to: TO, where: { src: ["198.51.100.0/24"], dport: [443] }, groupBy: "dst", prefixLength: 24 },
    ],
    [
      "IPv6 sources, flows per window",
      `from=${FROM}&to=${TO}&src=2001:db8::/32&metric=flows&groupBy=window&top=1000`,
      { from: FROM, to: TO, where: { src: ["2001:db8::/32"] }, metric: "flows", groupBy: "window", top: 1000 },
    ],
  ];

  describe("GET and POST /api/v1/estimate?tenant=<slug> with a session", () => {
    it.each(questions)("a viewer's session gets the key's answer by GET: %s", async (_, search) => {
      const session = await json(await people.viewer.fetch(`/api/v1/estimate?tenant=riverline&${search}`));
      const bearer = await json(await withKey(`/api/v1/estimate?${search}`));
      expect(bearer.status).toBe(200);
      expect(session.status).toBe(200);
      expect(session.body).toEqual(bearer.body);
      const answer = session.body as EstimateAnswer;
      // Only riverline's 600 records are in range (exact counters, whatever the filter).
      expect(answer.exact.records).toBe(600);
      expect(answer.collectors).toEqual(["edge-1"]);
    });

    it.each(questions)("a viewer's session gets the key's answer by POST: %s", async (_, __, body) => {
      const init = { method: "POST", headers: { "content-type": "application/json" }, body: JSON.stringify(body) };
      const session = await json(await people.viewer.fetch("/api/v1/estimate?tenant=riverline", init));
      const bearer = await json(await withKey("/api/v1/estimate", init));
      expect(bearer.status).toBe(200);
      expect(session.status).toBe(200);
      expect(session.body).toEqual(bearer.body);
    });

    it("the answer is a real sample: τ > 0 leaves a standard error, and the 95% interval is estimate ± 1.96·SE (DLT 2007; normal quantile)", async () => {
      const { body } = await json(await people.engineer.fetch(`/api/v1/estimate?tenant=riverline&from=${FROM}&to=${TO}&src=198.51.100.0/24`));
      const a = body as EstimateAnswer;
      expect(a.kept).toBeGreaterThan(10);
      expect(a.stdError).toBeGreaterThan(0);
      expect(a.ci95[1]).toBeCloseTo(a.estimate + 1.959963984540054 * a.stdError, 6);
    });

    it("answers 404 to a member of another tenant, and for a tenant that does not exist, with the same words", async () => {
      for (const slug of ["riverline", "no-such-tenant"]) {
        const get = await json(await people.outsider.fetch(`/api/v1/estimate?tenant=${slug}&from=${FROM}&to=${TO}`));
        expect(get.status).toBe(404);
        expect(get.body.error).toEqual({ code: "not_found", message: "No such tenant, or you are not a member of it." });
        const post = await people.outsider.fetch(`/api/v1/estimate?tenant=${slug}`, {
          method: "POST",
          headers: { "content-type": "application/json" },
          body: JSON.stringify({ from: FROM, to: TO }),
        });
        expect(post.status).toBe(404);
      }
      // Their own tenant answers, with its own single record only.
      const own = await json(await people.outsider.fetch(`/api/v1/estimate?tenant=tributary&from=${FROM}&to=${TO}`));
      expect(own.status).toBe(200);
      expect(own.body.exact).toEqual({ records: 1, bytes: 999_999, packets: 9 });
    });

    it("answers 401 to nobody signed in, by GET and POST", async () => {
      const get = await json(await fetch(`${t.url}/api/v1/estimate?tenant=riverline&from=${FROM}&to=${TO}`));
      expect(get.status).toBe(401);
      expect(get.body.error.code).toBe("unauthenticated");
      expect(get.body.error.message).toMatch(/Sign in to the console/);
      const post = await fetch(`${t.url}/api/v1/estimate?tenant=riverline`, { method: "POST", headers: { "content-type": "application/json" }, body: "{}" });
      expect(post.status).toBe(401);
      // Without ?tenant= it is the API as before: a key is asked for.
      const bare = await json(await fetch(`${t.url}/api/v1/estimate?from=${FROM}&to=${TO}`));
      expect(bare.status).toBe(401);
      expect(bare.body.error.message).toBe("Send an API key as 'Authorization: Bearer <key>'.");
    });

    it("tells a signed-in person who forgot ?tenant= how to ask (400), and refuses it twice", async () => {
      const missing = await json(await people.viewer.fetch(`/api/v1/estimate?from=${FROM}&to=${TO}`));
      expect(missing.status).toBe(400);
      expect(missing.body.error.details).toEqual([{ path: "tenant", message: "is required with a console session: add ?tenant=<slug> to the URL" }]);
      const twice = await json(await people.viewer.fetch(`/api/v1/estimate?tenant=riverline&tenant=riverline&from=${FROM}&to=${TO}`));
      expect(twice.status).toBe(400);
      expect(twice.body.error.details[0]).toEqual({ path: "tenant", message: "is given 2 times; give it once" });
    });

    it("explains a bad question field by field, as the Slice page shows it (RFC 4632 host bits)", async () => {
      const bad = await json(await people.viewer.fetch(`/api/v1/estimate?tenant=riverline&from=${FROM}&to=${TO}&src=198.51.100.7/24&dport=70000`));
      expect(bad.status).toBe(400);
      expect(bad.body.error.code).toBe("invalid_query");
      expect(bad.body.error.details).toEqual([
        { path: "src[0]", message: "198.51.100.7/24 has host bits set; did you mean 198.51.100.0/24?" },
        { path: "dport[0]", message: 'must be a port 0–65535 or a range such as "1024-65535"; ports stop at 65535 (RFC 7012 unsigned16)' },
      ]);
      // POST still takes the question in the body only; tenant is the one parameter allowed beside it.
      const post = await json(
        await people.viewer.fetch(`/api/v1/estimate?tenant=riverline&from=${FROM}`, { method: "POST", headers: { "content-type": "application/json" }, body: JSON.stringify({ from: FROM, to: TO }) }),
      );
      expect(post.status).toBe(400);
      expect(post.body.error.details).toEqual([{ path: "from", message: "POST takes the query in the JSON body, not the query string" }]);
    });

    it("with an API key the key decides: ?tenant= may name its own tenant, not another", async () => {
      const own = await json(await withKey(`/api/v1/estimate?tenant=riverline&from=${FROM}&to=${TO}`));
      const plain = await json(await withKey(`/api/v1/estimate?from=${FROM}&to=${TO}`));
      expect(own.status).toBe(200);
      expect(own.body).toEqual(plain.body);
      const other = await json(await withKey(`/api/v1/estimate?tenant=tributary&from=${FROM}&to=${TO}`));
      expect(other.status).toBe(400);
      expect(other.body.error.details[0].message).toMatch(/this API key belongs to tenant riverline/);
      // A session cookie sent along with a key changes nothing: the key still decides.
      const both = await json(
        await people.outsider.fetch(`/api/v1/estimate?from=${FROM}&to=${TO}`, { headers: { authorization: `Bearer ${key}` } }),
      );
      expect(both.status).toBe(200);
      expect(both.body).toEqual(plain.body);
    });
  });

  describe("the Slice page", () => {
    it.each(["viewer", "engineer", "admin"] as const)("renders for a %s, with the question of the URL in the form", async (role) => {
      const res = await people[role].fetch("/t/riverline/slice?range=6h&src=198.51.100.0/24&groupBy=dst");
      expect(res.status).toBe(200);
      const html = await res.text();
      expect(html).toContain("<h1");
      expect(html).toMatch(/>Slice</);
      // The chip from the URL, the tenant's collector in the form, the cautions (product design).
      expect(html).toContain("198.51.100.0/24");
      expect(html).toContain("edge-1");
      expect(html).toContain("Estimates are statistical");
      expect(html).toContain("can be personal data");
      expect(html).not.toContain("office-gw");
    });

    it("answers 404 to a member of another tenant and sends nobody to sign in", async () => {
      expect((await people.outsider.fetch("/t/riverline/slice")).status).toBe(404);
      const anonymous = await fetch(`${t.url}/t/riverline/slice?src=198.51.100.0/24`, { redirect: "manual" });
      expect(anonymous.status).toBe(302);
      // The way back keeps the question, so a shared link still works after signing in.
      const location = new URL(anonymous.headers.get("location")!, t.url);
      expect(location.pathname).toBe("/signin");
      const back = new URL(location.searchParams.get("returnTo")!, t.url);
      expect(back.pathname).toBe("/t/riverline/slice");
      expect(back.searchParams.get("src")).toBe("198.51.100.0/24");
    });

    it("explains how to send flows when the tenant has none yet", async () => {
      const res = await people.viewer.fetch("/t/empty-one/slice");
      expect(res.status).toBe(200);
      const html = await res.text();
      expect(html).toContain("No flow records in empty-one yet");
      expect(html).toContain("/api/v1/flows");
    });

    it("says which parts of a hand-edited link it set aside", async () => {
      const res = await people.viewer.fetch("/t/riverline/slice?range=2h&top=0");
      expect(res.status).toBe(200);
      const html = await res.text();
      expect(html).toContain("Parts of this link were set aside");
      expect(html).toContain("range=2h is not one of 1h, 6h, 24h, 7d");
    });
  });
});
