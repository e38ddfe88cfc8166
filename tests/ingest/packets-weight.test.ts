import { afterAll, beforeAll, describe, expect, it } from "vitest";
import type { EstimateAnswer } from "~/query/answer";
import { seededUniform } from "~/sampling/uniform";
import type { TestFlow } from "../collect/helpers";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// A tenant whose sampling weight is packets must sample by packets: w_i = packets_i, priority
// q_i = w_i / u_i, keep the k largest, τ = the (k+1)-th largest (N. Duffield, C. Lund,
// M. Thorup, "Priority sampling for estimation of arbitrary subset sums", J. ACM 54(6), 2007,
// §1). Estimates stay unbiased under either weight, so only the stored sample tells the two
// apart. The server draws its u_i from a seeded source, so the test replays the draws and
// builds the sample from the definition, then reads the stored kept rows straight from
// SQLite (kept_records.data, decoded here by the layout documented in
// app/ingest/kept-codec.ts, without the project's decoder).

const SEED = 1729;
const K = 16;
const N = 60;
const WINDOW_MS = 300_000;
const T0 = Date.UTC(2024, 4, 3, 9, 0);

/**
 * N invented flows in one window, in documentation space (RFC 5737). Packets are heavy-tailed
 * (Pareto, shape 1.2) and the packet size varies from 40 to 1500 bytes independently, so the
 * largest flows by bytes and by packets are not the same flows. Each source port is unique: it
 * names the flow when the stored rows are matched to what was sent.
 */
function sentFlows(): TestFlow[] {
  const u = seededUniform(99);
  return Array.from({ length: N }, (_, i) => {
    const packets = Math.max(1, Math.floor(1 / Math.pow(u(), 1 / 1.2)));
    const size = 40 + Math.floor(u() * 1461);
    const start = T0 + Math.floor(u() * (WINDOW_MS - 1000));
    return { src: `192.0.2.${1 + i}`, dst: "198.51.100.25", sport: 20000 + i, dport: 443, proto: 6, bytes: packets * size, packets, start, end: start + 200 };
  });
}

/** A stored kept row, read by the documented layout: 0 priority f64 · 8 weight f64 · 48 bytes u64 · 56 packets u64 · 80 sport u16 (little-endian). */
function readRow(data: Uint8Array) {
  const view = new DataView(data.buffer, data.byteOffset, data.byteLength);
  return {
    priority: view.getFloat64(0, true),
    weight: view.getFloat64(8, true),
    bytes: view.getBigUint64(48, true),
    packets: view.getBigUint64(56, true),
    sport: view.getUint16(80, true),
  };
}

describe("a packets-weighted tenant", () => {
  let t: TestServer;
  let key: string;
  let tenantId: number;
  const sent = sentFlows();

  beforeAll(async () => {
    t = await startTestServer({ uniform: seededUniform(SEED) });
    const made = await tenantWithKey(t.server, "by-packets", { sampleSize: K, weightAttribute: "packets" });
    key = made.key;
    tenantId = made.tenant.id;
    // One batch, one window: the server offers the records in the order sent, one draw each.
    const res = await postFlows(t.url, key, JSON.stringify(sent));
    expect(res.status, await res.clone().text()).toBe(200);
  });
  afterAll(() => t?.close());

  /** The priority sample by its definition (DLT 2007 §1), replaying the server's draws in order. */
  function expectedSample() {
    const u = seededUniform(SEED);
    const all = sent.map((f) => ({ flow: f, priority: f.packets / u() })).sort((a, b) => b.priority - a.priority);
    return { kept: all.slice(0, K), tau: all[K].priority };
  }

  async function stored() {
    const rows = (
      await t.server.db.$client.execute({
        sql: "SELECT r.tau, k.data FROM kept_records k JOIN reservoirs r ON r.id = k.reservoir_id WHERE r.tenant_id = ?",
        args: [tenantId],
      })
    ).rows;
    return { taus: [...new Set(rows.map((r) => Number(r.tau)))], kept: rows.map((r) => readRow(new Uint8Array(r.data as ArrayBuffer))) };
  }

  it("the sent flows rank differently by bytes and by packets, so the test tells the two weights apart (computed in the test)", () => {
    const top = (by: "bytes" | "packets") => new Set([...sent].sort((a, b) => b[by] - a[by]).slice(0, K).map((f) => f.sport));
    const byBytes = top("bytes");
    expect([...top("packets")].filter((s) => !byBytes.has(s)).length).toBeGreaterThan(0);
    expect(sent.filter((f) => f.bytes !== f.packets)).toHaveLength(N);
  });

  it("stores each kept record's weight as its packets, never its bytes", async () => {
    const { kept } = await stored();
    expect(kept).toHaveLength(K);
    for (const row of kept) {
      // w_i = packets_i (the tenant's weight attribute); the record's own counters travel unchanged.
      const flow = sent.find((f) => f.sport === row.sport)!;
      expect(row.weight).toBe(flow.packets);
      expect(row.packets).toBe(BigInt(flow.packets));
      expect(row.bytes).toBe(BigInt(flow.bytes));
    }
  });

  it("keeps the k largest packets-weighted priorities q = packets/u, and τ is the (k+1)-th largest of them (DLT 2007 §1)", async () => {
    const { kept, taus } = await stored();
    const expected = expectedSample();
    expect(taus).toEqual([expected.tau]);
    const bySport = (list: { sport: number; priority: number }[]) => [...list].sort((a, b) => a.sport - b.sport);
    expect(bySport(kept.map((r) => ({ sport: r.sport, priority: r.priority })))).toEqual(
      bySport(expected.kept.map((e) => ({ sport: e.flow.sport, priority: e.priority }))),
    );
    // τ is in packets: every record left out has a priority of at most τ, every kept one above it.
    expect(Math.min(...kept.map((r) => r.priority))).toBeGreaterThan(expected.tau);
  });

  it("estimates by its weight: packets Σ max(p_i, τ), bytes Σ b_i·max(p_i, τ)/p_i over the kept records (DLT 2007 §1)", async () => {
    const { kept, tau } = expectedSample();
    // Equal up to the rounding of summing doubles in another order: 1e-9 relative (common practice).
    const expectClose = (actual: number, expected: number) => expect(Math.abs(actual - expected)).toBeLessThanOrEqual(1e-9 * expected);
    const ask = async (metric?: "bytes" | "packets") => {
      const res = await fetch(`${t.url}/api/v1/estimate`, {
        method: "POST",
        headers: { authorization: `Bearer ${key}`, "content-type": "application/json" },
        body: JSON.stringify({ from: new Date(T0).toISOString(), to: new Date(T0 + WINDOW_MS).toISOString(), ...(metric ? { metric } : {}) }),
      });
      expect(res.status, await res.clone().text()).toBe(200);
      return (await res.json()) as EstimateAnswer;
    };
    // The metric defaults to the tenant's weight.
    const byDefault = await ask();
    expect(byDefault.metric).toBe("packets");
    // ŵ_i = max(w_i, τ) for a kept record; any other metric is scaled by ŵ_i / w_i.
    expectClose(byDefault.estimate, kept.reduce((s, e) => s + Math.max(e.flow.packets, tau), 0));
    const bytes = await ask("bytes");
    expectClose(bytes.estimate, kept.reduce((s, e) => s + (e.flow.bytes * Math.max(e.flow.packets, tau)) / e.flow.packets, 0));
  });
});
