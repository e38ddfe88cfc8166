import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { parseFlowRecord, type FlowRecord } from "~/flow/record";
import type { MergeAnswer } from "~/merges/answer";
import type { EstimateAnswer } from "~/query/answer";
import { coordinatedUniform, flowKeyBytes } from "~/sampling/coordinated";
import { Reservoir } from "~/sampling/reservoir";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { flows, storedReservoirs, WINDOW_MS, type FlowJson } from "./helpers";

// A tenant with coordinated priorities: u_i is a keyed hash (SipHash-2-4, Aumasson &
// Bernstein, INDOCRYPT 2012) of the flow key, so a flow exported by two collectors has one
// priority everywhere. Two collectors post overlapping flows (some records sent by both);
// the merged reservoir must be exactly the priority sample (Duffield, Lund, Thorup, J. ACM
// 54(6), 2007) that one reservoir fed the DEDUPLICATED union would keep, and the merge must
// report as duplicates exactly the flows both collectors kept.

const T0 = Date.UTC(2024, 4, 2, 8, 0);
const FROM = new Date(T0).toISOString();
const TO = new Date(T0 + 2 * WINDOW_MS).toISOString();
const K = 16;
// An invented 16-byte key, as hex (32 hex digits).
const SECRET_HEX = "0f1e2d3c4b5a69788796a5b4c3d2e1f0";
const SECRET = Uint8Array.from(Buffer.from(SECRET_HEX, "hex"));

const keyOf = (r: FlowRecord) => Buffer.from(flowKeyBytes(r)).toString("hex");

function toRecord(json: FlowJson): FlowRecord {
  const parsed = parseFlowRecord(json);
  if (!parsed.ok) throw new Error("invented record invalid");
  return parsed.record;
}

/** A reservoir of size k fed `records` with coordinated draws, as the tenant's collectors draw them. */
function coordinatedSample(records: FlowRecord[], k: number): Reservoir<FlowRecord> {
  const reservoir = new Reservoir<FlowRecord>(k);
  for (const r of records) reservoir.offer(r, Number(r.bytes), coordinatedUniform(SECRET, flowKeyBytes(r)));
  return reservoir;
}

