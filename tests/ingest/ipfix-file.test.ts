// IPFIX files (RFC 5655) posted to POST /api/v1/flows with Content-Type application/ipfix: the
// same key, limits, idempotency, atomicity and error format as JSON batches.
import { gzipSync } from "node:zlib";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ipfixMessage } from "../../scripts/ipfix/encode";
import { ipfixMessages, sums, testFlows, V4_FIELDS } from "../collect/helpers";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

const T0 = Date.UTC(2026, 10, 30, 10, 0, 0);
const IPFIX = { "content-type": "application/ipfix" };

function concat(parts: Uint8Array[]): Uint8Array<ArrayBuffer> {
  const out = new Uint8Array(parts.reduce((n, p) => n + p.byteLength, 0));
  let at = 0;
  for (const p of parts) {
    out.set(p, at);
    at += p.byteLength;
  }
  return out;
}

async function exact(t: TestServer, tenantId: number) {
  const { rows } = await t.server.db.$client.execute({
    sql: "SELECT coalesce(sum(records), 0) AS records, coalesce(sum(CAST(bytes AS INTEGER)), 0) AS bytes, coalesce(sum(CAST(packets AS INTEGER)), 0) AS packets FROM reservoirs WHERE tenant_id = ?",
    args: [tenantId],
  });
  return { records: Number(rows[0].records), bytes: BigInt(String(rows[0].bytes)), packets: BigInt(String(rows[0].packets)) };
}

describe("POST /api/v1/flows with an IPFIX file", () => {
  let t: TestServer;
  beforeAll(async () => {
    t = await startTestServer({ env: { INGEST_MAX_RECORDS: "500" } });
  });
  afterAll(async () => {
    await t?.close();
  });

  it("stores the file's flows exactly (the test's own sums of what it encoded), with a summary and source ipfix-file", async () => {
    const x = await tenantWithKey(t.server, "file-ok", { sampleSize: 1024 });
    const flows = testFlows(300, 11, T0);
    const res = await postFlows(t.url, x.key, concat(ipfixMessages(flows, 5, 25)), IPFIX);
    expect(res.status).toBe(200);
    const body = (await res.json()) as { accepted: number; ipfix: { messages: number; records: number; unusable: number } };
    expect(body.accepted).toBe(300);
    expect(body.ipfix).toMatchObject({ messages: 12, records: 300, unusable: 0 });
    expect(await exact(t, x.tenant.id)).toEqual(sums(flows));
    const { rows } = await t.server.db.$client.execute({ sql: "SELECT DISTINCT source FROM ingest_batches WHERE tenant_id = ?", args: [x.tenant.id] });
    expect(rows.map((r) => r.source)).toEqual(["ipfix-file"]);
  });

  it("takes gzip, and applies a retry with the same Idempotency-Key once", async () => {
    const x = await tenantWithKey(t.server, "file-gzip", { sampleSize: 1024 });
    const flows = testFlows(100, 12, T0);
    const body = gzipSync(concat(ipfixMessages(flows, 5)));
    const headers = { ...IPFIX, "content-encoding": "gzip", "idempotency-key": "file-1" };
    const first = await postFlows(t.url, x.key, body, headers);
    const again = await postFlows(t.url, x.key, body, headers);
    expect(first.status).toBe(200);
    expect(((await again.json()) as { duplicate: boolean }).duplicate).toBe(true);
    expect(await exact(t, x.tenant.id)).toEqual(sums(flows));
  });

  it("refuses a truncated file whole, naming the message and byte offset (RFC 7011 §3.1 message length)", async () => {
    const x = await tenantWithKey(t.server, "file-cut");
    const file = concat(ipfixMessages(testFlows(60, 13, T0), 5));
    const res = await postFlows(t.url, x.key, file.slice(0, file.byteLength - 10), IPFIX);
    expect(res.status).toBe(400);
    const { error } = (await res.json()) as { error: { code: string; details: { index: number; path: string; message: string }[] } };
    expect(error.code).toBe("invalid_ipfix");
    expect(error.details[0].index).toBe(2);
    expect(error.details[0].message).toMatch(/truncated/);
    expect((await exact(t, x.tenant.id)).records).toBe(0);
  });

  it("refuses data whose template the file never defines (RFC 5655 §8), storing nothing", async () => {
    const x = await tenantWithKey(t.server, "file-orphan");
    const flows = testFlows(10, 14, T0);
    const orphan = ipfixMessage({
      exportTime: Math.floor(T0 / 1000),
      sequence: 0,
      domain: 5,
      sets: [{ templateId: 256, fields: V4_FIELDS, records: flows.map((f) => [f.src, f.dst, f.sport, f.dport, f.proto, f.bytes, f.packets, f.start, f.end]) }],
    });
    const res = await postFlows(t.url, x.key, orphan as Uint8Array<ArrayBuffer>, IPFIX);
    expect(res.status).toBe(400);
    const { error } = (await res.json()) as { error: { code: string; details: { path: string; message: string }[] } };
    expect(error.code).toBe("invalid_ipfix");
    expect(error.details.at(-1)!.message).toMatch(/template/);
    expect((await exact(t, x.tenant.id)).records).toBe(0);
  });

  it("refuses what is not IPFIX: NetFlow v9, or text", async () => {
    const x = await tenantWithKey(t.server, "file-wrong");
    const v9 = new Uint8Array(24);
    v9[1] = 9;
    const res = await postFlows(t.url, x.key, v9, IPFIX);
    expect(res.status).toBe(400);
    expect(((await res.json()) as { error: { message: string } }).error.message).toMatch(/NetFlow v9/);
    const text = await postFlows(t.url, x.key, "hello, this is not a file of IPFIX messages", IPFIX);
    expect(text.status).toBe(400);
  });

  it("answers 413 naming INGEST_MAX_RECORDS for a file with more flows than the limit", async () => {
    const x = await tenantWithKey(t.server, "file-big");
    const res = await postFlows(t.url, x.key, concat(ipfixMessages(testFlows(501, 15, T0), 5)), IPFIX);
    expect(res.status).toBe(413);
    expect(((await res.json()) as { error: { limit: string } }).error.limit).toBe("INGEST_MAX_RECORDS");
    expect((await exact(t, x.tenant.id)).records).toBe(0);
  });

  it("needs a key with the ingest scope, as JSON does", async () => {
    const x = await tenantWithKey(t.server, "file-scope", { scope: "query" });
    const res = await postFlows(t.url, x.key, concat(ipfixMessages(testFlows(5, 16, T0), 5)), IPFIX);
    expect(res.status).toBe(403);
  });
});
