import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { createApiKey, revokeApiKey } from "~/auth/api-keys.server";
import type { Tenant } from "~/db/schema.server";
import { parseEnv } from "~/env.server";
import type { FlowRecord } from "~/flow/record";
import { ReservoirManager } from "~/ingest/manager.server";
import { windowStartOf } from "~/ingest/window";
import { parseAddress } from "~/net/address";
import type { EstimateAnswer } from "~/query/answer";
import { parseEstimateRequest, type EstimateQuery, type EstimateRequest, type Metric } from "~/query/request";
import { seededUniform } from "~/sampling/uniform";
import { startServer, type WeirServer } from "~/server/app.server";
import { createTenant, ensureCollector } from "~/tenants.server";
import { groupKey, matchesWhere, metricValue } from "./reference";

// /api/v1/estimate against a real server (Vite middleware, temporary SQLite file), fed through
// the reservoir manager with a seeded uniform source so every run samples the same records.

const WINDOW_MS = 300_000;
const T0 = Date.UTC(2024, 4, 1, 2, 0); // windows of 02:00, 02:05, 02:10, 02:15
const WINDOWS = [0, 1, 2, 3].map((i) => T0 + i * WINDOW_MS);
const RANGE = { from: new Date(T0).toISOString(), to: new Date(T0 + 4 * WINDOW_MS).toISOString() };

interface Fed {
  collector: string;
  record: FlowRecord;
}

// ---- a heavy-tailed stream ----------------------------------------------------------------------

/**
 * Invented traffic in documentation space (RFC 5737, RFC 3849): Pareto bytes with shape 1.2
 * (a few flows carry most bytes, common practice for modelling flow sizes), packets from a
 * packet size in 64–1500, mostly TCP to a few service ports, some UDP and ICMP.
 */
function stream(seed: number, perReservoir: number, collectors: string[], windows: number[]): Fed[] {
  const u = seededUniform(seed);
  const pick = <T>(xs: readonly T[]) => xs[Math.floor(u() * xs.length)];
  const host = () => Math.floor(u() * 256);
  const address = (weights: [number, () => string][]) => {
    let x = u();
    for (const [w, make] of weights) {
      if ((x -= w) < 0) return parseAddress(make());
    }
    return parseAddress(weights[weights.length - 1][1]());
  };
  const sources: [number, () => string][] = [
    [0.4, () => `198.51.100.${host()}`],
    [0.2, () => `203.0.113.${host()}`],
    [0.15, () => `192.0.2.${host()}`],
    [0.15, () => `2001:db8:1::${host().toString(16)}`],
    [0.1, () => `2001:db8:2:${host().toString(16)}::1`],
  ];
  const destinations: [number, () => string][] = [
    [0.35, () => `203.0.113.${host()}`],
    [0.3, () => `198.51.100.${host()}`],
    [0.15, () => `192.0.2.${host()}`],
    [0.2, () => `2001:db8:3::${host().toString(16)}`],
  ];
  const out: Fed[] = [];
  for (const collector of collectors) {
    for (const windowStart of windows) {
      for (let i = 0; i < perReservoir; i++) {
        const bytes = Math.max(40, Math.round(40 / Math.pow(u(), 1 / 1.2)));
        const kind = u();
        const proto = kind < 0.05 ? 1 : kind < 0.25 ? 17 : 6;
        const dport = proto === 1 ? 0 : proto === 17 ? pick([53, 123, 53, 4500]) : pick([443, 443, 443, 80, 80, 22, 8443, 3389]);
        const sport = proto === 1 ? 0 : u() < 0.1 ? pick([53, 123]) : 1024 + Math.floor(u() * 64512);
        const start = windowStart + Math.floor(u() * WINDOW_MS);
        out.push({
          collector,
          record: {
            src: address(sources),
            dst: address(destinations),
            sport,
            dport,
            proto,
            bytes: BigInt(bytes),
            packets: BigInt(Math.max(1, Math.ceil(bytes / (64 + Math.floor(u() * 1437))))),
            start,
            end: start + 1000,
            ingressInterface: null,
            egressInterface: null,
            srcAs: null,
            dstAs: null,
          },
        });
      }
    }
  }
  return out;
}

function plain(r: FlowRecord) {
  return { src: r.src, dst: r.dst, sport: r.sport, dport: r.dport, proto: r.proto, bytes: Number(r.bytes), packets: Number(r.packets) };
}

function parsed(request: EstimateRequest): EstimateQuery {
  const p = parseEstimateRequest(request);
  if (!p.ok) throw new Error(p.message);
  return p.query;
}

