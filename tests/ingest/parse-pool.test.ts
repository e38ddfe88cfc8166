import { mkdtempSync, rmSync } from "node:fs";
import { availableParallelism, tmpdir } from "node:os";
import { join } from "node:path";
import { gzipSync } from "node:zlib";
import type { AppLoadContext } from "react-router";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ApiError, createApiKey } from "~/auth/api-keys.server";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import { EnvError, parseEnv } from "~/env.server";
import { parseFlowBatch } from "~/flow/record";
import { readFlowBatch, type BodyLimits } from "~/ingest/body.server";
import { decodeKeptRow, KEPT_ROW_BYTES } from "~/ingest/kept-codec";
import { ReservoirManager } from "~/ingest/manager.server";
import { ParsePool, ParsePoolFull } from "~/ingest/parse-pool.server";
import { createLogger } from "~/logger.server";
import { action } from "~/routes/api.v1.flows";
import { createTenant, ensureCollector } from "~/tenants.server";
import { startTestServer } from "../helpers/server";

// The parse-worker pool must answer exactly what parsing in the calling thread answers
// (INGEST_PARSE_WORKERS=0), records and errors alike, survive a worker that dies, and
// stop its threads on shutdown.

const logger = createLogger("silent");
const LIMITS: BodyLimits = { maxBodyBytes: 4096, maxRecords: 10 };
// Matches the body tests/ingest/crashing-parse-worker.mjs dies on.
const CRASH_BODY = '"crash the parse worker"';

/** Invented records on documentation addresses (RFC 5737, RFC 3849), every field form the API accepts. */
const records = [
  { src: "192.0.2.1", dst: "198.51.100.2", proto: 6, sport: 443, dport: 51000, bytes: 1500, packets: 1 },
  { sourceIPv6Address: "2001:db8::7", destinationIPv6Address: "2001:db8:1::9", protocolIdentifier: 17, octetDeltaCount: "18446744073709551615", packetDeltaCount: 3 },
  { src: "203.0.113.5", dst: "2001:db8::1", proto: 1, bytes: 84, packets: 1, start: "2026-05-01T02:00:00.250+02:00", end: 1_777_600_000_000 },
  { src: "192.0.2.9", dst: "192.0.2.10", proto: 6, bytes: 40, packets: 1, ingressInterface: 3, egressInterface: 4_294_967_295, bgpSourceAsNumber: 64496, bgpDestinationAsNumber: null },
];

function post(body: BodyInit, headers: Record<string, string> = {}): Request {
  return new Request("http://weir.invalid/api/v1/flows", { method: "POST", headers: { "content-type": "application/json", ...headers }, body });
}

/** The packed rows readFlowBatch gives for a request, as plain numbers. */
async function accepted(pool: ParsePool, request: () => Request) {
  const { rows, count } = (await readFlowBatch(request(), LIMITS, pool)).packed;
  return { rows: [...rows], count };
}

/** The API error readFlowBatch throws for a request, as plain data. */
async function refusal(pool: ParsePool, request: () => Request, limits = LIMITS) {
  try {
    await readFlowBatch(request(), limits, pool);
  } catch (error) {
    if (!(error instanceof ApiError)) throw error;
    const extra = error.extra as { details?: { index: number; path: string; message: string }[]; invalidCount?: number };
    return { status: error.status, code: error.code, message: error.message, extra };
  }
  throw new Error("expected the batch to be refused");
}

