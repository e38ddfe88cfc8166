// The native-collection listeners end to end: hand-built IPFIX (RFC 7011) and NetFlow v9
// (RFC 3954) sent over UDP and TCP on loopback reach the collector their exporter is claimed
// for, with exact counters equal to what was sent; unclaimed exporters feed nobody, and one
// tenant's exporter never feeds another.
import { connect } from "node:net";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { claimExporter } from "~/exporters/claims.server";
import { startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { ipfixMessages, netflow9Packets, sendTcp, sendUdp, sums, testFlows, waitFor, type TestFlow } from "./helpers";

const ACTOR = { id: null, label: "test" };
const T0 = Date.UTC(2026, 10, 30, 10, 0, 0);

async function stored(t: TestServer, tenantId: number, collector: string) {
  const { rows } = await t.server.db.$client.execute({
    sql: `SELECT coalesce(sum(r.records), 0) AS records, coalesce(sum(CAST(r.bytes AS INTEGER)), 0) AS bytes, coalesce(sum(CAST(r.packets AS INTEGER)), 0) AS packets
          FROM reservoirs r JOIN collectors c ON c.id = r.collector_id WHERE r.tenant_id = ? AND c.name = ?`,
    args: [tenantId, collector],
  });
  return { records: Number(rows[0].records), bytes: BigInt(String(rows[0].bytes)), packets: BigInt(String(rows[0].packets)) };
}

describe("native collection listeners", () => {
  let t: TestServer;
  let a: Awaited<ReturnType<typeof tenantWithKey>>;
  let b: Awaited<ReturnType<typeof tenantWithKey>>;
  const udpFlows = testFlows(400, 1, T0);
  const tcpFlows = testFlows(150, 2, T0);
  const v9Flows = testFlows(300, 3, T0);
  const strayFlows = testFlows(100, 4, T0);

  beforeAll(async () => {
    t = await startTestServer({ collect: { ipfixUdpPort: 0, netflowUdpPort: 0, ipfixTcpPort: 0, flushMs: 50 } });
    // k above every record count: τ = 0 and every estimate is exact, so answers can be compared with sums.
    a = await tenantWithKey(t.server, "isle-a", { collector: "api", sampleSize: 4096 });
    b = await tenantWithKey(t.server, "isle-b", { collector: "api", sampleSize: 4096 });
    await claimExporter(t.server.db, { tenantId: a.tenant.id, collector: "router-a", cidr: "127.0.0.1", actor: ACTOR });
    await claimExporter(t.server.db, { tenantId: b.tenant.id, collector: "router-b", cidr: "127.0.0.2/32", domainId: 7, actor: ACTOR });
    await t.server.collection.reloadClaims();

    const ports = t.server.collection.ports;
    const before = t.server.collection.counters.datagrams;
    const udp = ipfixMessages(udpFlows, 1);
    const v9 = netflow9Packets(v9Flows, 7, T0 - 3_600_000);
    const stray = ipfixMessages(strayFlows, 1);
    await sendUdp(udp, ports.ipfixUdp!, "127.0.0.1");
    await sendUdp(v9, ports.netflowUdp!, "127.0.0.2");
    // 127.0.0.3 is claimed by nobody.
    await sendUdp(stray, ports.ipfixUdp!, "127.0.0.3");
    await sendTcp(ipfixMessages(tcpFlows, 1), ports.ipfixTcp!, "127.0.0.1");
    const datagrams = udp.length + v9.length + stray.length;
    await waitFor(() => t.server.collection.counters.datagrams - before >= datagrams, `${datagrams} datagrams`);
    await waitFor(() => t.server.collection.counters.tcpMessages >= Math.ceil(tcpFlows.length / 20), "the TCP messages");
    await t.server.collection.drain();
  });

  afterAll(async () => {
    await t?.close();
  });

  it("stores exactly what a claimed exporter sent, over UDP and TCP (the test's own sums of the flows it encoded)", async () => {
    const all: TestFlow[] = [...udpFlows, ...tcpFlows];
    expect(await stored(t, a.tenant.id, "router-a")).toEqual(sums(all));
    expect(await stored(t, b.tenant.id, "router-b")).toEqual(sums(v9Flows));
  });

  it("records each batch's source for Intake", async () => {
    const { rows } = await t.server.db.$client.execute({
      sql: "SELECT b.source, sum(b.record_count) AS n FROM ingest_batches b JOIN collectors c ON c.id = b.collector_id WHERE c.name IN ('router-a', 'router-b') GROUP BY b.source ORDER BY b.source",
      args: [],
    });
    expect(rows.map((r) => [r.source, Number(r.n)])).toEqual([
      ["ipfix-tcp", tcpFlows.length],
      ["ipfix-udp", udpFlows.length],
      ["netflow9-udp", v9Flows.length],
    ]);
  });

  it("feeds nobody from an unclaimed exporter, and counts it", async () => {
    for (const tenant of [a, b]) {
      const { rows } = await t.server.db.$client.execute({ sql: "SELECT coalesce(sum(records), 0) AS n FROM reservoirs WHERE tenant_id = ?", args: [tenant.tenant.id] });
      const expected = tenant === a ? udpFlows.length + tcpFlows.length : v9Flows.length;
      expect(Number(rows[0].n)).toBe(expected);
    }
    const { rows } = await t.server.db.$client.execute("SELECT messages, records, unclaimed_messages FROM exporters WHERE address = '127.0.0.3'");
    expect(rows).toHaveLength(1);
    expect(Number(rows[0].unclaimed_messages)).toBe(Math.ceil(strayFlows.length / 20));
    expect(Number(rows[0].records)).toBe(strayFlows.length);
  });

  it("answers estimates over listener records like any others: with τ = 0 the estimate is the exact sum", async () => {
    const res = await fetch(`${t.url}/api/v1/estimate`, {
      method: "POST",
      headers: { authorization: `Bearer ${a.key}`, "content-type": "application/json" },
      body: JSON.stringify({ from: T0 - 3_600_000, to: T0 + 3_600_000, where: { collectors: ["router-a"], dport: [443] }, metric: "bytes" }),
    });
    expect(res.status).toBe(200);
    const answer = (await res.json()) as { estimate: number; stdError: number };
    const truth = [...udpFlows, ...tcpFlows].filter((f) => f.dport === 443).reduce((s, f) => s + f.bytes, 0);
    expect(answer.estimate).toBe(truth);
    expect(answer.stdError).toBe(0);
  });

  it("closes a TCP stream that stops being IPFIX and counts it malformed for that exporter (RFC 7011 §10.4: no way to find the next message)", async () => {
    const socket = connect({ port: t.server.collection.ports.ipfixTcp!, host: "127.0.0.1", localAddress: "127.0.0.4" });
    await new Promise<void>((resolve, reject) => socket.once("connect", resolve).once("error", reject));
    const closed = new Promise<void>((resolve) => socket.once("close", () => resolve()));
    socket.on("error", () => undefined);
    socket.write("GET / HTTP/1.1\r\nHost: not-ipfix\r\n\r\n");
    await closed;
    await t.server.collection.drain();
    const { rows } = await t.server.db.$client.execute("SELECT transport, malformed, last_error FROM exporters WHERE address = '127.0.0.4'");
    expect(rows.map((r) => [r.transport, Number(r.malformed)])).toEqual([["ipfix-tcp", 1]]);
    expect(String(rows[0].last_error)).toMatch(/not IPFIX/);
  });

  it("forgets exporters silent for more than 30 days (a bound of its own: the table cannot grow without limit)", async () => {
    const old = Date.now() - 31 * 24 * 3600_000;
    await t.server.db.$client.execute({
      sql: "INSERT INTO exporters (address, domain_id, transport, first_seen_at, last_seen_at) VALUES ('192.0.2.99', 0, 'ipfix-udp', ?, ?)",
      args: [old, old],
    });
    await t.server.collection.drain();
    const { rows } = await t.server.db.$client.execute("SELECT count(*) AS n FROM exporters WHERE address = '192.0.2.99'");
    expect(Number(rows[0].n)).toBe(0);
  });

  it("reports the listeners, the decode worker and their counters on /healthz", async () => {
    const res = await fetch(`${t.url}/healthz`);
    expect(res.status).toBe(200);
    const body = (await res.json()) as { ok: boolean; collection: { worker: string; ports: Record<string, number>; counters: { rowsStored: number; rowsUnclaimed: number } } };
    expect(body.ok).toBe(true);
    expect(body.collection.worker).toBe("running");
    expect(body.collection.ports).toEqual(t.server.collection.ports);
    expect(body.collection.counters.rowsStored).toBe(udpFlows.length + tcpFlows.length + v9Flows.length);
    expect(body.collection.counters.rowsUnclaimed).toBe(strayFlows.length);
  });

  it("writes exporter statistics: messages, records and the templates seen (RFC 7011 §8)", async () => {
    const { rows } = await t.server.db.$client.execute(
      "SELECT address, domain_id, transport, messages, records, lost, malformed, templates FROM exporters WHERE address IN ('127.0.0.1', '127.0.0.2') ORDER BY transport",
    );
    const byTransport = Object.fromEntries(rows.map((r) => [String(r.transport), r]));
    expect(Number(byTransport["ipfix-udp"].records)).toBe(udpFlows.length);
    expect(Number(byTransport["ipfix-udp"].messages)).toBe(Math.ceil(udpFlows.length / 20));
    expect(Number(byTransport["ipfix-udp"].lost)).toBe(0);
    expect(Number(byTransport["ipfix-tcp"].records)).toBe(tcpFlows.length);
    expect(Number(byTransport["netflow9-udp"].records)).toBe(v9Flows.length);
    expect(Number(byTransport["netflow9-udp"].domain_id)).toBe(7);
    const templates = JSON.parse(String(byTransport["ipfix-udp"].templates)) as { id: number; fields: string[] }[];
    expect(templates.map((tpl) => tpl.id)).toEqual([256]);
    expect(templates[0].fields).toContain("octetDeltaCount");
  });
});

describe("health when the decode worker is gone", () => {
  it("answers 503 on /healthz: listeners are configured but nothing would be decoded", async () => {
    const t = await startTestServer({ collect: { ipfixUdpPort: 0 } });
    try {
      expect((await fetch(`${t.url}/healthz`)).status).toBe(200);
      // The worker dies as a crash would end it (what is asserted is the answer, not the cause).
      await (t.server.collection as unknown as { worker: { terminate(): Promise<number> } }).worker.terminate();
      await waitFor(() => t.server.collection.health().worker === "stopped", "the worker to be seen stopped");
      const res = await fetch(`${t.url}/healthz`);
      expect(res.status).toBe(503);
      expect(((await res.json()) as { collection: { worker: string } }).collection.worker).toBe("stopped");
    } finally {
      await t.close();
    }
  });
});