function inRange(q: EstimateQuery, f: Fed): boolean {
  const windowStart = windowStartOf(f.record.start!, WINDOW_MS / 1000);
  return windowStart >= q.from && windowStart < q.to && (q.where.collectors.length === 0 || q.where.collectors.includes(f.collector));
}

/** The true subset sum over every record fed. */
function truth(fed: Fed[], request: EstimateRequest, metric: Metric): number {
  const q = parsed(request);
  const value = metricValue(metric);
  return fed.reduce((sum, f) => (inRange(q, f) && matchesWhere(q, plain(f.record)) ? sum + value(plain(f.record)) : sum), 0);
}

/** True sums per group over every record fed. */
function truthByGroup(fed: Fed[], request: EstimateRequest, metric: Metric): Map<string, number> {
  const q = parsed(request);
  const value = metricValue(metric);
  const out = new Map<string, number>();
  for (const f of fed) {
    const r = plain(f.record);
    if (!inRange(q, f) || !matchesWhere(q, r)) continue;
    const key = groupKey(q, r, f.collector, windowStartOf(f.record.start!, WINDOW_MS / 1000));
    out.set(key, (out.get(key) ?? 0) + value(r));
  }
  return out;
}

/** The same request as a query string: filters at the top level, lists comma-separated. */
function toSearch(request: EstimateRequest): string {
  const params = new URLSearchParams();
  const { where, prefixLength, ...rest } = request;
  for (const [name, value] of Object.entries(rest)) if (value !== undefined) params.set(name, String(value));
  for (const [name, value] of Object.entries(where ?? {})) params.set(name, ([] as unknown[]).concat(value).join(","));
  if (typeof prefixLength === "number") params.set("prefixLength", String(prefixLength));
  else if (prefixLength) params.set("prefixLength", Object.entries(prefixLength).map(([family, n]) => `${family}:${n}`).join(","));
  return params.toString();
}

/** An answer with every float rounded to 12 significant digits. */
function roundedAnswer(a: EstimateAnswer): unknown {
  return JSON.parse(JSON.stringify(a), (_, v) => (typeof v === "number" ? Number(v.toPrecision(12)) : v));
}

// ---- a case small enough to compute by hand ---------------------------------------------------

/**
 * Twenty records in one window against k = 16, with the uniform draws u_i fixed, so every
 * priority q_i = w_i/u_i (DLT 2007, §1) is known: the four lowest are 62.5, 80, 111.1… and 125,
 * so the reservoir drops those four and τ = 125, the largest of them (the 17th largest). Kept with w < τ: the
 * records of 100, 90, 70 and 50 bytes (priorities 3333.3…, 257.1…, 1000, 4545.4…). By hand, for
 * bytes (the weight): estimate Σ max(w, τ) = 18 400 certain + 4·125 = 18 900, and
 * Var̂ = Σ τ·max(0, τ − w) = 125·(25 + 35 + 55 + 75) = 23 750 (DLT 2007, Theorem 1 and §5).
 * Even-numbered records come from 198.51.100.10, odd ones from 203.0.113.10 (RFC 5737).
 */
const HANDMADE = {
  k: 16,
  bytes: [5000, 4000, 3000, 2000, 900, 800, 700, 600, 500, 400, 300, 200, 100, 90, 80, 70, 60, 50, 40, 30],
  draws: [1, 1, 1, 1, 0.75, 0.125, 0.5, 0.375, 0.2, 0.8, 0.0625, 0.45, 0.03, 0.35, 0.64, 0.07, 0.75, 0.011, 0.36, 0.48],
};

function handmadeRecords(): Fed[] {
  return HANDMADE.bytes.map((bytes, i) => ({
    collector: "edge-1",
    record: {
      src: parseAddress(i % 2 === 0 ? "198.51.100.10" : "203.0.113.10"),
      dst: parseAddress("192.0.2.20"),
      sport: 40_000 + i,
      dport: 443,
      proto: 6,
      bytes: BigInt(bytes),
      packets: BigInt(1 + (i % 4)),
      start: T0 + i * 1000,
      end: T0 + i * 1000 + 500,
      ingressInterface: null,
      egressInterface: null,
      srcAs: null,
      dstAs: null,
    },
  }));
}

/**
 * The priority-sampling estimate and variance estimate of Σ x over the records `include` picks,
 * from the definitions alone (DLT 2007: keep the k highest q_i = w_i/u_i, τ = the (k+1)-th
 * highest; a kept record adds x/p and x²(1 − p)/p², p = min(1, w/τ)), not from the project's code.
 */
