// A packets-weighted tenant fed by the native listeners samples by packets, as it does over
// HTTP (tests/ingest/packets-weight.test.ts): the listeners look the tenant's weight attribute
// up in their own code, so the stored sample of IPFIX records (RFC 7011) sent over UDP is
// checked here. The weight of a record is the tenant's weight attribute, w_i = packets_i
// (N. Duffield, C. Lund, M. Thorup, "Priority sampling for estimation of arbitrary subset
// sums", J. ACM 54(6), 2007, §1). Estimates stay unbiased under either weight, so only the
// stored rows tell the two apart: they are read straight from SQLite (kept_records.data, by
// the layout documented in app/ingest/kept-codec.ts, without the project's decoder).
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { claimExporter } from "~/exporters/claims.server";
import { startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { ipfixMessages, sendUdp, testFlows, waitFor, type TestFlow } from "./helpers";

const ACTOR = { id: null, label: "test" };
const T0 = Date.UTC(2026, 10, 30, 10, 0, 0);
const K = 16;
const N = 60;

/** A stored kept row, read by the documented layout: 8 weight f64 · 48 bytes u64 · 56 packets u64 · 80 sport u16 (little-endian). */
function readRow(data: Uint8Array) {
  const view = new DataView(data.buffer, data.byteOffset, data.byteLength);
  return {
    weight: view.getFloat64(8, true),
    bytes: view.getBigUint64(48, true),
    packets: view.getBigUint64(56, true),
    sport: view.getUint16(80, true),
  };
}

describe("a packets-weighted tenant fed over the IPFIX UDP listener", () => {
  let t: TestServer;
  let tenantId: number;
  // testFlows draws the packet size per flow (40–1500 bytes) independently of the packet count,
  // so bytes and packets rank the flows differently (checked below). Each source port is made
  // unique: it names the flow when a stored row is matched to what was sent.
  const sent: TestFlow[] = testFlows(N, 12, T0).map((f, i) => ({ ...f, sport: 30000 + i }));

  beforeAll(async () => {
    t = await startTestServer({ collect: { ipfixUdpPort: 0, flushMs: 50 } });
    // k below the record count, so the listener's records are actually sampled.
    const made = await tenantWithKey(t.server, "udp-by-packets", { collector: "api", sampleSize: K, weightAttribute: "packets" });
    tenantId = made.tenant.id;
    await claimExporter(t.server.db, { tenantId, collector: "router-p", cidr: "127.0.0.1", actor: ACTOR });
    await t.server.collection.reloadClaims();

    const before = t.server.collection.counters.datagrams;
    const messages = ipfixMessages(sent, 1);
    await sendUdp(messages, t.server.collection.ports.ipfixUdp!, "127.0.0.1");
    await waitFor(() => t.server.collection.counters.datagrams - before >= messages.length, `${messages.length} datagrams`);
    await t.server.collection.drain();
  });
  afterAll(() => t?.close());

  async function stored() {
    const { rows } = await t.server.db.$client.execute({
      sql: `SELECT k.data FROM kept_records k JOIN reservoirs r ON r.id = k.reservoir_id JOIN collectors c ON c.id = r.collector_id
            WHERE r.tenant_id = ? AND c.name = 'router-p'`,
      args: [tenantId],
    });
    return rows.map((r) => readRow(new Uint8Array(r.data as ArrayBuffer)));
  }

  it("the sent flows rank differently by bytes and by packets, and no flow has bytes equal to packets (computed in the test)", () => {
    const top = (by: "bytes" | "packets") => new Set([...sent].sort((a, b) => b[by] - a[by]).slice(0, K).map((f) => f.sport));
    const byBytes = top("bytes");
    expect([...top("packets")].filter((s) => !byBytes.has(s)).length).toBeGreaterThan(0);
    expect(sent.filter((f) => f.bytes !== f.packets)).toHaveLength(N);
    // All in one 300 s window (testFlows starts them within 60 s of T0), so one reservoir keeps k of them.
    expect(sent.every((f) => Math.floor(f.start / 300_000) === Math.floor(T0 / 300_000))).toBe(true);
  });

  it("stores every record sent and keeps k of them in one window (counts from what the test sent)", async () => {
    const { rows } = await t.server.db.$client.execute({ sql: "SELECT coalesce(sum(records), 0) AS n FROM reservoirs WHERE tenant_id = ?", args: [tenantId] });
    expect(Number(rows[0].n)).toBe(N);
    expect(await stored()).toHaveLength(K);
  });

  it("stores each kept record's weight as its packets, never its bytes (w_i = packets_i, DLT 2007 §1)", async () => {
    const kept = await stored();
    expect(kept.length).toBeGreaterThan(0);
    for (const row of kept) {
      const flow = sent.find((f) => f.sport === row.sport);
      expect(flow, `a kept row with source port ${row.sport} was sent`).toBeDefined();
      // The tenant's weight attribute is the sampling weight; the counters travel unchanged (values from the records sent).
      expect(row.weight).toBe(flow!.packets);
      expect(row.packets).toBe(BigInt(flow!.packets));
      expect(row.bytes).toBe(BigInt(flow!.bytes));
    }
  });
});