describe("parse pool", () => {
  let workers: ParsePool;
  let inline: ParsePool;
  beforeAll(async () => {
    [workers, inline] = await Promise.all([ParsePool.start({ size: 2, logger }), ParsePool.start({ size: 0, logger })]);
  });
  afterAll(async () => {
    await Promise.all([workers?.close(), inline?.close()]);
  });

  it("gives the records the calling thread gives, for JSON, NDJSON and gzip", async () => {
    const json = JSON.stringify(records);
    const ndjson = `${records.map((r) => JSON.stringify(r)).join("\r\n")}\n\n`;
    const bodies: [string, () => Request][] = [
      ["JSON", () => post(json)],
      ["NDJSON", () => post(ndjson, { "content-type": "application/x-ndjson" })],
      ["gzip JSON", () => post(gzipSync(json), { "content-encoding": "gzip" })],
      ["gzip NDJSON", () => post(gzipSync(ndjson), { "content-type": "application/x-ndjson; charset=utf-8", "content-encoding": "gzip" })],
      ["empty array", () => post("[]")],
    ];
    const expected = parseFlowBatch(records);
    if (!expected.ok) throw new Error("test records must be valid");
    for (const [name, request] of bodies) {
      const pooled = await accepted(workers, request);
      expect(pooled, name).toEqual(await accepted(inline, request));
      const want = name === "empty array" ? [] : expected.records;
      expect(pooled.count, name).toBe(want.length);
      expect(pooled.rows.length, name).toBe(want.length * KEPT_ROW_BYTES);
      want.forEach((record, i) => {
        expect(decodeKeptRow(new Uint8Array(pooled.rows), i * KEPT_ROW_BYTES), `${name} #${i}`).toEqual({ priority: 0, weight: 0, record });
      });
    }
  });

  it("answers every refusal with the same status, code, message and details as the calling thread", async () => {
    const invalid = [records[0], { ...records[0], dport: 70000 }, { ...records[0], src: "192.0.2.256" }, { ...records[0], sprot: 53 }, records[1]];
    const cases: [string, number, string, () => Request][] = [
      ["content type", 415, "unsupported_media_type", () => post("[]", { "content-type": "text/csv" })],
      ["content encoding", 415, "unsupported_media_type", () => post("[]", { "content-encoding": "br" })],
      ["body too large", 413, "payload_too_large", () => post(" ".repeat(LIMITS.maxBodyBytes + 1))],
      // 64 KiB of spaces in about 100 bytes of gzip: only decompression can notice.
      ["gzip bomb", 413, "payload_too_large", () => post(gzipSync(Buffer.alloc(65_536, " ")), { "content-encoding": "gzip" })],
      ["too many records, JSON", 413, "too_many_records", () => post(JSON.stringify(Array(11).fill(records[0])))],
      ["too many records, NDJSON", 413, "too_many_records", () => post(Array(11).fill(JSON.stringify(records[0])).join("\n"), { "content-type": "application/x-ndjson" })],
      ["corrupt gzip", 400, "invalid_body", () => post("not gzip at all", { "content-encoding": "gzip" })],
      ["not UTF-8", 400, "invalid_body", () => post(new Uint8Array([0x5b, 0xff, 0x5d]))],
      ["not an array", 400, "invalid_body", () => post(JSON.stringify(records[0]))],
      ["not JSON", 400, "invalid_json", () => post("[{")],
      ["NDJSON line not JSON", 400, "invalid_records", () => post(`${JSON.stringify(records[0])}\n{oops\n`, { "content-type": "application/x-ndjson" })],
      ["invalid records", 400, "invalid_records", () => post(JSON.stringify(invalid))],
    ];
    for (const [name, status, code, request] of cases) {
      const pooled = await refusal(workers, request);
      expect(pooled, name).toEqual(await refusal(inline, request));
      expect(pooled, name).toMatchObject({ status, code });
    }
    const { extra } = await refusal(workers, () => post(JSON.stringify(invalid)));
    expect(extra.invalidCount).toBe(3);
    expect(extra.details?.map((d) => [d.index, d.path])).toEqual([
      [1, "dport"],
      [2, "src"],
      [3, "sprot"],
    ]);
  });

  it("lists at most 100 details from a worker too, counting every invalid record", async () => {
    const limits = { maxBodyBytes: 1 << 20, maxRecords: 1000 };
    const request = () => post(JSON.stringify(Array(150).fill({ ...records[0], proto: 300 })));
    const pooled = await refusal(workers, request, limits);
    expect(pooled).toEqual(await refusal(inline, request, limits));
    expect(pooled).toMatchObject({ status: 400, code: "invalid_records", extra: { invalidCount: 150 } });
    expect(pooled.extra.details).toHaveLength(100);
  });

  it("does not detach memory a body shares with other views", async () => {
    // A transfer moves the whole ArrayBuffer, not just the body's view of it.
    const text = new TextEncoder().encode(JSON.stringify([records[0]]));
    const memory = new ArrayBuffer(text.byteLength + 16);
    const body = new Uint8Array(memory, 0, text.byteLength);
    body.set(text);
    const neighbour = new Uint8Array(memory, text.byteLength);
    neighbour.fill(7);
    expect(await workers.parse({ body: body as Uint8Array<ArrayBuffer>, ndjson: false, gzip: false, limits: LIMITS })).toMatchObject({ ok: true, packed: { count: 1 } });
    expect(memory.byteLength).toBe(text.byteLength + 16);
    expect([...neighbour]).toEqual(Array(16).fill(7));
  });
});

