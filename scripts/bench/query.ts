// Query latency over one day of data (288 five-minute windows × k = 1024) against
// an exact SUM over a keep-everything table of the same records; then the same day
// rolled up into hourly windows, and the same questions again.
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { closeDb, createDb } from "~/db/client.server";
import type { FlowRecord } from "~/flow/record";
import { ReservoirManager } from "~/ingest/manager.server";
import { parsePrefix, prefixRange } from "~/net/prefix";
import { packClosedWindows } from "~/query/pack.server";
import { runRetention } from "~/retention/rollup.server";
import { readStoredWindows } from "~/samples/store.server";
import { benchRecords } from "./data";
import { insertAll, openKeepAll } from "./keep-all";
import { benchDatabase, databaseBytes, percentile, startChildServer } from "./util";

export interface QueryBench {
  records: number;
  windows: number;
  keptRecords: number;
  buildSeconds: number;
  /** The first question of a new server process on the day (production build, warm-up off), the day's windows packed (packed_columns). */
  firstQueryMs: number;
  /** Baseline: the same first question before packing, every kept record read as its own kept_records row. */
  firstQueryUnpackedMs: number;
  /** Packing the day's closed windows (packClosedWindows, as the server's timer does): seconds, and bytes written. */
  packSeconds: number;
  packedBytes: number;
  /** The database on disk before packing (weirBytes is after). */
  unpackedWeirBytes: number;
  /** The same first question against the development server (Vite compiles the route on it): what the demo served before. */
  firstQueryDevelopmentMs: number;
  p50Ms: number;
  p95Ms: number;
  exactP50Ms: number;
  exactRuns: number;
  weirBytes: number;
  keepAllBytes: number;
  /** |estimate − exact| / stdError of the checked query: the answer must be right, not just fast. */
  zOfCheckedQuery: number;
  rollUp: RollUpBench;
}

/** The same day rolled up into hourly windows (runRetention as of 30 days and an hour later). */
export interface RollUpBench {
  /** Reading and decoding every reservoir of the day (readStoredWindows): the floor of any roll-up. */
  readSeconds: number;
  rollUpSeconds: number;
  hourlyWindows: number;
  keptAfter: number;
  /** The exact byte total of the day, before and after: must be equal. */
  exactBytesBefore: string;
  exactBytesAfter: string;
  p50Ms: number;
  zOfCheckedQuery: number;
  /** The hourly sample size K the roll-up used (the tenant's k unless set). */
  hourlySampleSize: number;
  /**
   * Standard error after / before the roll-up for the same questions (each source block of
   * BLOCKS, then the whole day): how much wider every interval gets. `widening` is their
   * geometric mean.
   */
  stdErrorRatios: number[];
  widening: number;
}

const BATCH = 50_000;
const BLOCKS = ["192.0.2.0/24", "198.51.100.0/24", "203.0.113.0/24", "192.0.2.0/25", "198.51.100.128/25"];