describe("merging collectors of a coordinated tenant", () => {
  let t: TestServer;
  let tenantId: number;
  let queryKey: string;
  const byCollector = { "core-a": [] as FlowJson[], "core-b": [] as FlowJson[] };
  let answer: MergeAnswer;

  beforeAll(async () => {
    t = await startTestServer();
    const made = await tenantWithKey(t.server, "overlap", { collector: "core-a", scope: "both", sampleSize: K });
    tenantId = made.tenant.id;
    queryKey = made.key;
    const bKey = (await keyFor(t.server, tenantId, "core-b", "ingest")).key;
    await t.server.db.$client.execute({ sql: "UPDATE tenants SET coordinated = 1, coordination_secret = ? WHERE id = ?", args: [SECRET_HEX, tenantId] });

    for (const [w, windowStart] of [T0, T0 + WINDOW_MS].entries()) {
      // The same flows seen by both collectors (identical records), and flows only one of them saw.
      const shared = flows(10 + w, 60, windowStart, "198.51.100");
      const onlyA = flows(20 + w, 50, windowStart, "203.0.113");
      const onlyB = flows(30 + w, 40, windowStart, "192.0.2");
      byCollector["core-a"].push(...shared, ...onlyA);
      byCollector["core-b"].push(...onlyB, ...shared);
      for (const [key, records] of [[made.key, [...shared, ...onlyA]], [bKey, [...onlyB, ...shared]]] as const) {
        const res = await postFlows(t.url, key, JSON.stringify(records));
        expect(res.status, await res.clone().text()).toBe(200);
      }
    }

    const res = await fetch(`${t.url}/api/v1/merge`, {
      method: "POST",
      headers: { authorization: `Bearer ${queryKey}`, "content-type": "application/json" },
      body: JSON.stringify({ name: "core-both", collectors: ["core-a", "core-b"], from: FROM, to: TO }),
    });
    expect(res.status, await res.clone().text()).toBe(201);
    answer = await res.json();
  });
  afterAll(() => t?.close());

  it("stores per window the sample one reservoir over the deduplicated union keeps: identical kept set and τ", async () => {
    expect(answer.coordinated).toBe(true);
    const merged = await storedReservoirs(t.server.db.$client, tenantId, "core-both");
    expect(merged).toHaveLength(2);
    for (const m of merged) {
      const inWindow = (list: FlowJson[]) => list.filter((r) => r.start >= m.windowStart && r.start < m.windowStart + WINDOW_MS).map(toRecord);
      const distinct = new Map<string, FlowRecord>();
      for (const r of [...inWindow(byCollector["core-a"]), ...inWindow(byCollector["core-b"])]) distinct.set(keyOf(r), r);
      expect(distinct.size).toBe(150);
      const union = coordinatedSample([...distinct.values()], K);
      expect(m.k).toBe(K);
      expect(m.tau).toBe(union.tau);
      expect(m.kept.map((e) => e.priority)).toEqual(union.kept().map((e) => e.priority));
      expect(m.kept.map((e) => keyOf(e.record))).toEqual(union.kept().map((e) => keyOf(e.item)));
    }
  });

  it("reports as duplicates exactly the flows both collectors kept, and says so", async () => {
    let expectedTotal = 0;
    for (const w of answer.windows) {
      const start = Date.parse(w.windowStart);
      const inWindow = (list: FlowJson[]) => list.filter((r) => r.start >= start && r.start < start + WINDOW_MS).map(toRecord);
      const keptA = new Set(coordinatedSample(inWindow(byCollector["core-a"]), K).kept().map((e) => keyOf(e.item)));
      const keptB = coordinatedSample(inWindow(byCollector["core-b"]), K).kept().map((e) => keyOf(e.item));
      const both = keptB.filter((key) => keptA.has(key)).length;
      expect(w.duplicatesDropped).toBe(both);
      expectedTotal += both;
      // The exact count cannot fall below the distinct flows (150) nor exceed what the two collectors saw (110 + 100).
      expect(w.records).toBeGreaterThanOrEqual(150);
      expect(w.records).toBeLessThanOrEqual(210);
    }
    expect(answer.totals.duplicatesDropped).toBe(expectedTotal);
    expect(answer.totals.duplicatesDropped).toBeGreaterThan(0);
    expect(answer.note).toContain(`Deduplicated: ${expectedTotal} flows kept by more than one collector were counted once`);
    const [row] = (await t.server.db.$client.execute({ sql: "SELECT coordinated, duplicates_dropped FROM merges WHERE tenant_id = ?", args: [tenantId] })).rows;
    expect(row).toMatchObject({ coordinated: 1, duplicates_dropped: expectedTotal });
  });

  it("stores exact records, bytes and packets: what both collectors received, less the copies both kept, counted once", async () => {
    // Computed in the test from the records it sent: each collector's exact counters are the sums
    // of what it received; a flow both collectors kept (the same coordinated draw, so the same
    // priority, in both samples) reaches the merge twice and is counted once, so its records,
    // bytes and packets come off once. Flows only one collector kept, or neither, are counted in
    // both inputs' sums and stay (the merge cannot see them: the documented upper bound).
    const merged = await storedReservoirs(t.server.db.$client, tenantId, "core-both");
    expect(merged).toHaveLength(2);
    const total = { records: 0, bytes: 0n, packets: 0n };
    for (const m of merged) {
      const inWindow = (list: FlowJson[]) => list.filter((r) => r.start >= m.windowStart && r.start < m.windowStart + WINDOW_MS);
      const received = [...inWindow(byCollector["core-a"]), ...inWindow(byCollector["core-b"])];
      const keptA = new Set(coordinatedSample(inWindow(byCollector["core-a"]).map(toRecord), K).kept().map((e) => keyOf(e.item)));
      const keptBoth = coordinatedSample(inWindow(byCollector["core-b"]).map(toRecord), K)
        .kept()
        .filter((e) => keptA.has(keyOf(e.item)))
        .map((e) => e.item);
      // Some copies were kept by both, so the subtraction is exercised in every window.
      expect(keptBoth.length).toBeGreaterThan(0);
      const sum = (list: { bytes: number | bigint; packets: number | bigint }[], field: "bytes" | "packets") =>
        list.reduce((s, r) => s + BigInt(r[field]), 0n);
      const expected = {
        records: received.length - keptBoth.length,
        bytes: sum(received, "bytes") - sum(keptBoth, "bytes"),
        packets: sum(received, "packets") - sum(keptBoth, "packets"),
      };
      expect({ records: m.records, bytes: m.bytes, packets: m.packets }).toEqual(expected);
      // The merge's answer states the same exact record count for the window.
      const stated = answer.windows.find((w) => Date.parse(w.windowStart) === m.windowStart);
      expect(stated?.records).toBe(expected.records);
      total.records += expected.records;
      total.bytes += expected.bytes;
      total.packets += expected.packets;
    }
    expect(answer.totals.records).toBe(total.records);
    // An estimate by the merge's name reports the same exact counters, summed over its windows.
    const res = await fetch(`${t.url}/api/v1/estimate?from=${FROM}&to=${TO}&collectors=core-both`, { headers: { authorization: `Bearer ${queryKey}` } });
    const body = (await res.json()) as EstimateAnswer;
    expect(body.exact).toEqual({ records: total.records, bytes: Number(total.bytes), packets: Number(total.packets) });
  });

  it("answers estimates by the merge's name", async () => {
    const res = await fetch(`${t.url}/api/v1/estimate?from=${FROM}&to=${TO}&collectors=core-both`, { headers: { authorization: `Bearer ${queryKey}` } });
    expect(res.status).toBe(200);
    const body = (await res.json()) as EstimateAnswer;
    expect(body.collectors).toEqual(["core-both"]);
    expect(body.kept).toBe(2 * K);
  });
});
