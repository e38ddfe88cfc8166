// Starts a real Weir server on a free loopback port with a temporary SQLite file.
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { createApiKey, scopesFor } from "~/auth/api-keys.server";
import { parseEnv } from "~/env.server";
import { startServer, type StartServerOptions, type WeirServer } from "~/server/app.server";
import type { UniformSource } from "~/sampling/uniform";
import { createTenant, ensureCollector } from "~/tenants.server";

export interface TestServer {
  server: WeirServer;
  url: string;
  dir: string;
  close(): Promise<void>;
}

export async function startTestServer(
  options: { env?: Record<string, string>; uniform?: UniformSource; collect?: StartServerOptions["collect"]; now?: () => number } = {},
): Promise<TestServer> {
  const dir = mkdtempSync(join(tmpdir(), "weir-test-"));
  const server = await startServer({
    env: parseEnv({ NODE_ENV: "development", HOST: "127.0.0.1", PORT: "0", DATABASE_URL: `file:${join(dir, "weir.db")}`, LOG_LEVEL: "silent",
      // Off: a roll-up against the clock would delete the past-dated data tests post. Retention tests run it explicitly.
      RETENTION_INTERVAL_MINUTES: "0",
      // Off too: calibration tests run the checks explicitly.
      CALIBRATION_INTERVAL_MINUTES: "0",
      // Off too: tests that read packed windows pack them explicitly (app/query/pack.server.ts).
      PACK_INTERVAL_SECONDS: "0",
      // Accepted however old: tests post invented records dated years back, and retention is off (above).
      INGEST_REFUSE_EXPIRED: "false",
      ...options.env }),
    uniform: options.uniform,
    now: options.now,
    // Listeners off unless a test asks for them (on free ports): fixed ports would collide between test files.
    collect: { ipfixUdpPort: null, netflowUdpPort: null, ipfixTcpPort: null, ...options.collect },
  });
  return {
    server,
    url: server.url,
    dir,
    close: async () => {
      await server.close();
      rmSync(dir, { recursive: true, force: true });
    },
  };
}

/** A tenant with one collector and a key for it. */
export async function tenantWithKey(
  server: WeirServer,
  slug: string,
  options: { collector?: string; scope?: "ingest" | "query" | "both"; sampleSize?: number; windowSeconds?: number; weightAttribute?: "bytes" | "packets" } = {},
) {
  const tenant = await createTenant(server.db, { slug, sampleSize: options.sampleSize ?? 64, windowSeconds: options.windowSeconds ?? 300, weightAttribute: options.weightAttribute });
  const collector = await ensureCollector(server.db, tenant.id, options.collector ?? "edge-1");
  const { key, prefix } = await createApiKey(server.db, { tenantId: tenant.id, collectorId: collector.id, scopes: scopesFor(options.scope ?? "both") });
  return { tenant, collector, key, prefix };
}

/** A key for another collector of an existing tenant. */
export async function keyFor(server: WeirServer, tenantId: number, collectorName: string, scope: "ingest" | "query" | "both" = "both") {
  const collector = await ensureCollector(server.db, tenantId, collectorName);
  const { key } = await createApiKey(server.db, { tenantId, collectorId: collector.id, scopes: scopesFor(scope) });
  return { collector, key };
}

export function postFlows(url: string, key: string, body: BodyInit, headers: Record<string, string> = {}) {
  return fetch(`${url}/api/v1/flows`, {
    method: "POST",
    headers: { authorization: `Bearer ${key}`, "content-type": "application/json", ...headers },
    body,
  });
}
