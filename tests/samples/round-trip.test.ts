import { randomBytes } from "node:crypto";
import { eq } from "drizzle-orm";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { tenants } from "~/db/schema.server";
import { flowRecordToJson, type FlowRecord } from "~/flow/record";
import { windowStartOf } from "~/ingest/window";
import { coordinatedUniform, flowKeyBytes } from "~/sampling/coordinated";
import { Reservoir } from "~/sampling/reservoir";
import { seededUniform, type UniformSource } from "~/sampling/uniform";
import { parseSampleFile, type SampleWindow } from "~/samples/document";
import { benchRecords } from "../../scripts/bench/data";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// The whole path through the API: two collectors' samples are exported as sample files from
// one Weir, imported into another as two collectors, merged there, and the merged reservoir
// of every window must be exactly the priority sample of the union stream built directly
// with the same uniform draws — identical kept priorities and τ. That is the merge theorem of
// priority sampling (Duffield, Lund, Thorup, "Priority sampling for estimation of arbitrary
// subset sums", J. ACM 54(6), 2007: the sample is the k highest priorities, and τ the
// (k+1)-th, of the stream, so the top of the union is found among each part's top).

const T0 = Date.UTC(2026, 5, 10, 14);
const WINDOW_MS = 300_000;
const WINDOWS = 3;
const K = 24;
const FROM = new Date(T0).toISOString();
const TO = new Date(T0 + WINDOWS * WINDOW_MS).toISOString();
const SEED = 41;

interface Draw {
  record: FlowRecord;
  u: number;
}

/**
 * The draws the server's manager makes for one batch with a seeded source: window by window
 * in time order, records in their order within each window (app/ingest/manager.server.ts).
 */
function drawsOf(batch: FlowRecord[], uniform: UniformSource): Draw[] {
  const byWindow = new Map<number, FlowRecord[]>();
  for (const r of batch) {
    const w = windowStartOf(r.start!, 300);
    byWindow.set(w, [...(byWindow.get(w) ?? []), r]);
  }
  return [...byWindow.keys()].sort((a, b) => a - b).flatMap((w) => byWindow.get(w)!.map((record) => ({ record, u: uniform() })));
}

/** The priority sample of one window of a stream, built directly (no merge involved). */
function unionReservoir(draws: Draw[], windowStart: number): Reservoir<FlowRecord> {
  const reservoir = new Reservoir<FlowRecord>(K);
  for (const { record, u } of draws) if (windowStartOf(record.start!, 300) === windowStart) reservoir.offer(record, Number(record.bytes), u);
  return reservoir;
}

async function exportFile(url: string, key: string, collector: string): Promise<string> {
  const response = await fetch(`${url}/api/v1/samples?from=${FROM}&to=${TO}&collectors=${collector}`, { headers: { authorization: `Bearer ${key}` } });
  expect(response.status).toBe(200);
  return response.text();
}

async function importFile(url: string, key: string, collector: string, file: string): Promise<void> {
  const response = await fetch(`${url}/api/v1/samples?collector=${collector}`, {
    method: "POST",
    headers: { authorization: `Bearer ${key}`, "content-type": "application/json" },
    body: file,
  });
  expect(response.status, await response.clone().text()).toBeLessThan(300);
}

async function mergedWindows(url: string, key: string, inputs: string[]): Promise<SampleWindow[]> {
  const merge = await fetch(`${url}/api/v1/merge`, {
    method: "POST",
    headers: { authorization: `Bearer ${key}`, "content-type": "application/json" },
    body: JSON.stringify({ name: "both", collectors: inputs, from: FROM, to: TO, sampleSize: K }),
  });
  expect(merge.status, await merge.clone().text()).toBe(201);
  return parseSampleFile(await exportFile(url, key, "both")).windows;
}

const post = async (url: string, key: string, records: FlowRecord[]) => {
  const response = await postFlows(url, key, JSON.stringify(records.map(flowRecordToJson)));
  expect(response.status).toBe(200);
};

