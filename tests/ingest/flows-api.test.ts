import { gzipSync } from "node:zlib";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { revokeApiKey } from "~/auth/api-keys.server";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// POST /api/v1/flows against a real server on a loopback port with a temporary SQLite file.

const flow = (i: number, extra: Record<string, unknown> = {}) => ({
  src: `192.0.2.${i % 250}`,
  dst: `198.51.100.${(i * 7) % 250}`,
  proto: 6,
  sport: 40000 + (i % 1000),
  dport: 443,
  bytes: 100 + i,
  packets: 1 + (i % 5),
  ...extra,
});
const flows = (n: number, extra: Record<string, unknown> = {}) => Array.from({ length: n }, (_, i) => flow(i, extra));

// Every test runs twice: bodies parsed by the pool of parse workers (the default), and on
// the main thread (INGEST_PARSE_WORKERS=0); the answers must not differ.
describe.each([
  ["with parse workers", {}],
  ["with INGEST_PARSE_WORKERS=0", { INGEST_PARSE_WORKERS: "0" }],
])("%s", (_, parsing: Record<string, string>) => {
  describe("POST /api/v1/flows", () => {
    let t: TestServer;
    let a: Awaited<ReturnType<typeof tenantWithKey>>;
    const sql = (q: string, args: (string | number)[] = []) => t.server.db.$client.execute({ sql: q, args });
    const counters = async (tenantId: number) =>
      (await sql("SELECT COALESCE(SUM(records), 0) AS records, GROUP_CONCAT(bytes) AS bytes FROM reservoirs WHERE tenant_id = ?", [tenantId])).rows[0];

    beforeAll(async () => {
      t = await startTestServer({ env: parsing });
      a = await tenantWithKey(t.server, "alpha", { sampleSize: 16 });
    });
    afterAll(() => t?.close());

    describe("authentication and scopes", () => {
      it("answers 401 without a key, with a malformed, an unknown or a revoked key", async () => {
        const body = JSON.stringify(flows(1));
        const none = await fetch(`${t.url}/api/v1/flows`, { method: "POST", headers: { "content-type": "application/json" }, body });
        expect(none.status).toBe(401);
        expect((await none.json()).error.code).toBe("unauthenticated");
        expect((await postFlows(t.url, "not-a-key", body)).status).toBe(401);
        expect((await postFlows(t.url, "weir_00000000_AAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAA", body)).status).toBe(401);
        const { key } = await keyFor(t.server, a.tenant.id, "to-revoke", "ingest");
        expect((await postFlows(t.url, key, body)).status).toBe(200);
        await revokeApiKey(t.server.db, key.split("_").slice(0, 2).join("_"));
        const revoked = await postFlows(t.url, key, body);
        expect(revoked.status).toBe(401);
        expect((await revoked.json()).error.message).toMatch(/revoked/);
      });

      it("answers 403 to a key without the ingest scope", async () => {
        const { key } = await keyFor(t.server, a.tenant.id, "reader", "query");
        const res = await postFlows(t.url, key, JSON.stringify(flows(1)));
        expect(res.status).toBe(403);
        expect((await res.json()).error.message).toMatch(/needs 'ingest'/);
      });
    });

    describe("atomic batches", () => {
      it("rejects the whole batch when any record is invalid, listing index, field and reason, and stores nothing", async () => {
        const b = await tenantWithKey(t.server, "atomic");
        const batch = [...flows(3), { ...flow(3), dport: 70000 }, { ...flow(4), src: "192.0.2.256" }, flow(5)];
        const res = await postFlows(t.url, b.key, JSON.stringify(batch));
        expect(res.status).toBe(400);
        const { error } = await res.json();
        expect(error.code).toBe("invalid_records");
        expect(error.invalidCount).toBe(2);
        expect(error.details.map((d: { index: number; path: string }) => [d.index, d.path])).toEqual([
          [3, "dport"],
          [4, "src"],
        ]);
        expect(Number((await counters(b.tenant.id)).records)).toBe(0);
        expect((await sql("SELECT COUNT(*) AS n FROM ingest_batches WHERE tenant_id = ?", [b.tenant.id])).rows[0].n).toBe(0);
      });

      it("lists at most 100 details but counts every invalid record", async () => {
        const res = await postFlows(t.url, a.key, JSON.stringify(flows(150, { proto: 300 })));
        expect(res.status).toBe(400);
        const { error } = await res.json();
        expect(error.details).toHaveLength(100);
        expect(error.invalidCount).toBe(150);
      });

      it("rejects a body that is not a JSON array, and invalid JSON, with 400", async () => {
        const object = await postFlows(t.url, a.key, JSON.stringify(flow(1)));
        expect(object.status).toBe(400);
        expect((await object.json()).error.message).toMatch(/JSON array/);
        const broken = await postFlows(t.url, a.key, "[{");
        expect(broken.status).toBe(400);
        expect((await broken.json()).error.code).toBe("invalid_json");
      });
    });

    describe("encodings", () => {
      it("accepts NDJSON and gzip, alone and together", async () => {
        const b = await tenantWithKey(t.server, "encodings");
        const ndjson = flows(40).map((r) => JSON.stringify(r)).join("\n") + "\n";
        const plain = await postFlows(t.url, b.key, ndjson, { "content-type": "application/x-ndjson" });
        expect(plain.status).toBe(200);
        expect((await plain.json()).accepted).toBe(40);
        const zipped = await postFlows(t.url, b.key, gzipSync(ndjson), { "content-type": "application/x-ndjson", "content-encoding": "gzip" });
        expect((await zipped.json()).accepted).toBe(40);
        const zippedJson = await postFlows(t.url, b.key, gzipSync(JSON.stringify(flows(10))), { "content-encoding": "gzip" });
        expect((await zippedJson.json()).accepted).toBe(10);
        expect(Number((await counters(b.tenant.id)).records)).toBe(90);
      });

      it("names the NDJSON line that is not JSON and stores nothing", async () => {
        const b = await tenantWithKey(t.server, "ndjson-bad");
        const res = await postFlows(t.url, b.key, `${JSON.stringify(flow(1))}\n{oops\n`, { "content-type": "application/x-ndjson" });
        expect(res.status).toBe(400);
        const { error } = await res.json();
        expect(error.details[0]).toMatchObject({ index: 1 });
        expect(error.details[0].message).toMatch(/line 2 is not valid JSON/);
        expect(Number((await counters(b.tenant.id)).records)).toBe(0);
      });

      it("answers 415 to other content types and encodings, and to corrupt gzip 400", async () => {
        expect((await postFlows(t.url, a.key, "x", { "content-type": "text/csv" })).status).toBe(415);
        expect((await postFlows(t.url, a.key, "x", { "content-encoding": "br" })).status).toBe(415);
        const corrupt = await postFlows(t.url, a.key, "not gzip at all", { "content-encoding": "gzip" });
        expect(corrupt.status).toBe(400);
      });

      it("answers GET with 405 and an Allow header", async () => {
        const res = await fetch(`${t.url}/api/v1/flows`);
        expect(res.status).toBe(405);
        expect(res.headers.get("allow")).toBe("POST");
      });
    });

    describe("idempotency", () => {
      it("applies a retried batch once and answers the retry the same with duplicate: true", async () => {
        const b = await tenantWithKey(t.server, "retry");
        const body = JSON.stringify(flows(25));
        const first = await postFlows(t.url, b.key, body, { "idempotency-key": "batch-0001" });
        const second = await postFlows(t.url, b.key, body, { "idempotency-key": "batch-0001" });
        const one = await first.json();
        const two = await second.json();
        expect(one.duplicate).toBe(false);
        expect(two).toEqual({ ...one, duplicate: true });
        expect(Number((await counters(b.tenant.id)).records)).toBe(25);
        const other = await postFlows(t.url, b.key, body, { "idempotency-key": "batch-0002" });
        expect((await other.json()).duplicate).toBe(false);
        expect(Number((await counters(b.tenant.id)).records)).toBe(50);
      });

      it("keeps idempotency keys per tenant", async () => {
        const b = await tenantWithKey(t.server, "retry-b");
        const c = await tenantWithKey(t.server, "retry-c");
        const body = JSON.stringify(flows(5));
        expect((await (await postFlows(t.url, b.key, body, { "idempotency-key": "same" })).json()).duplicate).toBe(false);
        expect((await (await postFlows(t.url, c.key, body, { "idempotency-key": "same" })).json()).duplicate).toBe(false);
      });

      it("rejects a malformed Idempotency-Key", async () => {
        const res = await postFlows(t.url, a.key, JSON.stringify(flows(1)), { "idempotency-key": "has space" });
        expect(res.status).toBe(400);
      });
    });

    describe("windows", () => {
      it("puts each record in the window of its start time, late ones included, and undated ones in the receive window", async () => {
        const b = await tenantWithKey(t.server, "windows", { windowSeconds: 300 });
        const yesterday = Date.now() - 86_400_000;
        const lateStart = Math.floor(yesterday / 300_000) * 300_000;
        const res = await postFlows(t.url, b.key, JSON.stringify([flow(1, { start: yesterday, end: yesterday + 1000 }), flow(2)]));
        const answer = await res.json();
        expect(answer.windows).toHaveLength(2);
        expect(answer.windows[0]).toMatchObject({ start: new Date(lateStart).toISOString(), end: new Date(lateStart + 300_000).toISOString(), records: 1 });
        const rows = (await sql("SELECT window_start, records FROM reservoirs WHERE tenant_id = ? ORDER BY window_start", [b.tenant.id])).rows;
        expect(rows.map((r) => Number(r.window_start))).toEqual([lateStart, Math.floor(Date.now() / 300_000) * 300_000]);
      });

      it("keeps exact counters, bytes summed beyond 2^64 − 1 without loss (RFC 7012 unsigned64 counters)", async () => {
        const b = await tenantWithKey(t.server, "big-counters");
        const max = "18446744073709551615";
        await postFlows(t.url, b.key, JSON.stringify([flow(1, { bytes: max }), flow(2, { bytes: max }), flow(3, { bytes: 5 })]));
        const row = (await sql("SELECT records, bytes FROM reservoirs WHERE tenant_id = ?", [b.tenant.id])).rows[0];
        expect(Number(row.records)).toBe(3);
        expect(row.bytes).toBe((2n * 18446744073709551615n + 5n).toString());
      });
    });

    it("stores records only under the key's own tenant and collector", async () => {
      const b = await tenantWithKey(t.server, "isolated", { collector: "edge-1" });
      await postFlows(t.url, b.key, JSON.stringify(flows(7)));
      const rows = (await sql("SELECT DISTINCT tenant_id, collector_id FROM reservoirs WHERE tenant_id = ? OR collector_id = ?", [b.tenant.id, b.collector.id])).rows;
      expect(rows.map((r) => [Number(r.tenant_id), Number(r.collector_id)])).toEqual([[b.tenant.id, b.collector.id]]);
    });
  });

  describe("ingest limits", () => {
    let t: TestServer;
    let key: string;
    beforeAll(async () => {
      t = await startTestServer({ env: { ...parsing, INGEST_MAX_BODY_BYTES: "65536", INGEST_MAX_RECORDS: "100" } });
      ({ key } = await tenantWithKey(t.server, "limits"));
    });
    afterAll(() => t?.close());

    it("answers 413 naming INGEST_MAX_RECORDS for too many records, JSON and NDJSON", async () => {
      const json = await postFlows(t.url, key, JSON.stringify(flows(101)));
      expect(json.status).toBe(413);
      expect((await json.json()).error).toMatchObject({ code: "too_many_records", limit: "INGEST_MAX_RECORDS" });
      const nd = await postFlows(t.url, key, flows(101).map((r) => JSON.stringify(r)).join("\n"), { "content-type": "application/x-ndjson" });
      expect(nd.status).toBe(413);
      expect((await postFlows(t.url, key, JSON.stringify(flows(100)))).status).toBe(200);
    });

    it("answers 413 naming INGEST_MAX_BODY_BYTES for a large body", async () => {
      const res = await postFlows(t.url, key, JSON.stringify(flows(90, { padding: undefined })).padEnd(70_000, " "));
      expect(res.status).toBe(413);
      expect((await res.json()).error).toMatchObject({ code: "payload_too_large", limit: "INGEST_MAX_BODY_BYTES" });
    });

    it("reads off a body far over the limit, so the client gets its 413 instead of a reset connection", async () => {
      // 4 MiB against a 64 KiB limit, streamed without Content-Length (chunked) and with it.
      const big = JSON.stringify(flows(90)).padEnd(4 * 1024 * 1024, " ");
      for (const body of [big, new Blob([big]).stream()]) {
        const res = await fetch(`${t.url}/api/v1/flows`, {
          method: "POST",
          headers: { authorization: `Bearer ${key}`, "content-type": "application/json" },
          body,
          duplex: "half",
        } as RequestInit);
        expect(res.status).toBe(413);
        expect((await res.json()).error.code).toBe("payload_too_large");
      }
    });

    it("stops a gzip bomb at the limit after decompression and stays up", async () => {
      // 64 MiB of spaces compresses to about 64 KiB of gzip; the limit is 64 KiB decompressed.
      const bomb = gzipSync(Buffer.alloc(64 * 1024 * 1024, " "), { level: 9 });
      expect(bomb.length).toBeLessThan(65_536);
      const res = await postFlows(t.url, key, bomb, { "content-encoding": "gzip" });
      expect(res.status).toBe(413);
      expect((await res.json()).error.message).toMatch(/after decompression/);
      expect((await fetch(`${t.url}/healthz`)).status).toBe(200);
    });
  });
});
