// Ingest over HTTP on loopback against (a) the ceiling of parsing and
// validating the same bodies with the server's own machinery (its parse-worker
// pool, the same size and concurrency) and (b) keeping every record in a plain table.
import { mkdtempSync, rmSync } from "node:fs";
import { Agent } from "node:http";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { closeDb, createDb } from "~/db/client.server";
import { parseEnv } from "~/env.server";
import type { FlowRecord } from "~/flow/record";
import { readFlowBatch } from "~/ingest/body.server";
import { ParsePool } from "~/ingest/parse-pool.server";
import { createLogger } from "~/logger.server";
import { benchRecords, toNdjsonLine } from "./data";
import { insertAll, openKeepAll } from "./keep-all";
import { benchDatabase, databaseBytes, postBody, startChildServer } from "./util";

export interface IngestBench {
  records: number;
  batch: number;
  httpRecordsPerSecond: number;
  ceilingRecordsPerSecond: number;
  keepAllRecordsPerSecond: number;
  weirBytes: number;
  keepAllBytes: number;
  windows: number;
  parseWorkers: number;
}

const LIMITS = { maxBodyBytes: 64 * 1024 * 1024, maxRecords: 100_000 };

export async function benchIngest(total = 2_000_000, batch = 5_000, concurrency = 2): Promise<IngestBench> {
  const dir = mkdtempSync(join(tmpdir(), "weir-bench-ingest-"));
  try {
    const weirPath = join(dir, "weir.db");
    const { db, key } = await benchDatabase(weirPath, "ingest");

    // One hour of traffic ending now (12 five-minute windows, ~167k records each), in time order.
    const now = Date.now();
    const records: FlowRecord[] = [...benchRecords(total, now - 3600_000, now, 2026)];
    const bodies: string[] = [];
    for (let i = 0; i < total; i += batch) bodies.push(records.slice(i, i + batch).map(toNdjsonLine).join("\n"));

    // Ceiling: the route's own body reading, parsing and validation through a pool of the
    // size the server gets (the same environment), at the same concurrency; nothing else.
    const parseWorkers = parseEnv(process.env).INGEST_PARSE_WORKERS;
    console.log(`parse workers          ${parseWorkers}   (INGEST_PARSE_WORKERS; the server and the ceiling alike)`);
    const pool = await ParsePool.start({ size: parseWorkers, logger: createLogger("silent") });
    let nextCeiling = 0;
    const ceilingStart = performance.now();
    await Promise.all(
      Array.from({ length: concurrency }, async () => {
        while (nextCeiling < bodies.length) {
          const body = bodies[nextCeiling++];
          const request = new Request("http://bench.invalid/api/v1/flows", { method: "POST", headers: { "content-type": "application/x-ndjson" }, body });
          await readFlowBatch(request, LIMITS, pool);
        }
      }),
    );
    const ceilingSeconds = (performance.now() - ceilingStart) / 1000;
    await pool.close();

    closeDb(db);
    const server = await startChildServer(`file:${weirPath}`);
    let next = 0;
    const encoded = bodies.map((b) => Buffer.from(b, "utf8"));
    const agent = new Agent({ keepAlive: true, maxSockets: concurrency });
    const headers = { authorization: `Bearer ${key}`, "content-type": "application/x-ndjson" };
    const httpStart = performance.now();
    await Promise.all(
      Array.from({ length: concurrency }, async () => {
        while (next < encoded.length) {
          const res = await postBody(`${server.url}/api/v1/flows`, encoded[next++], headers, agent);
          if (res.status !== 200) throw new Error(`ingest answered ${res.status}: ${res.text}`);
        }
      }),
    );
    const httpSeconds = (performance.now() - httpStart) / 1000;
    agent.destroy();
    await server.stop();

    const keepAll = await openKeepAll(join(dir, "keep-all.db"));
    const keepStart = performance.now();
    for (let i = 0; i < total; i += batch) await insertAll(keepAll, records.slice(i, i + batch));
    const keepSeconds = (performance.now() - keepStart) / 1000;
    await keepAll.execute("PRAGMA wal_checkpoint(TRUNCATE)");
    keepAll.close();

    const check = await createDb(`file:${weirPath}`);
    await check.$client.execute("PRAGMA wal_checkpoint(TRUNCATE)");
    const windows = Number((await check.$client.execute("SELECT COUNT(*) AS n FROM reservoirs")).rows[0].n);
    closeDb(check);

    return {
      records: total,
      batch,
      httpRecordsPerSecond: total / httpSeconds,
      ceilingRecordsPerSecond: total / ceilingSeconds,
      keepAllRecordsPerSecond: total / keepSeconds,
      weirBytes: databaseBytes(weirPath),
      keepAllBytes: databaseBytes(join(dir, "keep-all.db")),
      windows,
      parseWorkers,
    };
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}