describe("a parse worker that dies", () => {
  let dir: string;
  let db: Db;
  let pool: ParsePool;
  let context: AppLoadContext;
  let key: string;

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-parse-pool-"));
    db = await createDb(`file:${join(dir, "weir.db")}`);
    await runMigrations(db);
    const tenant = await createTenant(db, { slug: "crash", sampleSize: 16, windowSeconds: 300 });
    const collector = await ensureCollector(db, tenant.id, "edge-1");
    ({ key } = await createApiKey(db, { tenantId: tenant.id, collectorId: collector.id, scopes: "ingest" }));
    pool = await ParsePool.start({ size: 1, logger, workerUrl: new URL("./crashing-parse-worker.mjs", import.meta.url) });
    const env = parseEnv({ NODE_ENV: "test" });
    // Only what the ingest route reads; the route is called directly so the crashing worker can be injected.
    context = { db, env, logger, manager: new ReservoirManager(db, { node: "test" }), parsePool: pool } as Partial<AppLoadContext> as AppLoadContext;
  });
  afterAll(async () => {
    await pool?.close();
    if (db) closeDb(db);
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  const ingest = (body: string) =>
    action({ request: post(body, { authorization: `Bearer ${key}` }), context, params: {} } as Parameters<typeof action>[0]);

  it("fails only its own request, with a 500, and the next batch is parsed by a new worker", async () => {
    const crashed = await ingest(CRASH_BODY);
    expect(crashed.status).toBe(500);
    expect((await crashed.json()).error.code).toBe("internal_error");

    const next = await ingest(JSON.stringify(records));
    expect(next.status).toBe(200);
    expect((await next.json()).accepted).toBe(records.length);
    expect(pool.workers).toBe(1);
    const stored = await db.$client.execute("SELECT SUM(records) AS n FROM reservoirs");
    expect(Number(stored.rows[0].n)).toBe(records.length);
  });
});

describe("a full parse queue", () => {
  const limits: BodyLimits = { maxBodyBytes: 1 << 20, maxRecords: 1000 };
  const job = (text: string) => ({ body: new TextEncoder().encode(text), ndjson: false, gzip: false, limits });
  const body = JSON.stringify(records);

  it("refuses a body beyond its byte limit while the worker is busy, and takes bodies again once it drains", async () => {
    const pool = await ParsePool.start({ size: 1, logger, maxQueuedBytes: Math.floor(body.length * 1.5) });
    try {
      // The first goes to the idle worker, the second waits (the queue was empty), the third would pass the limit.
      const first = pool.parse(job(body));
      const second = pool.parse(job(body));
      const third = pool.parse(job(body));
      await expect(third).rejects.toBeInstanceOf(ParsePoolFull);
      expect((await first).ok).toBe(true);
      expect((await second).ok).toBe(true);
      expect((await pool.parse(job(body))).ok).toBe(true);
    } finally {
      await pool.close();
    }
  });

  it("answers 503 with Retry-After and stores nothing", async () => {
    const dir = mkdtempSync(join(tmpdir(), "weir-parse-full-"));
    const db = await createDb(`file:${join(dir, "weir.db")}`);
    try {
      await runMigrations(db);
      const tenant = await createTenant(db, { slug: "full", sampleSize: 16, windowSeconds: 300 });
      const collector = await ensureCollector(db, tenant.id, "edge-1");
      const { key } = await createApiKey(db, { tenantId: tenant.id, collectorId: collector.id, scopes: "ingest" });
      // A parser whose queue is full, as the pool is under overload.
      const full = { parse: () => Promise.reject(new ParsePoolFull(1024)) };
      const context = { db, env: parseEnv({ NODE_ENV: "test" }), logger, manager: new ReservoirManager(db, { node: "test" }), parsePool: full } as unknown as AppLoadContext;
      const response = await action({ request: post(body, { authorization: `Bearer ${key}` }), context, params: {} } as Parameters<typeof action>[0]);
      expect(response.status).toBe(503);
      expect(response.headers.get("retry-after")).toBe("1");
      expect((await response.json()).error).toMatchObject({ code: "overloaded", message: expect.stringContaining("nothing of this batch was stored") });
      expect((await db.$client.execute("SELECT count(*) FROM reservoirs")).rows[0][0]).toBe(0);
    } finally {
      closeDb(db);
      rmSync(dir, { recursive: true, force: true });
    }
  });
});

describe("parse workers and the server", () => {
  it("sizes the pool from INGEST_PARSE_WORKERS: one per CPU but one by default (at least 1), 0 for the calling thread", () => {
    expect(parseEnv({}).INGEST_PARSE_WORKERS).toBe(Math.max(1, availableParallelism() - 1));
    expect(parseEnv({ INGEST_PARSE_WORKERS: "0" }).INGEST_PARSE_WORKERS).toBe(0);
    expect(() => parseEnv({ INGEST_PARSE_WORKERS: "-1" })).toThrow(EnvError);
  });

  it("stops the workers on shutdown", async () => {
    const t = await startTestServer({ env: { INGEST_PARSE_WORKERS: "2" } });
    const pool = t.server.parsePool;
    expect(pool.workers).toBe(2);
    await t.close();
    expect(pool.workers).toBe(0);
    await expect(pool.parse({ body: new Uint8Array(2), ndjson: false, gzip: false, limits: LIMITS })).rejects.toThrow(/closed/);
  });
});
