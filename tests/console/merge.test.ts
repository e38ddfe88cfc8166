import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";
import { flows, storedReservoirs, WINDOW_MS } from "../merges/helpers";

// The Merge page of the console (/t/:tenant/merge) against a real server: engineers preview,
// create, list and delete merges of stream collectors; viewers get 403 and outsiders 404
// (role model of the product design; 404 for a foreign tenant so its existence does not
// leak, common practice for multi-tenant services). The merged samples themselves are
// checked against the merge rule of Duffield, Lund, Thorup (J. ACM 54(6), 2007) in
// tests/merges/; here the page must show and store what the same merge stores.

const T0 = Date.UTC(2024, 4, 1, 2, 0);
const K = 32;
const form = (fields: [string, string][]) => ({
  method: "POST",
  headers: { "content-type": "application/x-www-form-urlencoded" },
  body: new URLSearchParams(fields),
});
/** The Merge form as a browser posts it: times as the datetime-local inputs give them (UTC on this page). */
const mergeFields = (intent: string, name: string, collectors: string[], range = { from: "2024-05-01T02:00", to: "2024-05-01T02:15" }): [string, string][] => [
  ["intent", intent],
  ...collectors.map((c): [string, string] => ["collectors", c]),
  ["from", range.from],
  ["to", range.to],
  ["sampleSize", String(K)],
  ["name", name],
];