export async function benchQuery(total = 10_000_000, queries = 50, exactRuns = 5, hourlySampleSize?: number): Promise<QueryBench> {
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

    const development = await firstQuery(`file:${weirPath}`, key, dayStart, false);
    // The cold question on the rows as ingest left them, then on the day packed as the
    // server's packing timer leaves closed windows (app/query/pack.server.ts).
    const unpackedWeirBytes = databaseBytes(weirPath);
    const firstQueryUnpackedMs = await firstQuery(`file:${weirPath}`, key, dayStart, true);
    const packing = await createDb(`file:${weirPath}`);
    const packStart = performance.now();
    const packed = await packClosedWindows(packing, { now: Date.now() });
    const packSeconds = (performance.now() - packStart) / 1000;
    await packing.$client.execute("PRAGMA wal_checkpoint(TRUNCATE)");
    closeDb(packing);
    const packedWeirBytes = databaseBytes(weirPath);
    const before = await querySession(`file:${weirPath}`, key, dayStart, queries);

    // The exact answer to the same question: a full scan of every record.
    const exact: number[] = [];
    let exactTotal = 0;
    for (let i = 0; i < exactRuns; i++) {
      const { low, high } = prefixRange(parsePrefix(BLOCKS[1]));
      const t0 = performance.now();
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

    // Roll the day up into hourly windows, as retention does after N = 30 days, and ask again.
    const rolled = await createDb(`file:${weirPath}`);
    if (hourlySampleSize !== undefined) {
      await rolled.$client.execute({ sql: "UPDATE tenants SET hourly_sample_size = ? WHERE id = ?", args: [hourlySampleSize, tenant.id] });
    }
    const usedK = Number((await rolled.$client.execute({ sql: "SELECT coalesce(hourly_sample_size, sample_size) FROM tenants WHERE id = ?", args: [tenant.id] })).rows[0][0]);
    let t0 = performance.now();
    await readStoredWindows(rolled.$client, tenant.id, { from: dayStart, to: dayStart + 86_400_000 });
    const readSeconds = (performance.now() - t0) / 1000;
    t0 = performance.now();
    const [report] = await runRetention({ db: rolled, node: "node-1" }, dayStart + 86_400_000 + 30 * 86_400_000 + 3_600_000, { tenant: tenant.slug });
    const rollUpSeconds = (performance.now() - t0) / 1000;
    const keptAfter = Number((await rolled.$client.execute("SELECT COUNT(*) FROM kept_records")).rows[0][0]);
    await rolled.$client.execute("PRAGMA wal_checkpoint(TRUNCATE)");
    closeDb(rolled);
    const after = await querySession(`file:${weirPath}`, key, dayStart, queries);

    return {
      records: total,
      windows: Number(stats.windows),
      keptRecords: Number(stats.kept),
      buildSeconds,
      firstQueryMs: before.firstQueryMs,
      firstQueryUnpackedMs,
      packSeconds,
      packedBytes: packed.bytes,
      unpackedWeirBytes,
      firstQueryDevelopmentMs: development,
      p50Ms: percentile(before.latencies, 0.5),
      p95Ms: percentile(before.latencies, 0.95),
      exactP50Ms: percentile(exact, 0.5),
      exactRuns,
      weirBytes: packedWeirBytes,
      keepAllBytes: databaseBytes(join(dir, "keep-all.db")),
      zOfCheckedQuery: Math.abs(before.checked.estimate - exactTotal) / before.checked.stdError,
      rollUp: {
        readSeconds,
        rollUpSeconds,
        hourlyWindows: report.rolledUp.hourlyWindows,
        keptAfter,
        exactBytesBefore: String(before.checked.exact.bytes),
        exactBytesAfter: String(after.checked.exact.bytes),
        p50Ms: percentile(after.latencies, 0.5),
        zOfCheckedQuery: Math.abs(after.checked.estimate - exactTotal) / after.checked.stdError,
        hourlySampleSize: usedK,
        stdErrorRatios: after.stdErrors.map((se, i) => se / before.stdErrors[i]),
        widening: Math.exp(after.stdErrors.reduce((s, se, i) => s + Math.log(se / before.stdErrors[i]), 0) / after.stdErrors.length),
      },
    };
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

interface EstimateReply {
  estimate: number;
  stdError: number;
  exact: { bytes: number | string };
}

async function askDay(url: string, key: string, dayStart: number, block: string | null): Promise<EstimateReply> {
  const res = await fetch(`${url}/api/v1/estimate`, {
    method: "POST",
    headers: { authorization: `Bearer ${key}`, "content-type": "application/json" },
    body: JSON.stringify({ from: dayStart, to: dayStart + 86_400_000, where: block === null ? {} : { src: [block] }, groupBy: "dst", prefixLength: 24, top: 10 }),
  });
  if (res.status !== 200) throw new Error(`estimate answered ${res.status}: ${await res.text()}`);
  return (await res.json()) as EstimateReply;
}

/** The first question's latency on a new server process (warm-up off), in ms. */
async function firstQuery(databaseUrl: string, key: string, dayStart: number, production: boolean): Promise<number> {
  const server = await startChildServer(databaseUrl, { production, warm: false });
  try {
    const t0 = performance.now();
    await askDay(server.url, key, dayStart, BLOCKS[0]);
    return performance.now() - t0;
  } finally {
    await server.stop();
  }
}

/**
 * Starts a server on the database (a new process serving the production build, its warm-up
 * of recent windows off, so the first question reads cold), asks one question per block
 * (CIDR filter, top destination /24s over the day) `queries` times after a first, cold one,
 * asks the checked question, stops.
 */
async function querySession(databaseUrl: string, key: string, dayStart: number, queries: number) {
  const server = await startChildServer(databaseUrl, { production: true, warm: false });
  try {
    const ask = (block: string | null) => askDay(server.url, key, dayStart, block);
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
    // The same questions before and after a roll-up, for the widening figure: each block, then the whole day.
    const stdErrors: number[] = [];
    for (const block of [...BLOCKS, null]) stdErrors.push((await ask(block)).stdError);
    return { firstQueryMs, latencies: latencies.sort((a, b) => a - b), checked, stdErrors };
  } finally {
    await server.stop();
  }
}