function byDefinition(include: (i: number) => boolean, x: (i: number) => number) {
  const priorities = HANDMADE.bytes.map((w, i) => w / HANDMADE.draws[i]);
  const order = priorities.map((_, i) => i).sort((a, b) => priorities[b] - priorities[a]);
  const tau = priorities[order[HANDMADE.k]];
  let estimate = 0;
  let variance = 0;
  for (const i of order.slice(0, HANDMADE.k)) {
    if (!include(i)) continue;
    const p = Math.min(1, HANDMADE.bytes[i] / tau);
    estimate += x(i) / p;
    variance += (x(i) * x(i) * (1 - p)) / (p * p);
  }
  return { tau, estimate, stdError: Math.sqrt(variance) };
}

// ---- the server -----------------------------------------------------------------------------------

describe("/api/v1/estimate", () => {
  let dir: string;
  let server: WeirServer;
  let nodeB: ReservoirManager;
  let nodeC: ReservoirManager;
  const fed = { alpha: [] as Fed[], exact: [] as Fed[], beta: [] as Fed[], handmade: [] as Fed[] };
  const keys = { alpha: "", alphaIngest: "", alphaRevoked: "", exact: "", beta: "", handmade: "" };
  const tenants = {} as Record<"alpha" | "exact" | "beta" | "handmade", Tenant>;

  async function feed(manager: ReservoirManager, tenant: Tenant, records: Fed[]): Promise<void> {
    const collectors = new Map<string, { id: number; name: string }>();
    for (const name of new Set(records.map((f) => f.collector))) collectors.set(name, await ensureCollector(server.db, tenant.id, name));
    for (const [name, collector] of collectors) {
      const mine = records.filter((f) => f.collector === name).map((f) => f.record);
      for (let i = 0; i < mine.length; i += 1000) {
        const slice = mine.slice(i, i + 1000);
        // Received after the last record started: the time check refuses starts ahead of the receive clock.
        const receivedAt = slice.reduce((latest, r) => Math.max(latest, r.start ?? 0, r.end ?? 0), T0 + 4 * WINDOW_MS);
        await manager.ingest({ tenant, collector, records: slice, receivedAt });
      }
    }
  }

  async function keyOf(tenant: Tenant, collector: string, scopes: "query" | "ingest" | "ingest,query"): Promise<string> {
    const c = await ensureCollector(server.db, tenant.id, collector);
    return (await createApiKey(server.db, { tenantId: tenant.id, collectorId: c.id, scopes })).key;
  }

  async function post(key: string | null, body: unknown): Promise<{ status: number; json: any }> {
    const headers: Record<string, string> = { "content-type": "application/json" };
    if (key !== null) headers.authorization = `Bearer ${key}`;
    const res = await fetch(`${server.url}/api/v1/estimate`, { method: "POST", headers, body: typeof body === "string" ? body : JSON.stringify(body) });
    return { status: res.status, json: await res.json() };
  }

  async function get(key: string | null, search: string): Promise<{ status: number; json: any }> {
    const res = await fetch(`${server.url}/api/v1/estimate?${search}`, { headers: key === null ? {} : { authorization: `Bearer ${key}` } });
    return { status: res.status, json: await res.json() };
  }

  async function answer(key: string, request: EstimateRequest): Promise<EstimateAnswer> {
    const res = await post(key, request);
    expect(res.status, JSON.stringify(res.json)).toBe(200);
    return res.json;
  }

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-estimate-"));
    server = await startServer({
      env: parseEnv({ NODE_ENV: "development", HOST: "127.0.0.1", PORT: "0", DATABASE_URL: `file:${join(dir, "weir.db")}`, NODE_ID: "node-a", LOG_LEVEL: "silent",
        // The records are dated 2024: accepted however old, since retention is not what this file tests.
        INGEST_REFUSE_EXPIRED: "false" }),
      uniform: seededUniform(2007),
    });
    // A second node writing to the same store, as two Weir nodes behind a load balancer would.
    nodeB = new ReservoirManager(server.db, { node: "node-b", uniform: seededUniform(4632) });

    // alpha: k = 128 per reservoir, 20 000 records: estimates with real error bars.
    tenants.alpha = await createTenant(server.db, { slug: "alpha", sampleSize: 128, windowSeconds: 300 });
    fed.alpha = stream(1, 2500, ["edge-1", "edge-2"], WINDOWS);
    await feed(server.manager, tenants.alpha, fed.alpha);
    keys.alpha = await keyOf(tenants.alpha, "edge-1", "query");
    keys.alphaIngest = await keyOf(tenants.alpha, "edge-1", "ingest");
    keys.alphaRevoked = await keyOf(tenants.alpha, "edge-2", "ingest,query");

    // exact: k larger than any window's record count, so τ = 0 and every estimate is exact.
    // Half its records go through node-b: the answer sums both nodes' reservoirs.
    tenants.exact = await createTenant(server.db, { slug: "exact", sampleSize: 4096, windowSeconds: 300 });
    fed.exact = stream(2, 300, ["edge-1", "edge-2"], WINDOWS.slice(0, 3));
    await feed(server.manager, tenants.exact, fed.exact.filter((_, i) => i % 2 === 0));
    await feed(nodeB, tenants.exact, fed.exact.filter((_, i) => i % 2 === 1));
    keys.exact = await keyOf(tenants.exact, "edge-1", "query");

    // beta: the same collector name as alpha, its own records in the same windows, weighted by packets.
    tenants.beta = await createTenant(server.db, { slug: "beta", sampleSize: 4096, windowSeconds: 300, weightAttribute: "packets" });
    fed.beta = stream(3, 100, ["edge-1"], WINDOWS);
    await feed(server.manager, tenants.beta, fed.beta);
    keys.beta = await keyOf(tenants.beta, "edge-1", "query");

    // handmade: twenty records, k = 16, through a node whose uniform draws are HANDMADE.draws in order.
    let draw = 0;
    nodeC = new ReservoirManager(server.db, { node: "node-c", uniform: () => HANDMADE.draws[draw++] });
    tenants.handmade = await createTenant(server.db, { slug: "handmade", sampleSize: HANDMADE.k, windowSeconds: 300 });
    fed.handmade = handmadeRecords();
    await feed(nodeC, tenants.handmade, fed.handmade);
    expect(draw).toBe(HANDMADE.draws.length);
    keys.handmade = await keyOf(tenants.handmade, "edge-1", "query");
  });

  afterAll(async () => {
    await nodeB?.idle();
    await nodeC?.idle();
    await server?.close();
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  describe("authentication", () => {
    it("answers 401 without a key, with a malformed, an unknown or a revoked key", async () => {
      const none = await post(null, RANGE);
      expect(none.status).toBe(401);
      expect(none.json.error.code).toBe("unauthenticated");
      expect((await get(null, toSearch(RANGE))).status).toBe(401);
      expect((await post("not-a-key", RANGE)).status).toBe(401);
      expect((await post("weir_00000000_AAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAA", RANGE)).status).toBe(401);
      expect((await post(keys.alphaRevoked, RANGE)).status).toBe(200);
      await revokeApiKey(server.db, keys.alphaRevoked.split("_").slice(0, 2).join("_"));
      const revoked = await post(keys.alphaRevoked, RANGE);
      expect(revoked.status).toBe(401);
      expect(revoked.json.error.message).toMatch(/revoked/);
    });

    it("answers 403 to an ingest-only key", async () => {
      const res = await post(keys.alphaIngest, RANGE);
      expect(res.status).toBe(403);
      expect(res.json.error).toMatchObject({ code: "forbidden", message: expect.stringMatching(/needs 'query'/) });
    });

    it("checks the key before the query, so a stranger learns nothing of the format", async () => {
      expect((await post(null, { from: "nonsense" })).status).toBe(401);
    });
  });

  describe("estimates against the truth", () => {
    // A fixed list of subsets chosen after sampling, as the method allows (DLT 2007, §1).
    const subsets: [string, EstimateRequest][] = [
      ["everything", RANGE],
      ["a source /24 (RFC 4632)", { ...RANGE, where: { src: ["198.51.100.0/24"] } }],
      ["a source /24 less its upper half", { ...RANGE, where: { src: ["198.51.100.0/24"], srcExclude: ["198.51.100.128/25"] } }],
      ["IPv6 destinations (RFC 3849 space)", { ...RANGE, where: { dst: ["2001:db8::/32"] } }],
      ["IPv6 and IPv4 sources together", { ...RANGE, where: { src: ["2001:db8:1::/48", "192.0.2.0/24"] } }],
      ["HTTPS", { ...RANGE, where: { dport: [443] } }],
      ["TCP from ephemeral ports", { ...RANGE, where: { sport: ["1024-65535"], proto: [6] } }],
      ["UDP", { ...RANGE, where: { proto: [17] } }],
      ["one collector", { ...RANGE, where: { collectors: ["edge-2"] } }],
      ["two windows", { from: new Date(WINDOWS[1]).toISOString(), to: new Date(WINDOWS[3]).toISOString() }],
      [
        "combo: a /24 to web ports on one collector",
        { ...RANGE, where: { src: ["198.51.100.0/24"], dport: [443, "80-80"], collectors: ["edge-1"] } },
      ],
      ["combo: excludes on both ends", { ...RANGE, where: { srcExclude: ["2001:db8::/32"], dstExclude: ["203.0.113.0/24"] } }],
    ];

    it.each(subsets)("%s: |estimate − truth| ≤ 4 standard errors for bytes, packets and flows", async (_, request) => {
      // Unbiased estimates (DLT 2007, Theorem 1) of sums of many independent terms are close to
      // normal; 4 estimated standard errors leave a two-sided normal tail of 6.3·10⁻⁵ per check.
      for (const metric of ["bytes", "packets", "flows"] as const) {
        const a = await answer(keys.alpha, { ...request, metric });
        const t = truth(fed.alpha, request, metric);
        expect(a.metric).toBe(metric);
        expect(a.kept).toBeGreaterThan(10);
        expect(a.stdError).toBeGreaterThan(0);
        expect(Math.abs(a.estimate - t), `${metric}: estimate ${a.estimate} ± ${a.stdError}, truth ${t}`).toBeLessThanOrEqual(4 * a.stdError);
        expect(a.ci95[0]).toBeGreaterThanOrEqual(0);
        expect(a.ci95[0]).toBeLessThanOrEqual(a.estimate);
        // The normal interval where it covers, capped at the range's exact total; the gamma
        // interval (Fay and Feuer 1997) where the normal approximation would be poor, and then rough.
        const cap = Number(metric === "bytes" ? a.exact.bytes : metric === "packets" ? a.exact.packets : a.exact.records);
        if (a.method === "normal") expect(a.ci95[1]).toBeCloseTo(Math.min(cap, a.estimate + 1.959963984540054 * a.stdError), 6);
        else expect(a).toMatchObject({ method: "gamma", rough: true, matched: true });
        expect(a.ci95[1]).toBeGreaterThan(a.ci95[0]);
        expect(a.ci95[1]).toBeLessThanOrEqual(cap);
      }
    });

    it("is exact when k exceeds the records of every reservoir (τ = 0), summed over both nodes", async () => {
      for (const [, request] of subsets) {
        for (const metric of ["bytes", "packets", "flows"] as const) {
          const a = await answer(keys.exact, { ...request, metric });
          const t = truth(fed.exact, request, metric);
          expect(a.estimate, `${metric} ${JSON.stringify(request.where)}`).toBe(t);
          expect(a.stdError).toBe(0);
          expect(a.ci95).toEqual([t, t]);
        }
      }
      const reservoirs = await server.db.$client.execute({
        sql: "SELECT DISTINCT node FROM reservoirs WHERE tenant_id = ? ORDER BY node",
        args: [tenants.exact.id],
      });
      expect(reservoirs.rows.map((r) => r.node)).toEqual(["node-a", "node-b"]);
    });

    // The checks above measure the error by the answer's own standard error, which an inflated
    // variance would widen along with the tolerance: here the variance is known beforehand.
    it("gives the hand-computed estimate and standard error for twenty records at k = 16 (τ = 125)", async () => {
      const range = { from: new Date(T0).toISOString(), to: new Date(T0 + WINDOW_MS).toISOString() };
      const relative = (actual: number, expected: number) => Math.abs(actual - expected) / expected;
      // By hand (see HANDMADE): bytes 18 900 ± √23 750; the source 198.51.100.10 alone keeps
      // 5000, 3000, 900, 700, 500, 300 for certain and 100 below τ: 10 400 + 125 = 10 525, Var̂ = 125·25 = 3125.
      const oneSource: EstimateRequest = { ...range, where: { src: ["198.51.100.10"] } };
      const byHand: [EstimateRequest, number, number][] = [
        [range, 18_900, 23_750],
        [oneSource, 10_525, 3125],
      ];
      for (const [request, estimate, variance] of byHand) {
        const a = await answer(keys.handmade, { ...request, metric: "bytes" });
        // Kept: all k = 16, or the seven even-numbered ones among them (records 0, 2, …, 12; see above).
        expect(a.kept).toBe(request === range ? 16 : 7);
        expect(relative(a.estimate, estimate)).toBeLessThan(1e-12);
        expect(relative(a.stdError, Math.sqrt(variance))).toBeLessThan(1e-12);
      }
      // Packets and flows, by the definitions computed in byDefinition (every metric x ≠ w is a
      // Horvitz–Thompson sum with p = min(1, w/τ), DLT 2007 §5).
      // The definitions reproduce the hand computation for bytes.
      const bytesByDefinition = byDefinition(() => true, (i) => HANDMADE.bytes[i]);
      expect([bytesByDefinition.tau, bytesByDefinition.estimate]).toEqual([125, 18_900]);
      expect(relative(bytesByDefinition.stdError, Math.sqrt(23_750))).toBeLessThan(1e-12);
      const subsets: [EstimateRequest, (i: number) => boolean][] = [
        [range, () => true],
        [oneSource, (i) => i % 2 === 0],
      ];
      for (const [metric, x] of [["packets", (i: number) => 1 + (i % 4)], ["flows", () => 1]] as const) {
        for (const [request, include] of subsets) {
          const expected = byDefinition(include, x);
          const a = await answer(keys.handmade, { ...request, metric });
          expect(relative(a.estimate, expected.estimate), `${metric} ${JSON.stringify(request)}`).toBeLessThan(1e-12);
          expect(relative(a.stdError, expected.stdError), `${metric} ${JSON.stringify(request)}`).toBeLessThan(1e-12);
        }
      }
      // The exact counters count every record sent, the three dropped ones too.
      expect((await answer(keys.handmade, range)).exact).toEqual({ records: 20, bytes: 18_920, packets: fed.handmade.reduce((n, f) => n + Number(f.record.packets), 0) });
    });
  });

  describe("the answer's context", () => {
    it("reports windows, collectors and exact totals of everything fed in range, whatever the filter", async () => {
      const sum = (records: Fed[], f: (r: FlowRecord) => bigint) => records.reduce((s, x) => s + f(x.record), 0n);
      const a = await answer(keys.alpha, { ...RANGE, where: { dport: [22] } });
      expect(a.windows).toBe(4);
      expect(a.collectors).toEqual(["edge-1", "edge-2"]);
      expect(a.exact).toEqual({
        records: fed.alpha.length,
        bytes: Number(sum(fed.alpha, (r) => r.bytes)),
        packets: Number(sum(fed.alpha, (r) => r.packets)),
      });
      expect(a.from).toBe("2024-05-01T02:00:00.000Z");
      expect(a.to).toBe("2024-05-01T02:20:00.000Z");

      const oneCollector = await answer(keys.alpha, { from: RANGE.from, to: new Date(WINDOWS[2]).toISOString(), where: { collectors: ["edge-1"] } });
      const edge1 = fed.alpha.filter((f) => f.collector === "edge-1" && f.record.start! < WINDOWS[2]);
      expect(oneCollector.windows).toBe(2);
      expect(oneCollector.collectors).toEqual(["edge-1"]);
      expect(oneCollector.exact.records).toBe(edge1.length);
      expect(oneCollector.exact.bytes).toBe(Number(sum(edge1, (r) => r.bytes)));
    });

    it("answers a subset no kept record matched with 'no sampled record matched' and 0 up to 3.689·τ (Garwood 1936, count 0), never [0, 0]", async () => {
      const where = { src: ["2001:db8:ffff:ffff::/64"] };
      const maxTau = async (tenantId: number) =>
        Number((await server.db.$client.execute({ sql: "SELECT max(tau) FROM reservoirs WHERE tenant_id = ?", args: [tenantId] })).rows[0][0]);
      const bytesTenant = await answer(keys.alpha, { ...RANGE, where, metric: "bytes" });
      const tauAlpha = await maxTau(tenants.alpha.id);
      expect(tauAlpha).toBeGreaterThan(0);
      expect(bytesTenant).toMatchObject({ estimate: 0, kept: 0, matched: false, message: "no sampled record matched", method: "no-match", rough: true });
      expect(bytesTenant.ci95[0]).toBe(0);
      expect(bytesTenant.ci95[1]).toBeCloseTo(Math.min(Number(bytesTenant.exact.bytes), -Math.log(0.025) * tauAlpha), 6);
      // beta kept every record (k above each window's count, τ = 0): there an empty subset is exactly 0.
      expect(await maxTau(tenants.beta.id)).toBe(0);
      expect(await answer(keys.beta, { ...RANGE, where, metric: "bytes" })).toMatchObject({ ci95: [0, 0], method: "exact", matched: false });
    });

    it("sums counters past 2^53 exactly and answers them as decimal strings", async () => {
      const late = T0 + 24 * 3600_000;
      const big = (src: string): Fed => ({
        collector: "edge-1",
        record: { ...fed.exact[0].record, src: parseAddress(src), bytes: 18_446_744_073_709_551_615n, packets: 3n, start: late, end: late },
      });
      await feed(server.manager, tenants.exact, [big("192.0.2.1"), big("192.0.2.2")]);
      const a = await answer(keys.exact, { from: late, to: late + WINDOW_MS });
      // 2 · (2^64 − 1), the largest unsigned64 counter (RFC 7012) twice.
      expect(a.exact).toEqual({ records: 2, bytes: "36893488147419103230", packets: 6 });
      expect(a.windows).toBe(1);
    });

    it("uses the tenant's weight attribute when no metric is named", async () => {
      expect((await answer(keys.alpha, RANGE)).metric).toBe("bytes");
      expect((await answer(keys.beta, RANGE)).metric).toBe("packets");
    });

    it("answers an unknown collector with an empty result, not an error", async () => {
      const a = await answer(keys.alpha, { ...RANGE, where: { collectors: ["nowhere"] }, groupBy: "src" });
      expect(a).toMatchObject({
        estimate: 0,
        stdError: 0,
        ci95: [0, 0],
        kept: 0,
        windows: 0,
        collectors: [],
        exact: { records: 0, bytes: 0, packets: 0 },
        groups: [],
      });
    });
  });

  describe("groups", () => {
    it("match the true per-group sums where the sample is exact, top N largest first", async () => {
      const cases: EstimateRequest[] = [
        { ...RANGE, groupBy: "src" },
        { ...RANGE, groupBy: "dst", prefixLength: { ipv4: 16, ipv6: 48 }, where: { proto: [6] } },
        { ...RANGE, groupBy: "dport", top: 3, metric: "flows" },
        { ...RANGE, groupBy: "sport", top: 5, where: { sport: ["0-1023"] } },
        { ...RANGE, groupBy: "proto", metric: "packets" },
        { ...RANGE, groupBy: "collector" },
        { ...RANGE, groupBy: "window", top: 1000 },
      ];
      for (const request of cases) {
        const a = await answer(keys.exact, request);
        const metric = request.metric ?? "bytes";
        const expected = [...truthByGroup(fed.exact, request, metric)].sort((x, y) => y[1] - x[1]);
        const top = request.top ?? 10;
        expect(a.groups.length, JSON.stringify(request)).toBe(Math.min(top, expected.length));
        const truthOf = new Map(expected);
        for (const g of a.groups) {
          expect(g.estimate, `${g.key} in ${JSON.stringify(request)}`).toBe(truthOf.get(g.key));
          expect(g.ci95).toEqual([g.estimate, g.estimate]);
        }
        expect(a.groups.map((g) => g.estimate)).toEqual(expected.slice(0, top).map(([, v]) => v));
      }
    });

    it("use keys a reader can act on, and add up to the total", async () => {
      const bySrc = await answer(keys.alpha, { ...RANGE, groupBy: "src", top: 1000 });
      for (const g of bySrc.groups) expect(g.key).toMatch(/^(198\.51\.100\.0\/24|203\.0\.113\.0\/24|192\.0\.2\.0\/24|2001:db8:1::\/64|2001:db8:2:[0-9a-f]+::\/64)$/);
      expect(bySrc.groups.reduce((s, g) => s + g.estimate, 0)).toBeCloseTo(bySrc.estimate, 3);
      expect(bySrc.groups.reduce((s, g) => s + g.kept, 0)).toBe(bySrc.kept);

      const byWindow = await answer(keys.alpha, { ...RANGE, groupBy: "window" });
      expect(byWindow.groups.map((g) => g.key).sort()).toEqual(WINDOWS.map((w) => new Date(w).toISOString()));

      const byCollector = await answer(keys.alpha, { ...RANGE, groupBy: "collector" });
      const edge2 = await answer(keys.alpha, { ...RANGE, where: { collectors: ["edge-2"] } });
      const group = byCollector.groups.find((g) => g.key === "edge-2")!;
      expect(group.estimate).toBeCloseTo(edge2.estimate, 6);
      expect(group.stdError).toBeCloseTo(edge2.stdError, 6);
      expect(group.kept).toBe(edge2.kept);
    });
  });

  describe("tenant isolation", () => {
    it("never shows one tenant's records to another's key, even under the same collector name", async () => {
      const beta = await answer(keys.beta, { ...RANGE, metric: "bytes", where: { collectors: ["edge-1"] }, groupBy: "collector" });
      expect(beta.estimate).toBe(truth(fed.beta, RANGE, "bytes"));
      expect(beta.exact.records).toBe(fed.beta.length);
      expect(beta.groups).toEqual([expect.objectContaining({ key: "edge-1", estimate: beta.estimate })]);

      const alpha = await answer(keys.alpha, RANGE);
      expect(alpha.exact.records).toBe(fed.alpha.length);

      // alpha has an edge-2; beta does not, and must not see alpha's.
      const none = await answer(keys.beta, { ...RANGE, where: { collectors: ["edge-2"] } });
      expect(none).toMatchObject({ estimate: 0, kept: 0, windows: 0, collectors: [] });
    });
  });

  describe("GET and POST", () => {
    it.each<EstimateRequest>([
      RANGE,
      { ...RANGE, where: { src: ["198.51.100.0/24", "2001:db8::/32"], dport: [443, "8000-9000"] }, metric: "packets" },
      { ...RANGE, where: { srcExclude: ["192.0.2.0/24"], proto: [6, 17], collectors: ["edge-1", "edge-2"] }, groupBy: "dst", prefixLength: { ipv4: 16, ipv6: 32 }, top: 4 },
      { from: T0, to: T0 + 2 * WINDOW_MS, groupBy: "window", metric: "flows" },
    ])("give the same answer: %j", async (request) => {
      const viaPost = await post(keys.alpha, request);
      const viaGet = await get(keys.alpha, toSearch(request));
      expect(viaPost.status).toBe(200);
      expect(viaGet.json).toEqual(viaPost.json);
    });
  });

  describe("kept records read from memory, from SQLite and from the snapshot cache", () => {
    it("give the same answer, and a window that took new records is read afresh", async () => {
      const request: EstimateRequest = { ...RANGE, where: { dst: ["203.0.113.0/24"] }, groupBy: "dport" };
      const live = await answer(keys.alpha, request);
      server.manager.clear(); // this node forgets its live reservoirs: kept records come from SQLite
      const stored = await answer(keys.alpha, request);
      const cached = await answer(keys.alpha, request);
      // Memory holds the kept records in priority order, SQLite in seq order: the sums agree up to
      // the rounding of floating-point addition in a different order.
      expect(roundedAnswer(stored)).toEqual(roundedAnswer(live));
      expect(cached).toEqual(stored);

      // The exact tenant's window 0 is now in the snapshot cache; new records change its kept set.
      const window0 = { from: T0, to: T0 + WINDOW_MS };
      await answer(keys.exact, window0);
      const more = stream(9, 50, ["edge-1"], [WINDOWS[0]]);
      await feed(server.manager, tenants.exact, more);
      fed.exact.push(...more);
      server.manager.clear();
      const after = await answer(keys.exact, window0);
      expect(after.estimate).toBe(truth(fed.exact, window0, "bytes"));
      expect(after.kept).toBe(after.exact.records);
    });
  });

  describe("invalid requests", () => {
    it("answers 400 invalid_query naming the field and the reason", async () => {
      const hostBits = await post(keys.alpha, { ...RANGE, where: { src: ["198.51.100.7/24"] } });
      expect(hostBits.status).toBe(400);
      expect(hostBits.json.error).toEqual({
        code: "invalid_query",
        message: "Invalid query: where.src[0]: 198.51.100.7/24 has host bits set; did you mean 198.51.100.0/24?",
        details: [{ path: "where.src[0]", message: "198.51.100.7/24 has host bits set; did you mean 198.51.100.0/24?" }],
      });

      const viaGet = await get(keys.alpha, `${toSearch(RANGE)}&dport=443,70000&sourcePort=53`);
      expect(viaGet.status).toBe(400);
      expect(viaGet.json.error.code).toBe("invalid_query");
      expect(viaGet.json.error.details.map((d: { path: string }) => d.path).sort()).toEqual(["dport[1]", "sourcePort"]);

      const span = await post(keys.alpha, { from: "2023-01-01", to: "2024-05-02" });
      expect(span.status).toBe(400);
      expect(span.json.error.details).toEqual([{ path: "to", message: expect.stringMatching(/at most 400 days/) }]);

      const notJson = await post(keys.alpha, "{from:");
      expect(notJson.status).toBe(400);
      expect(notJson.json.error.details[0]).toMatchObject({ path: "", message: expect.stringMatching(/not JSON/) });

      const missing = await post(keys.alpha, {});
      expect(missing.json.error.details.map((d: { path: string }) => d.path)).toEqual(["from", "to"]);
    });

    it("refuses a query string on POST, other methods, and oversized bodies", async () => {
      const res = await fetch(`${server.url}/api/v1/estimate?top=5`, {
        method: "POST",
        headers: { authorization: `Bearer ${keys.alpha}`, "content-type": "application/json" },
        body: JSON.stringify(RANGE),
      });
      expect(res.status).toBe(400);
      expect((await res.json()).error.details).toEqual([{ path: "top", message: expect.stringMatching(/JSON body/) }]);

      const put = await fetch(`${server.url}/api/v1/estimate`, { method: "PUT", headers: { authorization: `Bearer ${keys.alpha}` }, body: "{}" });
      expect(put.status).toBe(405);
      expect(put.headers.get("allow")).toBe("GET, HEAD, POST");

      const huge = await post(keys.alpha, { ...RANGE, where: { collectors: Array(30_000).fill("edge-1") } });
      expect(huge.status).toBe(413);
    });
  });
});