describe("console Merge", () => {
  let t: TestServer;
  let riverlineId: number;
  let overlapId: number;
  let eli: SignedIn, vera: SignedIn, oskar: SignedIn;
  let eliId: number;
  const sql = async (q: string, args: (string | number)[] = []) => (await t.server.db.$client.execute({ sql: q, args })).rows;

  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await tenantWithKey(t.server, "riverline", { collector: "pop-west", scope: "ingest", sampleSize: K });
    riverlineId = riverline.tenant.id;
    const east = (await keyFor(t.server, riverlineId, "pop-east", "ingest")).key;
    for (const [key, records] of [
      [riverline.key, flows(1, 80, T0, "198.51.100")],
      [east, flows(2, 50, T0, "203.0.113")],
      [riverline.key, flows(3, 40, T0 + WINDOW_MS, "198.51.100")],
    ] as const) {
      expect((await postFlows(t.url, key, JSON.stringify(records))).status).toBe(200);
    }

    // A tenant with coordinated priorities where both collectors export the same flows.
    const overlap = await tenantWithKey(t.server, "overlap", { collector: "core-a", scope: "ingest", sampleSize: 16 });
    overlapId = overlap.tenant.id;
    await t.server.db.$client.execute({ sql: "UPDATE tenants SET coordinated = 1, coordination_secret = ? WHERE id = ?", args: ["00112233445566778899aabbccddeeff", overlapId] });
    const coreB = (await keyFor(t.server, overlapId, "core-b", "ingest")).key;
    const shared = flows(7, 60, T0, "192.0.2");
    expect((await postFlows(t.url, overlap.key, JSON.stringify([...shared, ...flows(8, 20, T0, "198.51.100")]))).status).toBe(200);
    expect((await postFlows(t.url, coreB, JSON.stringify([...flows(9, 20, T0, "203.0.113"), ...shared]))).status).toBe(200);

    const other = await tenantWithKey(t.server, "tributary", { collector: "office-gw" });
    const grants = [
      ["eli@example.com", riverlineId, "engineer"],
      ["eli@example.com", overlapId, "engineer"],
      ["vera@example.com", riverlineId, "viewer"],
      ["oskar@example.org", other.tenant.id, "admin"],
    ] as const;
    for (const [email, tenantId, role] of grants) {
      const user = await ensureUserByEmail(t.server.db, email);
      if (email.startsWith("eli")) eliId = user.id;
      await setMembership(t.server.db, user.id, tenantId, role);
    }
    [eli, vera, oskar] = await Promise.all(["eli-engineer", "vera-viewer", "oskar-outsider"].map((login) => signIn(t.url, login)));
  });
  afterAll(() => t?.close());

  it("shows engineers the stream collectors to merge, the explanation with its cautions, and the upload form", async () => {
    const res = await eli.fetch("/t/riverline/merge");
    expect(res.status).toBe(200);
    const html = await res.text();
    expect(html).toContain('name="collectors" value="pop-east"');
    expect(html).toContain('name="collectors" value="pop-west"');
    // The sample size defaults to the tenant's k.
    expect(html).toMatch(new RegExp(`<input id="merge-k"[^>]*name="sampleSize" value="${K}"`));
    expect(html).toContain("Duffield, Lund, Thorup, J. ACM 54(6), 2007");
    expect(html).toContain("It is a snapshot");
    expect(html).toContain("use exact accounting");
    expect(html).toContain("No merges yet");
    expect(html).toContain("Upload a sample file");
  });

  it("answers 403 to viewers and 404 to non-members, for the page and the form", async () => {
    expect((await vera.fetch("/t/riverline/merge")).status).toBe(403);
    expect((await vera.fetch("/t/riverline/merge", form(mergeFields("create", "by-viewer", ["pop-west"])))).status).toBe(403);
    expect((await oskar.fetch("/t/riverline/merge")).status).toBe(404);
    expect((await oskar.fetch("/t/riverline/merge", form(mergeFields("create", "by-outsider", ["pop-west"])))).status).toBe(404);
    expect(await sql("SELECT id FROM collectors WHERE name IN ('by-viewer', 'by-outsider')")).toHaveLength(0);
  });

  it("previews without storing, then creates what the preview showed and lists it with its provenance", async () => {
    const preview = await eli.fetch("/t/riverline/merge", form(mergeFields("preview", "both-pops", ["pop-west", "pop-east"])));
    expect(preview.status).toBe(200);
    const previewHtml = await preview.text();
    expect(previewHtml).toContain("Preview of both-pops");
    expect(previewHtml).toContain("2024-05-01 02:00");
    expect(previewHtml).toContain("2024-05-01 02:05");
    expect(await sql("SELECT id FROM collectors WHERE tenant_id = ? AND name = 'both-pops'", [riverlineId])).toHaveLength(0);

    const create = await eli.fetch("/t/riverline/merge", form(mergeFields("create", "both-pops", ["pop-west", "pop-east"])));
    expect(create.status).toBe(200);
    const html = await create.text();
    expect(html).toContain("Created both-pops");
    // The summaries' windows (UTC, inputs, exact records, k, τ, kept) are the same for preview and create.
    const rows = (page: string) => /<tbody class="font-mono text-xs">(.*?)<\/tbody>/s.exec(page)?.[1];
    expect(rows(html)).toBeDefined();
    expect(rows(html)).toBe(rows(previewHtml));

    const stored = await storedReservoirs(t.server.db.$client, riverlineId, "both-pops");
    expect(stored.map((s) => s.records)).toEqual([130, 40]);
    expect(stored.map((s) => s.kept.length)).toEqual([K, K]);
    const [row] = await sql("SELECT m.inputs, m.from_ms, m.to_ms, m.sample_size, m.created_by FROM merges m JOIN collectors c ON c.id = m.collector_id WHERE c.name = 'both-pops'");
    expect(row).toMatchObject({ inputs: '["pop-west","pop-east"]', from_ms: T0, to_ms: T0 + 3 * WINDOW_MS, sample_size: K, created_by: "eli-engineer" });
    const [audit] = await sql("SELECT actor, actor_user_id FROM audit_log WHERE action = 'merge.create' AND target = 'both-pops'");
    expect(audit).toMatchObject({ actor: "eli-engineer", actor_user_id: eliId });

    const listed = /<tr[^>]*data-merge="both-pops"[^>]*>(.*?)<\/tr>/s.exec(await (await eli.fetch("/t/riverline/merge")).text())?.[1] ?? "";
    expect(listed).toContain("pop-west, pop-east");
    expect(listed).toContain("2024-05-01 02:00");
    expect(listed).toContain("eli-engineer");
  });

  it("offers the merge in Slice apart from the stream collectors, with the rule for picking it", async () => {
    const html = await (await vera.fetch("/t/riverline/slice")).text();
    expect(html).toContain('id="slice-merges-label"');
    expect(html).toContain("both-pops");
    expect(html).toContain("of <!-- -->pop-west, pop-east");
    expect(html).toContain("it counts only when picked, and not together with its own inputs");
  });

  it("marks the fields that are wrong and stores nothing", async () => {
    const res = await eli.fetch("/t/riverline/merge", form(mergeFields("create", "no-inputs", [])));
    expect(res.status).toBe(400);
    const html = await res.text();
    expect(html).toContain("Collectors: must name at least one collector.");
    const taken = await eli.fetch("/t/riverline/merge", form(mergeFields("create", "both-pops", ["pop-west"])));
    expect(taken.status).toBe(409);
    expect(await taken.text()).toContain("both-pops is an existing merge; delete it first");
    const nothing = await eli.fetch("/t/riverline/merge", form(mergeFields("create", "empty-range", ["pop-east"], { from: "2024-06-01T00:00", to: "2024-06-02T00:00" })));
    expect(nothing.status).toBe(422);
    expect(await nothing.text()).toContain("nothing to merge");
    expect(await sql("SELECT id FROM collectors WHERE name IN ('no-inputs', 'empty-range')")).toHaveLength(0);
  });

  it("shows the deduplication notice for a coordinated tenant", async () => {
    const res = await eli.fetch("/t/overlap/merge", form(mergeFields("preview", "core-both", ["core-a", "core-b"])));
    expect(res.status).toBe(200);
    const html = await res.text();
    const notice = /Deduplicated: (\d+) flows kept by more than one collector were counted once/.exec(html);
    expect(notice).not.toBeNull();
    expect(Number(notice![1])).toBeGreaterThan(0);
    expect(html).toContain("This tenant samples with coordinated priorities");
  });

  it("deletes a merge after a confirm step, and records it", async () => {
    const confirm = await (await eli.fetch("/t/riverline/merge?delete=both-pops")).text();
    expect(confirm).toContain("Delete the merge both-pops and its 2 merged windows?");
    const res = await eli.fetch("/t/riverline/merge", form([["intent", "delete"], ["name", "both-pops"]]));
    expect(res.status).toBe(200);
    expect(await res.text()).toContain("Deleted the merge both-pops; its inputs (pop-west, pop-east) are unchanged.");
    expect(await sql("SELECT id FROM collectors WHERE name = 'both-pops'")).toHaveLength(0);
    expect(await sql("SELECT id FROM merges")).toHaveLength(0);
    const [audit] = await sql("SELECT actor, actor_user_id FROM audit_log WHERE action = 'merge.delete' AND target = 'both-pops'");
    expect(audit).toMatchObject({ actor: "eli-engineer", actor_user_id: eliId });
    // A stream collector is not deleted here.
    const stream = await eli.fetch("/t/riverline/merge", form([["intent", "delete"], ["name", "pop-west"]]));
    expect(stream.status).toBe(422);
    expect(await sql("SELECT id FROM collectors WHERE name = 'pop-west'")).toHaveLength(1);
  });
});