describe("export, import elsewhere, merge = the union stream's sample", () => {
  let source: TestServer;
  let target: TestServer;
  // Invented traffic on documentation space, two disjoint streams.
  const north = [...benchRecords(1500, T0, T0 + WINDOWS * WINDOW_MS, 51)];
  const south = [...benchRecords(1100, T0, T0 + WINDOWS * WINDOW_MS, 52)];

  beforeAll(async () => {
    [source, target] = await Promise.all([startTestServer({ uniform: seededUniform(SEED) }), startTestServer()]);
  }, 60_000);
  afterAll(async () => {
    await Promise.all([source?.close(), target?.close()]);
  });

  it("with independent random draws (disjoint streams)", async () => {
    const a = await tenantWithKey(source.server, "field", { collector: "north", sampleSize: K });
    const b = await keyFor(source.server, a.tenant.id, "south");
    await post(source.url, a.key, north);
    await post(source.url, b.key, south);
    const uniform = seededUniform(SEED);
    const draws = [...drawsOf(north, uniform), ...drawsOf(south, uniform)];

    const files = [await exportFile(source.url, a.key, "north"), await exportFile(source.url, a.key, "south")];
    const office = await tenantWithKey(target.server, "office", { collector: "intake", sampleSize: 256 });
    // A key imports only into its own collector: one ingest key per copy.
    await importFile(target.url, (await keyFor(target.server, office.tenant.id, "north-copy", "ingest")).key, "north-copy", files[0]);
    await importFile(target.url, (await keyFor(target.server, office.tenant.id, "south-copy", "ingest")).key, "south-copy", files[1]);
    const merged = await mergedWindows(target.url, office.key, ["north-copy", "south-copy"]);

    expect(merged.map((w) => w.windowStart)).toEqual([0, 1, 2].map((i) => T0 + i * WINDOW_MS));
    for (const window of merged) {
      const union = unionReservoir(draws, window.windowStart);
      expect(window.k).toBe(K);
      expect(window.tau).toBe(union.tau);
      expect(window.kept.map((e) => e.priority)).toEqual(union.kept().map((e) => e.priority));
      expect(window.kept.map((e) => flowRecordToJson(e.record))).toEqual(union.kept().map((e) => flowRecordToJson(e.item)));
      // Exact counters add up exactly over the two disjoint streams.
      const inWindow = [...north, ...south].filter((r) => windowStartOf(r.start!, 300) === window.windowStart);
      expect(window.exact.records).toBe(BigInt(inWindow.length));
      expect(window.exact.bytes).toBe(inWindow.reduce((s, r) => s + r.bytes, 0n));
      expect(window.exact.packets).toBe(inWindow.reduce((s, r) => s + r.packets, 0n));
    }
  });

  it("with coordinated draws, counting a flow both collectors exported once", async () => {
    const secret = randomBytes(16);
    const a = await tenantWithKey(source.server, "field-coordinated", { collector: "north", sampleSize: K });
    await source.server.db.update(tenants).set({ coordinated: true, coordinationSecret: secret.toString("hex") }).where(eq(tenants.id, a.tenant.id));
    const b = await keyFor(source.server, a.tenant.id, "south");
    // A third of the flows crossed both collectors' routers.
    const both = north.slice(0, 500);
    await post(source.url, a.key, north);
    await post(source.url, b.key, [...south, ...both]);
    const union: Draw[] = [...north, ...south].map((record) => ({ record, u: coordinatedUniform(secret, flowKeyBytes(record)) }));

    const files = [await exportFile(source.url, a.key, "north"), await exportFile(source.url, a.key, "south")];
    const office = await tenantWithKey(target.server, "office-coordinated", { collector: "intake", sampleSize: 256 });
    await target.server.db.update(tenants).set({ coordinated: true, coordinationSecret: randomBytes(16).toString("hex") }).where(eq(tenants.id, office.tenant.id));
    await importFile(target.url, (await keyFor(target.server, office.tenant.id, "north-copy", "ingest")).key, "north-copy", files[0]);
    await importFile(target.url, (await keyFor(target.server, office.tenant.id, "south-copy", "ingest")).key, "south-copy", files[1]);
    const merged = await mergedWindows(target.url, office.key, ["north-copy", "south-copy"]);

    for (const window of merged) {
      const direct = unionReservoir(union, window.windowStart);
      expect(window.tau).toBe(direct.tau);
      expect(window.kept.map((e) => e.priority)).toEqual(direct.kept().map((e) => e.priority));
      expect(window.kept.map((e) => flowRecordToJson(e.record))).toEqual(direct.kept().map((e) => flowRecordToJson(e.item)));
    }
  });
});
