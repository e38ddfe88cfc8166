import { createHash } from "node:crypto";
import { gzipSync } from "node:zlib";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import type { FlowRecord } from "~/flow/record";
import { parseAddress } from "~/net/address";
import { mergeStates } from "~/sampling/merge";
import { seededUniform } from "~/sampling/uniform";
import { parseSampleFile, toSampleFile, type SampleFile, type SampleSet, type SampleWindow } from "~/samples/document";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// POST /api/v1/samples against a real server (temporary SQLite file). A sample file's windows
// become reservoirs of the named collector, merged with what that collector holds by the merge
// rule of priority sampling (N. Duffield, C. Lund, M. Thorup, "Priority sampling for estimation
// of arbitrary subset sums", J. ACM 54(6), 2007): keep the k_m = min(k_j) highest priorities of
// the union, τ = the (k_m+1)-th largest among those priorities and every τ_j. A bad file must
// leave the database exactly as it was.

const WINDOW_MS = 300_000;
const T0 = Date.UTC(2024, 4, 1, 2, 0);
const MAX_BYTES = 200_000;
const NODE = "node-a";

/** An invented flow in documentation space (RFC 5737) with private AS numbers (RFC 5398). */
function flow(i: number, bytes: bigint, start: number): FlowRecord {
  return {
    src: parseAddress(`198.51.100.${i % 250}`),
    dst: parseAddress("203.0.113.80"),
    sport: 40000 + i,
    dport: i % 3 === 0 ? 80 : 443,
    proto: 6,
    bytes,
    packets: bytes / 500n + 1n,
    start,
    end: start + 1000,
    ingressInterface: 4,
    egressInterface: null,
    srcAs: 64500,
    dstAs: null,
  };
}

/**
 * The priority sample of `offers` by its definition (DLT 2007, section 2), not by Weir's code:
 * priority q_i = w_i / u_i, keep the k highest, τ = the (k+1)-th highest priority (0 when at
 * most k were offered). Weight = bytes.
 */
function prioritySample(collector: string, windowStart: number, k: number, offers: [FlowRecord, number][], node = "offline-1"): SampleWindow {
  const all = offers
    .map(([record, u]) => ({ priority: Number(record.bytes) / u, weight: Number(record.bytes), record }))
    .sort((a, b) => b.priority - a.priority);
  return {
    collector,
    windowStart,
    windowSeconds: WINDOW_MS / 1000,
    k,
    tau: all.length > k ? all[k].priority : 0,
    seen: offers.length,
    exact: {
      records: BigInt(offers.length),
      bytes: offers.reduce((s, [r]) => s + r.bytes, 0n),
      packets: offers.reduce((s, [r]) => s + r.packets, 0n),
    },
    kept: all.slice(0, k),
    provenance: { node, weightAttribute: "bytes", updatedAt: windowStart + WINDOW_MS },
  };
}

/** `count` offers in the window, heavy-tailed bytes (Pareto, shape 1.2), fixed u_i from `seed`. */
function offers(seed: number, windowStart: number, count: number, firstIndex = 0): [FlowRecord, number][] {
  const u = seededUniform(seed);
  return Array.from({ length: count }, (_, j) => {
    const bytes = BigInt(Math.max(40, Math.round(40 / Math.pow(u(), 1 / 1.2))));
    return [flow(firstIndex + j, bytes, windowStart + Math.floor(u() * WINDOW_MS)), u()];
  });
}

function fileOf(windows: SampleWindow[], from = T0, to = T0 + 2 * WINDOW_MS): SampleFile {
  const set: SampleSet = { exportedAt: to + 60_000, from, to, windows };
  return toSampleFile(set);
}

