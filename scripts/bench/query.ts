// Query latency over one day of data (288 five-minute windows × k = 1024) against
// an exact SUM over a keep-everything table of the same records.
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { closeDb } from "~/db/client.server";
import type { FlowRecord } from "~/flow/record";
import { ReservoirManager } from "~/ingest/manager.server";
import { parsePrefix, prefixRange } from "~/net/prefix";
import { benchRecords } from "./data";
import { insertAll, openKeepAll } from "./keep-all";
import { benchDatabase, databaseBytes, percentile, startChildServer } from "./util";

export interface QueryBench {
  records: number;
  windows: number;
  keptRecords: number;
  buildSeconds: number;
  firstQueryMs: number;
  p50Ms: number;
  p95Ms: number;
  exactP50Ms: number;
  exactRuns: number;
  weirBytes: number;
  keepAllBytes: number;
  /** |estimate − exact| / stdError of the checked query: the answer must be right, not just fast. */
  zOfCheckedQuery: number;
}

const BATCH = 50_000;
const BLOCKS = ["192.0.2.0/24", "198.51.100.0/24", "203.0.113.0/24", "192.0.2.0/25", "198.51.100.128/25"];

export async function benchQuery(total = 10_000_000, queries = 50, exactRuns = 5): Promise<QueryBench> {
  const dir = mkdtempSync(join(tmpdir(), "weir-bench-query-"));
  try {
    const weirPath = join(dir, "weir.db");
    const { db, tenant, collector, key } = await benchDatabase(weirPath, "query");
    const manager = new ReservoirManager(db, { node: "node-1" });
    const keepAll = await openKeepAll(join(dir, "keep-all.db"));

    // One UTC day, yesterday, so every window is closed.
    const dayStart = Math.floor(Date.now() / 86_400_000) * 86_400_000 - 86_400_000;
    const buildStart = performance.now();
    let batch: FlowRecord[] = [];
    const flush = async () => {
      await manager.ingest({ tenant, collector, records: batch, receivedAt: Date.now() });
      await insertAll(keepAll, batch);
      batch = [];
    };
    for (const record of benchRecords(total, dayStart, dayStart + 86_400_000, 288)) {
      batch.push(record);
      if (batch.length === BATCH) await flush();
    }
    if (batch.length > 0) await flush();
    const buildSeconds = (performance.now() - buildStart) / 1000;
    const stats = (await db.$client.execute("SELECT COUNT(*) AS windows, (SELECT COUNT(*) FROM kept_records) AS kept FROM reservoirs")).rows[0];
    await db.$client.execute("PRAGMA wal_checkpoint(TRUNCATE)");
    await keepAll.execute("PRAGMA wal_checkpoint(TRUNCATE)");
    closeDb(db);

    const server = await startChildServer(`file:${weirPath}`);
    const body = (block: string) =>
      JSON.stringify({ from: dayStart, to: dayStart + 86_400_000, where: { src: [block] }, groupBy: "dst", prefixLength: 24, top: 10 });
    const ask = async (block: string) => {
      const res = await fetch(`${server.url}/api/v1/estimate`, {
        method: "POST",
        headers: { authorization: `Bearer ${key}`, "content-type": "application/json" },
        body: body(block),
      });
      if (res.status !== 200) throw new Error(`estimate answered ${res.status}: ${await res.text()}`);
      return (await res.json()) as { estimate: number; stdError: number };
    };
    let t0 = performance.now();
    await ask(BLOCKS[0]);
    const firstQueryMs = performance.now() - t0;
    const latencies: number[] = [];
    for (let i = 0; i < queries; i++) {
      t0 = performance.now();
      await ask(BLOCKS[i % BLOCKS.length]);
      latencies.push(performance.now() - t0);
    }
    const checked = await ask(BLOCKS[1]);
    await server.stop();
    latencies.sort((a, b) => a - b);

    // The exact answer to the same question: a full scan of every record.
    const exact: number[] = [];
    let exactTotal = 0;
    for (let i = 0; i < exactRuns; i++) {
      const { low, high } = prefixRange(parsePrefix(BLOCKS[1]));
      t0 = performance.now();
      const rows = (
        await keepAll.execute({
          sql: "SELECT substr(dst, 1, 15) AS network, SUM(bytes) AS bytes FROM flows WHERE src BETWEEN ? AND ? AND start_ms >= ? AND start_ms < ? GROUP BY network ORDER BY bytes DESC",
          args: [low, high, dayStart, dayStart + 86_400_000],
        })
      ).rows;
      exact.push(performance.now() - t0);
      exactTotal = rows.reduce((s, r) => s + Number(r.bytes), 0);
    }
    keepAll.close();
    exact.sort((a, b) => a - b);

    return {
      records: total,
      windows: Number(stats.windows),
      keptRecords: Number(stats.kept),
      buildSeconds,
      firstQueryMs,
      p50Ms: percentile(latencies, 0.5),
      p95Ms: percentile(latencies, 0.95),
      exactP50Ms: percentile(exact, 0.5),
      exactRuns,
      weirBytes: databaseBytes(weirPath),
      keepAllBytes: databaseBytes(join(dir, "keep-all.db")),
      zOfCheckedQuery: Math.abs(checked.estimate - exactTotal) / checked.stdError,
    };
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}
