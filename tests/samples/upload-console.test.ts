import { createHash } from "node:crypto";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import type { FlowRecord } from "~/flow/record";
import { parseAddress } from "~/net/address";
import { formatBytes } from "~/components/merge/SampleUpload";
import { mergeStates } from "~/sampling/merge";
import { seededUniform } from "~/sampling/uniform";
import { toSampleFile, type SampleWindow } from "~/samples/document";
import { readStoredWindows } from "~/samples/store.server";
import { createTenant, ensureCollector } from "~/tenants.server";
import { startTestServer, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

// The Merge page's sample-file upload (POST /t/:tenant/merge/upload, multipart/form-data)
// against a real server, signed in through the local fake GitHub: engineers and admins may
// import, viewers get 403, members of other tenants 404, nobody signed in is sent to sign in.
// The import merges by the rule of priority sampling (N. Duffield, C. Lund, M. Thorup,
// "Priority sampling for estimation of arbitrary subset sums", J. ACM 54(6), 2007).

const WINDOW_MS = 300_000;
const T0 = Date.UTC(2024, 4, 1, 2, 0);
const MAX_BYTES = 100_000;
const NODE = "node-up";

/**
 * A priority sample by its definition (DLT 2007, section 2): priority q = w/u, the k highest
 * kept, τ = the (k+1)-th highest (0 when at most k were offered). Invented flows in RFC 5737
 * space with a private AS number (RFC 5398); weight = bytes, heavy-tailed (Pareto, shape 1.2).
 */
function sampledWindow(seed: number, windowStart: number, k: number, count: number, firstPort: number, collector = "site-c"): SampleWindow {
  const u = seededUniform(seed);
  const records: FlowRecord[] = [];
  const all = Array.from({ length: count }, (_, i) => {
    const bytes = BigInt(Math.max(40, Math.round(40 / Math.pow(u(), 1 / 1.2))));
    const start = windowStart + Math.floor(u() * WINDOW_MS);
    const record: FlowRecord = {
      src: parseAddress(`192.0.2.${(i % 200) + 1}`),
      dst: parseAddress("198.51.100.53"),
      sport: firstPort + i,
      dport: 443,
      proto: 6,
      bytes,
      packets: bytes / 1000n + 1n,
      start,
      end: start + 250,
      ingressInterface: null,
      egressInterface: null,
      srcAs: 64501,
      dstAs: null,
    };
    records.push(record);
    return { priority: Number(bytes) / u(), weight: Number(bytes), record };
  });
  all.sort((a, b) => b.priority - a.priority);
  return {
    collector,
    windowStart,
    windowSeconds: WINDOW_MS / 1000,
    k,
    tau: all.length > k ? all[k].priority : 0,
    seen: count,
    exact: { records: BigInt(count), bytes: records.reduce((s, r) => s + r.bytes, 0n), packets: records.reduce((s, r) => s + r.packets, 0n) },
    kept: all.slice(0, k),
    provenance: { node: "offline-1", weightAttribute: "bytes", updatedAt: windowStart + WINDOW_MS },
  };
}

function fileText(windows: SampleWindow[]): string {
  return JSON.stringify(toSampleFile({ exportedAt: T0 + 3_600_000, from: T0, to: T0 + 2 * WINDOW_MS, windows }));
}

function form(fields: Record<string, string | Blob>): FormData {
  const body = new FormData();
  for (const [name, value] of Object.entries(fields)) {
    if (value instanceof Blob) body.append(name, value, "weir-samples.json");
    else body.append(name, value);
  }
  return body;
}

const jsonFile = (text: string) => new Blob([text], { type: "application/json" });

describe("console sample upload (/t/:tenant/merge/upload)", () => {
  let t: TestServer;
  let tenantId: number;
  let eli: SignedIn, ada: SignedIn, vera: SignedIn, oskar: SignedIn;
  const PATH = "/t/riverline/merge/upload";

  const rows = async (sql: string, args: (string | number)[] = []) => (await t.server.db.$client.execute({ sql, args })).rows;
  async function snapshot(): Promise<string> {
    const parts = await Promise.all([
      rows("SELECT id, tenant_id, name, kind, copy_of FROM collectors ORDER BY id"),
      rows("SELECT id, collector_id, window_start, window_seconds, node, k, tau, records, bytes, packets, next_seq FROM reservoirs ORDER BY id"),
      rows("SELECT reservoir_id, seq, hex(data) FROM kept_records ORDER BY reservoir_id, seq"),
      rows("SELECT id, action, detail FROM audit_log WHERE action = 'samples.import' ORDER BY id"),
      rows("SELECT id, collector_id, digest, windows, kept, records FROM sample_imports ORDER BY id"),
      rows("SELECT id, import_id, source_collector, source_node, window_start, window_seconds FROM imported_windows ORDER BY id"),
    ]);
    return JSON.stringify(parts.map((p) => p.map((r) => Array.from(r))));
  }
  const upload = (client: SignedIn, body: BodyInit, headers: Record<string, string> = {}) => client.fetch(PATH, { method: "POST", body, headers });

  beforeAll(async () => {
    t = await startTestServer({ env: { NODE_ID: NODE, SAMPLES_MAX_BODY_BYTES: String(MAX_BYTES) } });
    const riverline = await createTenant(t.server.db, { slug: "riverline", sampleSize: 32 });
    const tributary = await createTenant(t.server.db, { slug: "tributary" });
    tenantId = riverline.id;
    const grants = [
      ["ada@example.com", riverline.id, "admin"],
      ["eli@example.com", riverline.id, "engineer"],
      ["vera@example.com", riverline.id, "viewer"],
      ["oskar@example.org", tributary.id, "admin"],
    ] as const;
    for (const [email, id, role] of grants) await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, email)).id, id, role);
    [eli, ada, vera, oskar] = await Promise.all(["eli-engineer", "ada-admin", "vera-viewer", "oskar-outsider"].map((login) => signIn(t.url, login)));
  });
  afterAll(() => t?.close());

  it("an engineer uploads a file into a new collector: its windows become that collector's reservoirs", async () => {
    const windows = [sampledWindow(1, T0, 16, 40, 20_000), sampledWindow(2, T0 + WINDOW_MS, 16, 7, 21_000)];
    const res = await upload(eli, form({ collector: "site-c-offline", file: jsonFile(fileText(windows)) }));
    const summary = await res.json();
    expect(res.status, JSON.stringify(summary)).toBe(200);
    expect(summary).toEqual({
      collector: "site-c-offline",
      // The file's windows name site-c: the new collector is a copy of it.
      copyOf: ["site-c"],
      windows: 2,
      mergedWithExisting: 0,
      kept: 16 + 7,
      records: 47,
      from: new Date(T0).toISOString(),
      to: new Date(T0 + 2 * WINDOW_MS).toISOString(),
      // SHA-256 of the uploaded bytes, by node:crypto (FIPS 180-4).
      digest: createHash("sha256").update(fileText(windows)).digest("hex"),
    });

    // Kind "copy" to readers: the stored kind stays stream, copy_of names the origin.
    const [collector] = await rows("SELECT id, kind, copy_of FROM collectors WHERE tenant_id = ? AND name = 'site-c-offline'", [tenantId]);
    expect(collector.kind).toBe("stream");
    expect(JSON.parse(String(collector.copy_of))).toEqual(["site-c"]);
    const stored = await readStoredWindows(t.server.db.$client, tenantId, { from: T0, to: T0 + 2 * WINDOW_MS, collectorIds: [Number(collector.id)] });
    expect(stored).toHaveLength(2);
    stored.forEach((s, i) => {
      const w = windows[i];
      // The same priority sample: k, τ, and the kept (priority, weight, record) triples (DLT 2007).
      expect(s).toMatchObject({ windowStart: w.windowStart, windowSeconds: 300, node: NODE, k: w.k, tau: w.tau, records: w.seen, bytes: w.exact.bytes, packets: w.exact.packets });
      expect(s.kept).toEqual(w.kept.map((e) => ({ item: e.record, weight: e.weight, priority: e.priority })));
    });

    const [entry] = await rows("SELECT actor, actor_user_id, target, detail FROM audit_log WHERE action = 'samples.import' ORDER BY id DESC LIMIT 1");
    expect(entry.actor).toBe("eli-engineer");
    expect(entry.actor_user_id).not.toBeNull();
    expect(entry.target).toBe("site-c-offline");
    expect(JSON.parse(String(entry.detail))).toEqual(summary);
  });

  it("an admin uploads into a collector that holds the window: the stored reservoir is the merge of the two", async () => {
    // Two sites' files of the same window (other ports: records disjoint from the first file's).
    const first = sampledWindow(3, T0, 12, 30, 30_000, "site-d");
    const second = sampledWindow(4, T0, 10, 25, 31_000, "site-e");
    expect((await upload(ada, form({ collector: "pop-merge", file: jsonFile(fileText([first])) }))).status).toBe(200);
    const res = await upload(ada, form({ collector: "pop-merge", file: jsonFile(fileText([second])) }));
    expect(await res.json()).toMatchObject({ windows: 1, mergedWithExisting: 1, kept: 10, records: 25 });

    const collector = await ensureCollector(t.server.db, tenantId, "pop-merge");
    const [stored] = await readStoredWindows(t.server.db.$client, tenantId, { from: T0, to: T0 + WINDOW_MS, collectorIds: [collector.id] });
    // Merge rule of DLT 2007 (app/sampling/merge.ts): k_m = min(12, 10), the k_m highest priorities
    // of the union, τ = the (k_m+1)-th among those priorities and both τ_j.
    const merged = mergeStates(
      [first, second].map((w) => ({ k: w.k, tau: w.tau, seen: w.seen, kept: w.kept.map((e) => ({ item: e.record, weight: e.weight, priority: e.priority })) })),
    );
    expect(stored).toMatchObject({ k: 10, tau: merged.tau, records: 55, bytes: first.exact.bytes + second.exact.bytes, packets: first.exact.packets + second.exact.packets });
    expect(stored.kept).toEqual(merged.kept);
    const priorities = [...first.kept, ...second.kept].map((e) => e.priority).sort((a, b) => b - a);
    expect(stored.tau).toBe(Math.max(first.tau, second.tau, priorities[10]));
  });

  it("refuses the same file again (409 duplicate_import, naming the earlier upload and who made it) and changes nothing", async () => {
    // A repeated file would count its records twice: the merge of DLT 2007 assumes disjoint streams.
    const text = fileText([sampledWindow(7, T0, 8, 12, 50_000, "site-f")]);
    expect((await upload(eli, form({ collector: "site-f-copy", file: jsonFile(text) }))).status).toBe(200);
    const before = await snapshot();
    for (const [who, into] of [[ada, "site-f-copy"], [eli, "site-f-elsewhere"]] as const) {
      const res = await upload(who, form({ collector: into, file: jsonFile(text) }));
      const answer = await res.json();
      expect(res.status, JSON.stringify(answer)).toBe(409);
      expect(answer.error.code).toBe("duplicate_import");
      expect(answer.error.message).toMatch(/imported already: into site-f-copy at \d{4}-\d{2}-\d{2}T.*Z by eli-engineer/);
      expect(answer.error.earlier).toMatchObject({ collector: "site-f-copy", by: "eli-engineer" });
    }
    expect(await snapshot()).toBe(before);
  });

  it("answers 403 to a viewer, 404 to a member of another tenant, a sign-in redirect to nobody; nothing stored", async () => {
    const before = await snapshot();
    const body = () => form({ collector: "pop-denied", file: jsonFile(fileText([sampledWindow(5, T0, 8, 5, 40_000)])) });
    expect((await upload(vera, body())).status).toBe(403);
    expect((await upload(oskar, body())).status).toBe(404);
    const anonymous = await fetch(`${t.url}${PATH}`, { method: "POST", body: body(), redirect: "manual" });
    expect(anonymous.status).toBe(302);
    expect(anonymous.headers.get("location")).toMatch(/^\/signin\?returnTo=/);
    expect(await snapshot()).toBe(before);
  });

  it("refuses a bad upload with the reason and stores nothing", async () => {
    const good = fileText([sampledWindow(6, T0, 8, 20, 50_000)]);
    const doc = JSON.parse(good);
    const belowTau = structuredClone(doc);
    belowTau.windows[0].kept[0].priority = belowTau.windows[0].tau / 2;
    await rows("INSERT INTO collectors (tenant_id, name, kind, created_at) VALUES (?, 'all-pops', 'merge', ?)", [tenantId, T0]);

    const cases: [string, () => BodyInit, number, string, string | null][] = [
      ["truncated JSON", () => form({ collector: "pop-x", file: jsonFile(good.slice(0, 200)) }), 400, "invalid_sample_file", ""],
      ["an unknown version", () => form({ collector: "pop-x", file: jsonFile(JSON.stringify({ ...doc, version: 7 })) }), 400, "invalid_sample_file", "version"],
      // DLT 2007: every kept priority is at least τ.
      ["a kept priority below τ", () => form({ collector: "pop-x", file: jsonFile(JSON.stringify(belowTau)) }), 400, "invalid_sample_file", "windows[0].kept[0].priority"],
      ["no collector", () => form({ file: jsonFile(good) }), 400, "invalid_form", "collector"],
      ["an invalid collector name", () => form({ collector: "pop x", file: jsonFile(good) }), 400, "invalid_form", "collector"],
      ["no file", () => form({ collector: "pop-x" }), 400, "invalid_form", "file"],
      ["the file as text, not a file", () => form({ collector: "pop-x", file: good }), 400, "invalid_form", "file"],
      ["an unknown field", () => form({ collector: "pop-x", file: jsonFile(good), tenant: "tributary" }), 400, "invalid_form", "tenant"],
      ["a merged collector", () => form({ collector: "all-pops", file: jsonFile(good) }), 409, "merged_collector", "collector"],
      ["a file above the limit", () => form({ collector: "pop-x", file: jsonFile(good + " ".repeat(MAX_BYTES)) }), 413, "payload_too_large", null],
    ];
    for (const [name, body, status, code, path] of cases) {
      const before = await snapshot();
      const res = await upload(eli, body());
      const answer = await res.json();
      expect(res.status, `${name}: ${JSON.stringify(answer)}`).toBe(status);
      expect(answer.error.code, name).toBe(code);
      if (path !== null) expect(answer.error.details.map((d: { path: string }) => d.path), name).toContain(path);
      expect(await snapshot(), name).toBe(before);
    }
  });

  it("states the limit for a file just over it, and answers 415 to a body that is not multipart", async () => {
    const before = await snapshot();
    // Within the multipart allowance, so only the file's own size is over the limit.
    const over = await upload(eli, form({ collector: "pop-x", file: jsonFile(" ".repeat(MAX_BYTES + 1)) }));
    expect(over.status).toBe(413);
    expect((await over.json()).error).toMatchObject({ limit: "SAMPLES_MAX_BODY_BYTES", maxBytes: MAX_BYTES, message: expect.stringContaining(`${MAX_BYTES} bytes`) });
    const urlencoded = await eli.post(PATH, { collector: "pop-x", file: "{}" });
    expect(urlencoded.status).toBe(415);
    expect((await urlencoded.json()).error.code).toBe("unsupported_media_type");
    expect(await snapshot()).toBe(before);
    const get = await eli.fetch(PATH);
    expect(get.status).toBe(405);
    expect(get.headers.get("allow")).toBe("POST");
  });

  it("renders the upload form with the collectors as suggestions, the limit and both cautions", async () => {
    // The Merge page as the server renders it for an engineer: the form lives there.
    const page = await eli.fetch("/t/riverline/merge");
    expect(page.status).toBe(200);
    const html = await page.text();
    const streams = await rows("SELECT c.name FROM collectors c JOIN tenants t ON t.id = c.tenant_id WHERE t.slug = 'riverline' AND c.kind = 'stream' ORDER BY c.name");
    const options = streams.map((r) => `<option value="${String(r.name)}"></option>`).join("");
    const collector = /<input[^>]*name="collector"[^>]*>/.exec(html)?.[0] ?? "";
    const list = /list="([^"]+)"/.exec(collector)?.[1];
    expect(list).toBeDefined();
    expect(streams.length).toBeGreaterThan(0);
    expect(html).toContain(`<datalist id="${list}">${options}</datalist>`);
    const file = /<input[^>]*name="file"[^>]*>/.exec(html)?.[0] ?? "";
    expect(file).toContain('type="file"');
    expect(file).toContain('accept=".json,application/json,.ipfix,application/ipfix"');
    // The limit as the server is configured (SAMPLES_MAX_BODY_BYTES), in binary units.
    expect(html).toContain(formatBytes(MAX_BYTES));
    expect(formatBytes(64 * 1024 * 1024)).toBe("64 MiB");
    expect(html).toMatch(/its records would be counted twice/);
    expect(html).toMatch(/95% interval/);
    expect(html).toMatch(/personal data/);
  });
});
