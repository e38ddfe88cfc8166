import { spawn, type ChildProcess } from "node:child_process";
import { statSync } from "node:fs";
import { request, type Agent } from "node:http";
import { fileURLToPath } from "node:url";
import { createInterface } from "node:readline";
import { createApiKey } from "~/auth/api-keys.server";
import { createDb } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import { createTenant, ensureCollector } from "~/tenants.server";

/**
 * Starts scripts/bench/child.ts on the given database (development mode unless `production`,
 * which needs build/); resolves with its URL once it listens.
 */
export function startChildServer(
  databaseUrl: string,
  options: { collect?: boolean; production?: boolean; warm?: boolean } = {},
): Promise<{ child: ChildProcess; url: string; udpPort?: number; stop: () => Promise<void> }> {
  const child = spawn(process.execPath, ["--import", "tsx", fileURLToPath(new URL("./child.ts", import.meta.url))], {
    env: {
      ...process.env,
      DATABASE_URL: databaseUrl,
      BENCH_COLLECT: options.collect ? "1" : "0",
      BENCH_PRODUCTION: options.production ? "1" : "0",
      BENCH_WARM: options.warm === false ? "0" : "1",
    },
    stdio: ["ignore", "pipe", "inherit"],
  });
  const stop = () =>
    new Promise<void>((resolve) => {
      if (child.exitCode !== null) return resolve();
      child.once("exit", () => resolve());
      child.kill("SIGTERM");
    });
  return new Promise((resolve, reject) => {
    child.once("exit", (code) => reject(new Error(`benchmark server exited with ${code}`)));
    createInterface({ input: child.stdout! }).on("line", (line) => {
      const ready = /^WEIR_BENCH_READY (\S+)(?: (\d+))?$/.exec(line);
      if (ready) {
        child.removeAllListeners("exit");
        resolve({ child, url: ready[1], udpPort: ready[2] === undefined ? undefined : Number(ready[2]), stop });
      }
    });
  });
}

/** Bytes a SQLite database occupies on disk (main file plus WAL, if any). */
export function databaseBytes(path: string): number {
  let total = 0;
  for (const file of [path, `${path}-wal`]) {
    try {
      total += statSync(file).size;
    } catch {
      // no WAL file
    }
  }
  return total;
}

export function percentile(sorted: number[], p: number): number {
  const i = Math.min(sorted.length - 1, Math.max(0, Math.ceil(p * sorted.length) - 1));
  return sorted[i];
}

export const fmt = (n: number, digits = 1) => n.toLocaleString("en-US", { maximumFractionDigits: digits });

/**
 * POSTs a pre-encoded body with node:http over a keep-alive connection. The load generator
 * shares the machine's cores with the server; fetch spends about 2 µs of CPU per record of
 * a 5 000-record batch (measured), node:http with ready bytes a tenth of that, so the figure
 * is the server's rather than the client's.
 */
export function postBody(url: string, body: Buffer, headers: Record<string, string>, agent: Agent): Promise<{ status: number; text: string }> {
  return new Promise((resolve, reject) => {
    const req = request(url, { method: "POST", agent, headers: { ...headers, "content-length": String(body.length) } }, (res) => {
      const chunks: Buffer[] = [];
      res.on("data", (c: Buffer) => chunks.push(c));
      res.on("end", () => resolve({ status: res.statusCode ?? 0, text: Buffer.concat(chunks).toString("utf8") }));
      res.on("error", reject);
    });
    req.on("error", reject);
    req.end(body);
  });
}

/** A fresh Weir database with one tenant (k = 1024, 5-minute windows), one collector and a key of the given scope. */
export async function benchDatabase(path: string, scopes: "ingest" | "query") {
  const db = await createDb(`file:${path}`);
  await runMigrations(db);
  const tenant = await createTenant(db, { slug: "bench", sampleSize: 1024, windowSeconds: 300 });
  const collector = await ensureCollector(db, tenant.id, "edge-1");
  const { key } = await createApiKey(db, { tenantId: tenant.id, collectorId: collector.id, scopes });
  return { db, tenant, collector, key };
}