describe("POST /api/v1/samples (import)", () => {
  let t: TestServer;
  let tenantId: number;
  const keys = { ingest: "", query: "", both: "" };
  /** An ingest key per collector the tests import into: a key imports only into its own collector. */
  const importKeys: Record<string, string> = {};
  /** A file exported from another tenant that received invented flows through the API. */
  let exportedText = "";
  let exportedSet: SampleSet;

  const rows = async (sql: string, args: (string | number)[] = []) => (await t.server.db.$client.execute({ sql, args })).rows;

  /** Everything an import could write, as comparable text. */
  async function snapshot(): Promise<string> {
    const parts = await Promise.all([
      rows("SELECT id, tenant_id, name, kind, copy_of FROM collectors ORDER BY id"),
      rows("SELECT id, tenant_id, collector_id, window_start, window_seconds, node, k, tau, records, bytes, packets, next_seq FROM reservoirs ORDER BY id"),
      rows("SELECT reservoir_id, seq, hex(data) FROM kept_records ORDER BY reservoir_id, seq"),
      rows("SELECT id, action, detail FROM audit_log ORDER BY id"),
      rows("SELECT id, collector_id, digest, windows, kept, records FROM sample_imports ORDER BY id"),
      rows("SELECT id, import_id, source_collector, source_node, window_start, window_seconds FROM imported_windows ORDER BY id"),
    ]);
    return JSON.stringify(parts.map((p) => p.map((r) => Array.from(r))));
  }

  function post(body: BodyInit, options: { key?: string | null; search?: string; headers?: Record<string, string>; method?: string } = {}) {
    const search = options.search ?? "?collector=site-b";
    const named = new URLSearchParams(search).get("collector") ?? "";
    const key = options.key === undefined ? (importKeys[named] ?? keys.ingest) : options.key;
    return fetch(`${t.url}/api/v1/samples${search}`, {
      method: options.method ?? "POST",
      headers: { ...(key === null ? {} : { authorization: `Bearer ${key}` }), "content-type": "application/json", ...options.headers },
      body,
    });
  }

  async function exportOf(collector: string, from = T0, to = T0 + 2 * WINDOW_MS): Promise<SampleSet> {
    const res = await fetch(`${t.url}/api/v1/samples?from=${from}&to=${to}&collectors=${collector}`, { headers: { authorization: `Bearer ${keys.query}` } });
    const text = await res.text();
    expect(res.status, text).toBe(200);
    return parseSampleFile(text);
  }

  beforeAll(async () => {
    t = await startTestServer({ env: { NODE_ID: NODE, SAMPLES_MAX_BODY_BYTES: String(MAX_BYTES) }, uniform: seededUniform(77) });
    const made = await tenantWithKey(t.server, "carrier", { collector: "edge-1", scope: "ingest", sampleSize: 16 });
    tenantId = made.tenant.id;
    keys.ingest = made.key;
    keys.query = (await keyFor(t.server, tenantId, "edge-1", "query")).key;
    keys.both = (await keyFor(t.server, tenantId, "edge-1", "both")).key;
    // Made before any import: a collector with no records yet becomes a copy when a file is imported into it.
    for (const name of ["site-b", "lab", "two-nodes", "zipped", "weights"]) importKeys[name] = (await keyFor(t.server, tenantId, name, "ingest")).key;

    // The "offline site": another tenant receives invented flows over HTTP and exports them.
    const offline = await tenantWithKey(t.server, "offline-site", { collector: "site-b", scope: "both", sampleSize: 16 });
    const sent = [...offers(11, T0, 60), ...offers(12, T0 + WINDOW_MS, 9, 100)].map(([r]) => ({
      src: "198.51.100." + (Number(r.sport) % 250),
      dst: "203.0.113.80",
      sport: r.sport,
      dport: r.dport,
      proto: 6,
      bytes: Number(r.bytes),
      packets: Number(r.packets),
      start: r.start,
      end: r.end,
    }));
    const ingest = await postFlows(t.url, offline.key, JSON.stringify(sent));
    expect(ingest.status, await ingest.clone().text()).toBe(200);
    const res = await fetch(`${t.url}/api/v1/samples?from=${T0}&to=${T0 + 2 * WINDOW_MS}`, { headers: { authorization: `Bearer ${offline.key}` } });
    exportedText = await res.text();
    expect(res.status, exportedText).toBe(200);
    exportedSet = parseSampleFile(exportedText);
    expect(exportedSet.windows.map((w) => w.seen)).toEqual([60, 9]);
  });
  afterAll(() => t?.close());

  describe("refuses a bad request and stores nothing", () => {
    const good = () => JSON.parse(exportedText) as SampleFile;
    /** A copy of the good file changed by `edit`. */
    const edited = (edit: (doc: Record<string, any>) => void) => {
      const doc = good() as unknown as Record<string, any>;
      edit(doc);
      return JSON.stringify(doc);
    };
    const big = () => good().windows.findIndex((w) => w.tau > 0);

    // [case, body, expected status, error code, a path the details must name]
    const cases: [string, () => string, number, string, () => string][] = [
      ["truncated JSON", () => exportedText.slice(0, Math.floor(exportedText.length / 2)), 400, "invalid_sample_file", () => ""],
      ["not JSON", () => "format=weir.samples&version=1", 400, "invalid_sample_file", () => ""],
      ["a JSON array, not a document", () => "[]", 400, "invalid_sample_file", () => ""],
      ["a wrong format field", () => edited((d) => (d.format = "weir.reservoir")), 400, "invalid_sample_file", () => "format"],
      ["an unknown version", () => edited((d) => (d.version = 2)), 400, "invalid_sample_file", () => "version"],
      ["a version that is not a number", () => edited((d) => (d.version = "1")), 400, "invalid_sample_file", () => "version"],
      // DLT 2007: every kept priority is at least τ.
      ["a kept priority below τ", () => edited((d) => (d.windows[big()].kept[0].priority = d.windows[big()].tau / 2)), 400, "invalid_sample_file", () => `windows[${big()}].kept[0].priority`],
      // DLT 2007: a priority sample keeps at most k records.
      ["more kept records than k", () => edited((d) => (d.windows[big()].k = d.windows[big()].kept.length - 1)), 400, "invalid_sample_file", () => `windows[${big()}].kept`],
      ["k missing", () => edited((d) => delete d.windows[0].k), 400, "invalid_sample_file", () => "windows[0].k"],
      ["a negative exact counter", () => edited((d) => (d.windows[0].exact.bytes = -1500)), 400, "invalid_sample_file", () => "windows[0].exact.bytes"],
      ["a negative weight", () => edited((d) => (d.windows[0].kept[0].weight = -1)), 400, "invalid_sample_file", () => "windows[0].kept[0].weight"],
      ["a kept weight that is not the record's counter", () => edited((d) => (d.windows[0].kept[0].weight = d.windows[0].kept[0].record.bytes - 1)), 400, "invalid_sample_file", () => "windows[0].kept[0].weight"],
      ["a misaligned windowStart", () => edited((d) => (d.windows[1].windowStart = new Date(T0 + WINDOW_MS + 60_000).toISOString())), 400, "invalid_sample_file", () => "windows[1].windowStart"],
      ["a duplicate window", () => edited((d) => d.windows.push(structuredClone(d.windows[0]))), 400, "invalid_sample_file", () => "windows[2]"],
      ["a k above the largest sample size", () => edited((d) => (d.windows[1].k = 70_000)), 400, "invalid_sample_file", () => "windows[1].k"],
    ];
    for (const [name, body, status, code, path] of cases) {
      it(`${name} → ${status} ${code}`, async () => {
        const before = await snapshot();
        const res = await post(body());
        const answer = await res.json();
        expect(res.status, JSON.stringify(answer)).toBe(status);
        expect(answer.error.code).toBe(code);
        expect(answer.error.message).toMatch(/nothing was imported/);
        expect(answer.error.details.map((d: { path: string }) => d.path)).toContain(path());
        expect(await snapshot()).toBe(before);
      });
    }

    it("caps the listed problems and says how many more there are", async () => {
      const before = await snapshot();
      const body = edited((d) => {
        for (let i = 0; i < 70; i++) d[`extra${i}`] = i;
      });
      const answer = await (await post(body)).json();
      expect(answer.error.code).toBe("invalid_sample_file");
      expect(answer.error.details).toHaveLength(50);
      expect(answer.error.issueCount).toBe(70);
      expect(answer.error.moreIssues).toBe(20);
      expect(answer.error.message).toMatch(/and 69 more problems/);
      expect(await snapshot()).toBe(before);
    });

    it("an oversize body → 413 stating the limit, by Content-Length and while streaming, and after gunzip", async () => {
      const before = await snapshot();
      const padded = exportedText + " ".repeat(MAX_BYTES);
      const declared = await post(padded);
      expect(declared.status).toBe(413);
      expect((await declared.json()).error).toMatchObject({ code: "payload_too_large", limit: "SAMPLES_MAX_BODY_BYTES", maxBytes: MAX_BYTES, message: expect.stringContaining(`${MAX_BYTES} bytes`) });

      // No Content-Length (chunked): the limit is checked while the body streams in.
      const bytes = new TextEncoder().encode(padded);
      const stream = new ReadableStream<Uint8Array>({
        start(controller) {
          for (let at = 0; at < bytes.length; at += 16_384) controller.enqueue(bytes.slice(at, at + 16_384));
          controller.close();
        },
      });
      const streamed = await fetch(`${t.url}/api/v1/samples?collector=site-b`, {
        method: "POST",
        headers: { authorization: `Bearer ${importKeys["site-b"]}`, "content-type": "application/json" },
        body: stream,
        duplex: "half",
      } as RequestInit);
      expect(streamed.status).toBe(413);
      expect((await streamed.json()).error.code).toBe("payload_too_large");

      // 64 MiB of spaces gzip to far less than the limit; decompression stops at the limit.
      const bomb = gzipSync(Buffer.alloc(64 * 1024 * 1024, " "), { level: 9 });
      expect(bomb.length).toBeLessThan(MAX_BYTES);
      const zipped = await post(bomb, { headers: { "content-encoding": "gzip" } });
      expect(zipped.status).toBe(413);
      expect((await zipped.json()).error.message).toMatch(/after decompression/);
      expect(await snapshot()).toBe(before);
      expect((await fetch(`${t.url}/healthz`)).status).toBe(200);
    });

    it("a wrong content type → 415, an unknown content encoding → 415", async () => {
      const before = await snapshot();
      const plain = await post(exportedText, { headers: { "content-type": "text/plain" } });
      expect(plain.status).toBe(415);
      expect((await plain.json()).error).toMatchObject({ code: "unsupported_media_type", message: expect.stringContaining("text/plain") });
      const brotli = await post(exportedText, { headers: { "content-encoding": "br" } });
      expect(brotli.status).toBe(415);
      expect(await snapshot()).toBe(before);
    });

    it("a missing, invalid, repeated or unknown parameter → 400 invalid_query", async () => {
      const before = await snapshot();
      const cases: [string, string][] = [
        ["?collector=", "collector"],
        ["?collector=-starts-with-dash", "collector"],
        ["?collector=a&collector=b", "collector"],
        ["?collector=site-b&tenant=carrier", "tenant"],
      ];
      for (const [search, path] of cases) {
        const res = await post(exportedText, { search });
        const answer = await res.json();
        expect(res.status, search).toBe(400);
        expect(answer.error.code).toBe("invalid_query");
        expect(answer.error.details.map((d: { path: string }) => d.path), search).toContain(path);
      }
      expect(await snapshot()).toBe(before);
    });

    it("a merged collector's name → 403: no key belongs to a merge, and a key imports only into its own collector", async () => {
      await rows("INSERT INTO collectors (tenant_id, name, kind, created_at) VALUES (?, 'all-sites', 'merge', ?)", [tenantId, T0]);
      const before = await snapshot();
      const res = await post(exportedText, { search: "?collector=all-sites" });
      expect(res.status).toBe(403);
      expect((await res.json()).error).toMatchObject({ code: "wrong_collector", message: expect.stringContaining("belongs to the collector edge-1") });
      expect(await snapshot()).toBe(before);
    });

    it("a key without the ingest scope → 403, no key → 401, before anything else is looked at", async () => {
      const before = await snapshot();
      const query = await post(exportedText, { key: keys.query });
      expect(query.status).toBe(403);
      expect((await query.json()).error).toMatchObject({ code: "forbidden", message: expect.stringMatching(/needs 'ingest'/) });
      const none = await post(exportedText, { key: null });
      expect(none.status).toBe(401);
      expect((await post("not json", { key: null, search: "" })).status).toBe(401);
      expect(await snapshot()).toBe(before);
    });

    it("answers 405 with Allow for other methods", async () => {
      const res = await post(exportedText, { method: "PUT" });
      expect(res.status).toBe(405);
      expect(res.headers.get("allow")).toBe("GET, HEAD, POST");
    });
  });

  it("imports a file into a new collector: estimates, exact counters and kept records equal the file's", async () => {
    const res = await post(exportedText, { search: "?collector=site-b" });
    const summary = await res.json();
    expect(res.status, JSON.stringify(summary)).toBe(200);
    const keptInFile = exportedSet.windows.reduce((n, w) => n + w.kept.length, 0);
    const recordsInFile = exportedSet.windows.reduce((n, w) => n + w.exact.records, 0n);
    expect(summary).toEqual({
      collector: "site-b",
      // The offline file's windows name site-b: the collector is a copy of it (collector-rule.ts).
      copyOf: ["site-b"],
      windows: 2,
      mergedWithExisting: 0,
      kept: keptInFile,
      records: Number(recordsInFile),
      from: new Date(T0).toISOString(),
      to: new Date(T0 + 2 * WINDOW_MS).toISOString(),
      // SHA-256 of the bytes sent, by node:crypto (FIPS 180-4).
      digest: createHash("sha256").update(exportedText).digest("hex"),
    });

    // The estimate over the imported collector: exact counters are the file's sums; the bytes
    // estimate is Σ max(w_i, τ) over the kept records (DLT 2007, the subset-sum estimator).
    const estimate = await fetch(`${t.url}/api/v1/estimate?from=${T0}&to=${T0 + 2 * WINDOW_MS}&collectors=site-b&metric=bytes`, {
      headers: { authorization: `Bearer ${keys.query}` },
    });
    const answer = await estimate.json();
    expect(estimate.status, JSON.stringify(answer)).toBe(200);
    const sum = (pick: (w: SampleWindow) => bigint) => exportedSet.windows.reduce((s, w) => s + pick(w), 0n);
    expect(answer.exact).toEqual({ records: Number(sum((w) => w.exact.records)), bytes: Number(sum((w) => w.exact.bytes)), packets: Number(sum((w) => w.exact.packets)) });
    expect(answer.kept).toBe(keptInFile);
    expect(answer.collectors).toEqual(["site-b"]);
    const expected = exportedSet.windows.reduce((s, w) => s + w.kept.reduce((t2, e) => t2 + Math.max(e.weight, w.tau), 0), 0);
    // Tolerance: the two sums add the same doubles in another order (relative 1e-12 is far above that rounding).
    expect(Math.abs(answer.estimate - expected)).toBeLessThanOrEqual(1e-12 * expected);

    // The stored reservoirs are the file's windows: same k, τ, priorities, weights and records.
    const back = await exportOf("site-b");
    expect(back.windows).toHaveLength(2);
    back.windows.forEach((w, i) => {
      const f = exportedSet.windows[i];
      expect(w).toMatchObject({ collector: "site-b", windowStart: f.windowStart, windowSeconds: f.windowSeconds, k: f.k, tau: f.tau, seen: f.seen, exact: f.exact });
      expect(w.provenance.node).toBe(NODE);
      expect(w.kept).toEqual(f.kept);
    });

    // One ledger entry, naming the collector, windows, kept, records and the file's range.
    const [entry] = await rows("SELECT actor, action, target, detail FROM audit_log WHERE tenant_id = ? AND action = 'samples.import' ORDER BY id DESC LIMIT 1", [tenantId]);
    expect(entry.actor).toMatch(/^key weir_[0-9a-f]{8}$/);
    expect(entry.target).toBe("site-b");
    expect(JSON.parse(String(entry.detail))).toEqual(summary);
  });

  it("merges into a window the collector already holds: k_m = min k_j, τ and the kept set of one sample over the union", async () => {
    const start = T0;
    const first = offers(21, start, 40, 0);
    const second = offers(22, start, 30, 1000); // disjoint records (other ports), as an import assumes
    const a = prioritySample("lab-1", start, 10, first);
    const b = prioritySample("lab-2", start, 8, second);

    expect((await post(JSON.stringify(fileOf([a])), { search: "?collector=lab" })).status).toBe(200);
    const res = await post(JSON.stringify(fileOf([b])), { search: "?collector=lab" });
    const summary = await res.json();
    expect(res.status, JSON.stringify(summary)).toBe(200);
    expect(summary).toMatchObject({ collector: "lab", windows: 1, mergedWithExisting: 1, kept: 8, records: 30 });

    const [stored] = (await exportOf("lab")).windows;
    // The merge rule (DLT 2007; app/sampling/merge.ts) applied to the two samples...
    const merged = mergeStates(
      [a, b].map((w) => ({ k: w.k, tau: w.tau, seen: w.seen, kept: w.kept.map((e) => ({ item: e.record, weight: e.weight, priority: e.priority })) })),
    );
    expect(stored.k).toBe(merged.k);
    expect(stored.tau).toBe(merged.tau);
    expect(stored.kept).toEqual(merged.kept.map((e) => ({ priority: e.priority, weight: e.weight, record: e.item })));
    // ...equals the priority sample one reservoir of k = min(10, 8) would have kept over the union
    // with the same u_i (DLT 2007: a priority sample is determined by the priorities alone).
    const union = prioritySample("lab", start, 8, [...first, ...second]);
    expect(stored.k).toBe(8);
    expect(stored.tau).toBe(union.tau);
    expect(stored.kept).toEqual(union.kept);
    // Exact counters add up exactly.
    expect(stored.seen).toBe(70);
    expect(stored.exact).toEqual(union.exact);
  });

  it("refuses a file into a collector fed by ingest (409 live_collector): a copy merged into a live stream could not be told apart", async () => {
    // The merge of DLT 2007 assumes disjoint streams; a live collector counts in every question,
    // so a file merged into it would count wherever its origin counts too. Nothing is stored.
    const windowStart = T0 + WINDOW_MS;
    const live = offers(31, windowStart, 50, 2000).map(([r]) => ({ src: "192.0.2.7", dst: "203.0.113.9", sport: r.sport, dport: 443, proto: 6, bytes: Number(r.bytes), packets: Number(r.packets), start: r.start }));
    expect((await postFlows(t.url, keys.both, JSON.stringify(live))).status).toBe(200);
    const before = await snapshot();
    const file = prioritySample("offline", windowStart, 16, offers(32, windowStart, 25, 3000));
    const res = await post(JSON.stringify(fileOf([file])), { search: "?collector=edge-1" });
    const answer = await res.json();
    expect(res.status, JSON.stringify(answer)).toBe(409);
    expect(answer.error).toMatchObject({ code: "live_collector", message: expect.stringContaining("edge-1 holds records of its own") });
    expect(answer.error.details[0].path).toBe("collector");
    expect(await snapshot()).toBe(before);
  });

  it("groups the file's windows of one window (several collectors or nodes) into one reservoir", async () => {
    const start = T0;
    const x = offers(41, start, 12, 5000);
    const y = offers(42, start, 20, 6000);
    const file = fileOf([prioritySample("pop-a", start, 16, x, "node-x"), prioritySample("pop-a", start, 16, y, "node-y")]);
    const res = await post(JSON.stringify(file), { search: "?collector=two-nodes" });
    expect(await res.json()).toMatchObject({ windows: 1, mergedWithExisting: 0, records: 32 });
    const [stored] = (await exportOf("two-nodes")).windows;
    // One reservoir over both nodes' records with the same u_i (DLT 2007).
    const union = prioritySample("two-nodes", start, 16, [...x, ...y]);
    expect(stored).toMatchObject({ k: 16, tau: union.tau, seen: 32, exact: union.exact });
    expect(stored.kept).toEqual(union.kept);
  });

  it("accepts a gzip body", async () => {
    const file = fileOf([prioritySample("gz", T0, 16, offers(51, T0, 5, 7000))]);
    const res = await post(gzipSync(JSON.stringify(file)), { search: "?collector=zipped", headers: { "content-encoding": "gzip" } });
    expect(res.status).toBe(200);
    expect(await res.json()).toMatchObject({ collector: "zipped", windows: 1, kept: 5, records: 5 });
  });

  it("is all or nothing: a window that cannot merge (another weight counter) rolls back the whole file", async () => {
    // "weights" holds a bytes-weighted window at T0. A file whose first window is packets-weighted
    // into that window and whose second is fine must store neither.
    expect((await post(JSON.stringify(fileOf([prioritySample("w", T0, 16, offers(60, T0, 4, 10_000))])), { search: "?collector=weights" })).status).toBe(200);
    const fine = prioritySample("x", T0 + WINDOW_MS, 16, offers(61, T0 + WINDOW_MS, 4, 8000));
    const byPackets = prioritySample("x", T0, 16, offers(62, T0, 3, 9000));
    byPackets.provenance.weightAttribute = "packets";
    byPackets.kept = byPackets.kept.map((e) => ({ ...e, weight: Number(e.record.packets), priority: Number(e.record.packets) / 0.5 }));
    const before = await snapshot();
    const res = await post(JSON.stringify(fileOf([byPackets, fine])), { search: "?collector=weights" });
    const answer = await res.json();
    expect(res.status, JSON.stringify(answer)).toBe(409);
    expect(answer.error).toMatchObject({ code: "weight_mismatch" });
    expect(answer.error.details[0].path).toBe("windows[0].provenance.weightAttribute");
    expect(await snapshot()).toBe(before);
  });
});
