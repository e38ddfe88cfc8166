import { afterAll, beforeAll, describe, expect, it } from "vitest";
import type { Tenant } from "~/db/schema.server";
import type { FlowRecord } from "~/flow/record";
import { decodeKeptRow, KEPT_ROW_BYTES } from "~/ingest/kept-codec";
import { ReservoirManager } from "~/ingest/manager.server";
import { windowStartOf } from "~/ingest/window";
import { parseAddress } from "~/net/address";
import { seededUniform } from "~/sampling/uniform";
import { parseSampleFile, type SampleSet } from "~/samples/document";
import { MAX_KEPT_PER_EXPORT } from "~/samples/export.server";
import { ensureCollector } from "~/tenants.server";
import { keyFor, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// GET /api/v1/samples against a real server (temporary SQLite file), fed through the reservoir
// managers of two nodes with seeded uniforms. Each exported window must be exactly the priority
// sample (Duffield, Lund, Thorup, J. ACM 54(6), 2007) stored for its (collector, window, node).

const WINDOW_MS = 300_000;
const T0 = Date.UTC(2024, 4, 1, 2, 0);
const RANGE = `from=${new Date(T0).toISOString()}&to=${new Date(T0 + 3 * WINDOW_MS).toISOString()}`;

interface Fed {
  collector: string;
  node: string;
  record: FlowRecord;
}

/** Invented heavy-tailed traffic in documentation space (RFC 5737, RFC 3849); Pareto bytes, shape 1.2. */
function stream(seed: number, collector: string, node: string, windowStart: number, count: number): Fed[] {
  const u = seededUniform(seed);
  const sources = ["198.51.100.", "203.0.113.", "192.0.2."];
  return Array.from({ length: count }, (_, i) => {
    const bytes = Math.max(40, Math.round(40 / Math.pow(u(), 1 / 1.2)));
    const start = windowStart + Math.floor(u() * WINDOW_MS);
    const src = i % 7 === 0 ? `2001:db8:1::${(i + 1).toString(16)}` : `${sources[i % 3]}${Math.floor(u() * 256)}`;
    return {
      collector,
      node,
      record: {
        src: parseAddress(src),
        dst: parseAddress(i % 7 === 0 ? "2001:db8:3::443" : "203.0.113.80"),
        sport: 1024 + Math.floor(u() * 64512),
        dport: i % 4 === 0 ? 80 : 443,
        proto: 6,
        bytes: BigInt(bytes),
        packets: BigInt(Math.max(1, Math.ceil(bytes / 1400))),
        start,
        end: start + 500,
        ingressInterface: i % 2 === 0 ? 7 : null,
        egressInterface: null,
        srcAs: i % 3 === 0 ? 64500 : null,
        dstAs: null,
      },
    };
  });
}

const keyOfWindow = (collector: string, windowStart: number, node: string) => `${collector} ${windowStart} ${node}`;

describe("GET /api/v1/samples", () => {
  let t: TestServer;
  let nodeB: ReservoirManager;
  let carrier: Tenant;
  let other: Tenant;
  const keys = { carrier: "", carrierIngest: "", other: "" };
  const fed: Fed[] = [];
  const otherFed: Fed[] = [];

  async function feed(tenant: Tenant, records: Fed[]): Promise<void> {
    const groups = new Map<string, Fed[]>();
    for (const f of records) groups.set(`${f.collector} ${f.node}`, [...(groups.get(`${f.collector} ${f.node}`) ?? []), f]);
    for (const group of groups.values()) {
      const collector = await ensureCollector(t.server.db, tenant.id, group[0].collector);
      const manager = group[0].node === "node-b" ? nodeB : t.server.manager;
      for (let i = 0; i < group.length; i += 100) {
        const records = group.slice(i, i + 100).map((f) => f.record);
        // Received after the last record started: the time check refuses starts ahead of the receive clock.
        const receivedAt = records.reduce((latest, r) => Math.max(latest, r.start ?? 0, r.end ?? 0), T0);
        await manager.ingest({ tenant, collector, records, receivedAt });
      }
    }
  }

  async function get(key: string | null, search: string): Promise<Response> {
    return fetch(`${t.url}/api/v1/samples?${search}`, { headers: key === null ? {} : { authorization: `Bearer ${key}` } });
  }

  async function exported(key: string, search: string): Promise<SampleSet> {
    const res = await get(key, search);
    const text = await res.text();
    expect(res.status, text).toBe(200);
    return parseSampleFile(text);
  }

  /** The stored reservoirs of a tenant, kept rows decoded, keyed by (collector, window, node). */
  async function stored(tenantId: number) {
    const rows = await t.server.db.$client.execute({
      sql:
        "SELECT c.name, r.window_start, r.node, r.tau, r.k, k.data FROM reservoirs r " +
        "JOIN collectors c ON c.id = r.collector_id JOIN kept_records k ON k.reservoir_id = r.id WHERE r.tenant_id = ?",
      args: [tenantId],
    });
    const out = new Map<string, { tau: number; k: number; kept: ReturnType<typeof decodeKeptRow>[] }>();
    for (const row of rows.rows) {
      const key = keyOfWindow(String(row[0]), Number(row[1]), String(row[2]));
      const entry = out.get(key) ?? { tau: Number(row[3]), k: Number(row[4]), kept: [] };
      const data = new Uint8Array(row[5] as ArrayBuffer);
      expect(data.byteLength).toBe(KEPT_ROW_BYTES);
      entry.kept.push(decodeKeptRow(data));
      out.set(key, entry);
    }
    for (const entry of out.values()) entry.kept.sort((a, b) => b.priority - a.priority);
    return out;
  }

  beforeAll(async () => {
    t = await startTestServer({ env: { NODE_ID: "node-a" }, uniform: seededUniform(2007) });
    // A second node writing to the same store, as two Weir nodes behind a load balancer would.
    nodeB = new ReservoirManager(t.server.db, { node: "node-b", uniform: seededUniform(4632) });

    const made = await tenantWithKey(t.server, "carrier", { collector: "edge-1", scope: "query", sampleSize: 16 });
    carrier = made.tenant as Tenant;
    keys.carrier = made.key;
    keys.carrierIngest = (await keyFor(t.server, carrier.id, "edge-1", "ingest")).key;
    fed.push(
      ...stream(1, "edge-1", "node-a", T0, 120),
      ...stream(2, "edge-1", "node-a", T0 + WINDOW_MS, 60),
      ...stream(3, "edge-1", "node-b", T0 + WINDOW_MS, 40),
      ...stream(4, "edge-2", "node-a", T0, 10), // fewer than k: τ = 0, every record kept
      ...stream(5, "edge-2", "node-a", T0 + 2 * WINDOW_MS, 90),
    );
    await feed(carrier, fed);

    // Another tenant with a collector of the same name in the same windows.
    const second = await tenantWithKey(t.server, "other", { collector: "edge-1", scope: "query", sampleSize: 20 });
    other = second.tenant as Tenant;
    keys.other = second.key;
    otherFed.push(...stream(6, "edge-1", "node-a", T0, 30));
    await feed(other, otherFed);
  });

  afterAll(async () => {
    await nodeB?.idle();
    await t?.close();
  });

  it("exports one window per (collector, window, node) with the stored kept sets and τ and the exact sums fed", async () => {
    const res = await get(keys.carrier, RANGE);
    expect(res.status).toBe(200);
    expect(res.headers.get("content-type")).toMatch(/^application\/json/);
    expect(res.headers.get("content-disposition")).toBe('attachment; filename="weir-samples-20240501T020000Z-20240501T021500Z.json"');
    const set = parseSampleFile(await res.text());
    expect(set.from).toBe(T0);
    expect(set.to).toBe(T0 + 3 * WINDOW_MS);

    const expected = new Map<string, Fed[]>();
    for (const f of fed) {
      const key = keyOfWindow(f.collector, windowStartOf(f.record.start!, 300), f.node);
      expected.set(key, [...(expected.get(key) ?? []), f]);
    }
    const got = set.windows.map((w) => keyOfWindow(w.collector, w.windowStart, w.provenance.node));
    expect(got.sort()).toEqual([...expected.keys()].sort());
    expect(set.windows).toHaveLength(5);

    const store = await stored(carrier.id);
    for (const w of set.windows) {
      const key = keyOfWindow(w.collector, w.windowStart, w.provenance.node);
      const records = expected.get(key)!;
      const s = store.get(key)!;
      expect(w.tau, key).toBe(s.tau);
      expect(w.k).toBe(16);
      expect(w.windowSeconds).toBe(300);
      expect(w.kept, key).toEqual(s.kept);
      expect(w.kept).toHaveLength(Math.min(16, records.length));
      expect(w.seen).toBe(records.length);
      expect(w.exact).toEqual({
        records: BigInt(records.length),
        bytes: records.reduce((sum, f) => sum + f.record.bytes, 0n),
        packets: records.reduce((sum, f) => sum + f.record.packets, 0n),
      });
      expect(w.provenance.weightAttribute).toBe("bytes");
    }
    // The reservoir with fewer records than k kept them all, exactly: τ = 0.
    const small = set.windows.find((w) => w.collector === "edge-2" && w.windowStart === T0)!;
    expect(small.tau).toBe(0);
    expect(small.kept).toHaveLength(10);
    expect(set.windows.find((w) => w.collector === "edge-1" && w.windowStart === T0)!.tau).toBeGreaterThan(0);
  });

  it("keeps to [from, to) and the named collectors; unknown collectors give an empty list", async () => {
    const second = await exported(keys.carrier, `from=${T0 + WINDOW_MS}&to=${T0 + 2 * WINDOW_MS}`);
    expect(second.windows.map((w) => `${w.collector} ${w.provenance.node}`).sort()).toEqual(["edge-1 node-a", "edge-1 node-b"]);
    expect(second.windows.every((w) => w.windowStart === T0 + WINDOW_MS)).toBe(true);

    const edge2 = await exported(keys.carrier, `${RANGE}&collectors=edge-2`);
    expect(edge2.windows.map((w) => w.windowStart)).toEqual([T0, T0 + 2 * WINDOW_MS]);
    expect(edge2.windows.every((w) => w.collector === "edge-2")).toBe(true);

    const both = await exported(keys.carrier, `${RANGE}&collectors=edge-1,edge-2`);
    expect(both.windows).toHaveLength(5);

    const nowhere = await exported(keys.carrier, `${RANGE}&collectors=nowhere`);
    expect(nowhere.windows).toEqual([]);
    const later = await exported(keys.carrier, "from=2024-06-01T00:00:00Z&to=2024-06-02T00:00:00Z");
    expect(later.windows).toEqual([]);
  });

  it("never exports one tenant's samples to another's key, even under the same collector name", async () => {
    const set = await exported(keys.other, RANGE);
    expect(set.windows).toHaveLength(1);
    expect(set.windows[0]).toMatchObject({ collector: "edge-1", windowStart: T0, k: 20, seen: otherFed.length });
    expect(set.windows[0].kept).toEqual((await stored(other.id)).get(keyOfWindow("edge-1", T0, "node-a"))!.kept);
    expect(await exported(keys.other, `${RANGE}&collectors=edge-2`)).toMatchObject({ windows: [] });

    const text = await (await get(keys.carrier, RANGE)).text();
    expect(text).not.toMatch(/tenant/i);
    expect(text).not.toContain(`"k":20`);
  });

  it("answers 401 without a key and 403 to an ingest-only key", async () => {
    const none = await get(null, RANGE);
    expect(none.status).toBe(401);
    expect((await none.json()).error.code).toBe("unauthenticated");
    const ingest = await get(keys.carrierIngest, RANGE);
    expect(ingest.status).toBe(403);
    expect((await ingest.json()).error).toMatchObject({ code: "forbidden", message: expect.stringMatching(/needs 'query'/) });
    // The key is checked before the parameters, so a stranger learns nothing of them.
    expect((await get(null, "from=nonsense")).status).toBe(401);
  });

  it("answers 400 naming the field for invalid parameters", async () => {
    const cases: [string, string[]][] = [
      ["to=2024-05-01T02:15:00Z", ["from"]],
      [`from=${T0}&to=${T0}`, ["to"]],
      ["from=2024-05-01T02:00:00&to=2024-05-01T03:00:00Z", ["from"]],
      ["from=2023-01-01&to=2024-05-02", ["to"]],
      [`${RANGE}&collectors=edge-1,,edge-2`, ["collectors[1]"]],
      [`${RANGE}&src=198.51.100.0/24`, ["src"]],
    ];
    for (const [search, paths] of cases) {
      const res = await get(keys.carrier, search);
      const body = await res.json();
      expect(res.status, search).toBe(400);
      expect(body.error.code).toBe("invalid_query");
      expect(body.error.details.map((d: { path: string }) => d.path), search).toEqual(paths);
      expect(body.error.message).toMatch(new RegExp(`^Invalid query: ${paths[0].replace(/[[\]]/g, "\\$&")}: `));
    }
    const unknown = await (await get(keys.carrier, `${RANGE}&src=198.51.100.0/24`)).json();
    expect(unknown.error.details[0].message).toBe("is not a known parameter (known: from, to, collectors)");
  });

  it("answers 413 with the limit when the range holds too many kept records", async () => {
    // A reservoir row alone carries the count the limit is checked against; no kept rows needed.
    const far = Date.UTC(2025, 0, 1);
    const collector = await ensureCollector(t.server.db, carrier.id, "edge-1");
    const many = MAX_KEPT_PER_EXPORT + 1;
    await t.server.db.$client.execute({
      sql:
        "INSERT INTO reservoirs (tenant_id, collector_id, window_start, window_seconds, node, k, tau, records, bytes, packets, next_seq, updated_at) " +
        "VALUES (?, ?, ?, 300, 'node-a', ?, 1, ?, ?, ?, ?, ?)",
      args: [carrier.id, collector.id, far, many, many, String(many * 40), String(many), many, far],
    });
    const res = await get(keys.carrier, `from=${far}&to=${far + WINDOW_MS}`);
    expect(res.status).toBe(413);
    const body = await res.json();
    expect(body.error).toMatchObject({ code: "export_too_large", limit: MAX_KEPT_PER_EXPORT, kept: many });
    expect(body.error.message).toContain(`at most ${MAX_KEPT_PER_EXPORT}`);
  });

  it("answers 405 to other methods", async () => {
    // POST imports a sample file (import-api.test.ts); anything else but GET and HEAD is refused.
    const res = await fetch(`${t.url}/api/v1/samples?${RANGE}`, { method: "PUT", headers: { authorization: `Bearer ${keys.carrier}` } });
    expect(res.status).toBe(405);
    expect(res.headers.get("allow")).toBe("GET, HEAD, POST");
  });
});
