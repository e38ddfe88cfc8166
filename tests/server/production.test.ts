// Native collection and IPFIX files against a production build: the route modules run from
// build/ (bundled), the listeners and parse workers from the host, as `npm start` runs them.
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { fileURLToPath } from "node:url";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { parseEnv } from "~/env.server";
import { claimExporter } from "~/exporters/claims.server";
import { startServer, type WeirServer } from "~/server/app.server";
import { productionBuild } from "../helpers/build";
import { ipfixMessages, sendUdp, sums, testFlows, waitFor } from "../collect/helpers";
import { postFlows, tenantWithKey } from "../helpers/server";

const ROOT = fileURLToPath(new URL("../..", import.meta.url));
const T0 = Date.UTC(2026, 10, 30, 10, 0, 0);

function concat(parts: Uint8Array[]): Uint8Array<ArrayBuffer> {
  const out = new Uint8Array(parts.reduce((n, p) => n + p.byteLength, 0));
  let at = 0;
  for (const p of parts) {
    out.set(p, at);
    at += p.byteLength;
  }
  return out;
}

describe("a production build", () => {
  let dir: string;
  let server: WeirServer;

  beforeAll(async () => {
    await productionBuild();
    dir = mkdtempSync(join(tmpdir(), "weir-production-"));
    server = await startServer({
      env: parseEnv({
        NODE_ENV: "production",
        HOST: "127.0.0.1",
        PORT: "0",
        DATABASE_URL: `file:${join(dir, "weir.db")}`,
        LOG_LEVEL: "silent",
        RETENTION_INTERVAL_MINUTES: "0",
        SESSION_SECRET: "production-test-session-secret-of-32-chars",
        // Never contacted here: no one signs in and no mail is sent.
        GITHUB_CLIENT_ID: "Iv1.0123456789abcdef",
        GITHUB_CLIENT_SECRET: "0".repeat(40),
        SMTP_URL: "smtp://127.0.0.1:9",
      }),
      collect: { ipfixUdpPort: 0, netflowUdpPort: null, ipfixTcpPort: null, flushMs: 50 },
      // Ingest checks flow times against this clock: an hour after the invented records, whenever the test runs.
      now: () => T0 + 3_600_000,
    });
  }, 240_000);

  afterAll(async () => {
    await server?.close();
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it("stores an IPFIX file posted as application/ipfix, and refuses a truncated one with JSON naming the byte offset", async () => {
    const x = await tenantWithKey(server, "prod-file", { sampleSize: 1024 });
    const flows = testFlows(120, 21, T0);
    const file = concat(ipfixMessages(flows, 3));
    const ok = await postFlows(server.url, x.key, file, { "content-type": "application/ipfix" });
    expect(ok.status).toBe(200);
    expect(((await ok.json()) as { accepted: number }).accepted).toBe(120);
    const cut = await postFlows(server.url, x.key, file.slice(0, 50), { "content-type": "application/ipfix" });
    expect(cut.status).toBe(400);
    expect(cut.headers.get("content-type")).toMatch(/application\/json/);
    expect(((await cut.json()) as { error: { code: string; details: { path: string }[] } }).error).toMatchObject({ code: "invalid_ipfix", details: [{ path: "byte 0" }] });
  });

  it("answers 415 naming application/ipfix among the accepted types", async () => {
    const x = await tenantWithKey(server, "prod-type");
    const res = await postFlows(server.url, x.key, "x", { "content-type": "text/plain" });
    expect(res.status).toBe(415);
    expect(((await res.json()) as { error: { message: string } }).error.message).toMatch(/application\/ipfix/);
  });

  it("feeds a claimed exporter's UDP messages to its collector", async () => {
    const x = await tenantWithKey(server, "prod-udp", { sampleSize: 1024 });
    await claimExporter(server.db, { tenantId: x.tenant.id, collector: "router", cidr: "127.0.0.6", actor: { id: null, label: "test" } });
    await server.collection.reloadClaims();
    const flows = testFlows(200, 22, T0);
    const messages = ipfixMessages(flows, 1);
    const before = server.collection.counters.datagrams;
    await sendUdp(messages, server.collection.ports.ipfixUdp!, "127.0.0.6");
    await waitFor(() => server.collection.counters.datagrams - before >= messages.length, "the datagrams");
    await server.collection.drain();
    const { rows } = await server.db.$client.execute({
      sql: "SELECT sum(records) AS records, sum(CAST(bytes AS INTEGER)) AS bytes, sum(CAST(packets AS INTEGER)) AS packets FROM reservoirs WHERE tenant_id = ?",
      args: [x.tenant.id],
    });
    expect({ records: Number(rows[0].records), bytes: BigInt(String(rows[0].bytes)), packets: BigInt(String(rows[0].packets)) }).toEqual(sums(flows));
  });
});
