// The demo seed: invented data, so what is checked is that it keeps its own promises
// (documentation number space only, heavy tails, idempotence, working demo keys) and that
// it reaches the database through the ingest path intact.
import { execFile } from "node:child_process";
import { createHash } from "node:crypto";
import { existsSync, mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { fileURLToPath } from "node:url";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { authenticateKey, createApiKey } from "~/auth/api-keys.server";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import { flowRecordToJson, parseFlowRecord, type FlowRecord } from "~/flow/record";
import { decodeKeptRow } from "~/ingest/kept-codec";
import { formatAddress, isIPv4Mapped } from "~/net/address";
import { parsePrefix, prefixContains } from "~/net/prefix";
import { createTenant, ensureCollector, findTenantBySlug } from "~/tenants.server";
import { DEMO_RIVERLINE_KEY, DEMO_TRIBUTARY_KEY } from "../../scripts/demo-keys";
import { SITES, dayOfFlows, flowsPerDay } from "../../scripts/scenario";
import { DEMO_MERGE, SCENARIO_SEED, SeedError, seedDemo, type SeedResult } from "../../scripts/seed";

const ROOT = fileURLToPath(new URL("../..", import.meta.url));

// A fixed end of the seeded day (noon UTC), so the afternoon and night events both fall inside it.
const NOW = Date.UTC(2026, 2, 10, 12, 0, 0);
const NODE = "seed-test";

// RFC 5737 (IPv4) and RFC 3849 (IPv6) documentation prefixes; RFC 5398 documentation AS numbers.
const DOCUMENTATION_PREFIXES = ["192.0.2.0/24", "198.51.100.0/24", "203.0.113.0/24", "2001:db8::/32"].map(parsePrefix);
const AS_LOW = 64496;
const AS_HIGH = 64511;

// A full seed takes about 10 s on an idle 2-core machine and this file runs two; the
// margin is for a busy CI runner.
const SEED_TIMEOUT_MS = 180_000;

const isDocumentationAddress = (address: Uint8Array) => DOCUMENTATION_PREFIXES.some((p) => prefixContains(p, address));

function bearer(key: string): Request {
  return new Request("http://weir.test/api/v1/estimate", { headers: { authorization: `Bearer ${key}` } });
}

async function counts(db: Db): Promise<Record<string, unknown>> {
  const one = async (sql: string) => (await db.$client.execute(sql)).rows[0][0];
  return {
    tenants: await one("SELECT count(*) FROM tenants"),
    collectors: await one("SELECT count(*) FROM collectors"),
    keys: await one("SELECT count(*) FROM api_keys"),
    reservoirs: await one("SELECT count(*) FROM reservoirs"),
    kept: await one("SELECT count(*) FROM kept_records"),
    records: await one("SELECT sum(records) FROM reservoirs"),
    batches: await one("SELECT count(*) FROM ingest_batches"),
  };
}

/** A digest of every demo reservoir and all it keeps, independent of row ids (a reset renumbers them). */
async function sampleDigest(db: Db): Promise<string> {
  const rows = await db.$client.execute(
    `SELECT t.slug, c.name, r.window_start, r.k, r.tau, r.records, r.bytes, r.packets, k.*
       FROM reservoirs r
       JOIN tenants t ON t.id = r.tenant_id
       JOIN collectors c ON c.id = r.collector_id
       LEFT JOIN kept_records k ON k.reservoir_id = r.id
      ORDER BY t.slug, c.name, r.window_start, k.seq`,
  );
  const hash = createHash("sha256");
  for (const row of rows.rows) {
    for (const [column, value] of Object.entries(row)) {
      if (column === "reservoir_id") continue;
      hash.update(`${column}=${value instanceof ArrayBuffer ? Buffer.from(value).toString("hex") : String(value)};`);
    }
  }
  return hash.digest("hex");
}

describe("demo seed", () => {
  let dir: string;
  let db: Db;
  let first: SeedResult;
  let firstDigest: string;

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-seed-"));
    db = await createDb(`file:${join(dir, "weir.db")}`);
    await runMigrations(db);
    // A tenant of someone else's, which the demo seed must never touch.
    const bystander = await createTenant(db, { slug: "bystander", sampleSize: 64 });
    const collector = await ensureCollector(db, bystander.id, "router-1");
    await createApiKey(db, { tenantId: bystander.id, collectorId: collector.id, scopes: "ingest" });
    first = await seedDemo(db, { node: NODE, now: NOW });
    firstDigest = await sampleDigest(db);
  }, SEED_TIMEOUT_MS);

  afterAll(() => {
    if (db) closeDb(db);
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it("ingests every flow of the scenario's day, exactly counted per collector", async () => {
    expect(first.status).toBe("seeded");
    const stored = await db.$client.execute(
      "SELECT t.slug, c.name, sum(r.records) AS records FROM reservoirs r JOIN tenants t ON t.id = r.tenant_id JOIN collectors c ON c.id = r.collector_id GROUP BY t.slug, c.name",
    );
    const byCollector = new Map(stored.rows.map((row) => [`${row.slug}/${row.name}`, Number(row.records)]));
    for (const site of SITES) {
      expect(byCollector.get(`${site.tenant}/${site.collector}`), site.collector).toBe(flowsPerDay(site));
    }
    const total = first.collectors.reduce((sum, c) => sum + c.records, 0);
    // The scale the scenario promises: a few hundred thousand records.
    expect(total).toBeGreaterThan(200_000);
    expect(total).toBeLessThan(1_000_000);
  });

  it("merges riverline's two PoPs into the demo merge, with its provenance and exactly summed counters", async () => {
    const merge = await db.$client.execute(
      "SELECT m.inputs, m.from_ms, m.to_ms, m.created_by, m.windows, c.kind FROM merges m JOIN collectors c ON c.id = m.collector_id WHERE c.name = ?",
      [DEMO_MERGE],
    );
    expect(merge.rows).toHaveLength(1);
    const { inputs, from_ms: from, to_ms: to, created_by: createdBy, kind } = merge.rows[0];
    expect(JSON.parse(String(inputs))).toEqual(["pop-north", "pop-south"]);
    expect(createdBy).toBe("seed (demo data)");
    expect(kind).toBe("merge");
    // The merge of disjoint streams sees every record of its inputs (DLT 2007 merge rule: seen counts add).
    const sums = await db.$client.execute({
      sql: "SELECT c.name, sum(r.records) FROM reservoirs r JOIN collectors c ON c.id = r.collector_id WHERE c.name IN ('pop-north', 'pop-south', ?) AND r.window_start >= ? AND r.window_start < ? GROUP BY c.name",
      args: [DEMO_MERGE, Number(from), Number(to)],
    });
    const by = new Map(sums.rows.map((row) => [String(row[0]), Number(row[1])]));
    expect(by.get(DEMO_MERGE)).toBe(by.get("pop-north")! + by.get("pop-south")!);
  });

  it("packs every closed window for cold queries (one window length after its end), and no open one", async () => {
    const windows = await db.$client.execute({
      sql:
        "SELECT r.window_start + 2 * r.window_seconds * 1000 <= ? AS closed, p.next_seq = r.next_seq AS current FROM reservoirs r " +
        "JOIN tenants t ON t.id = r.tenant_id LEFT JOIN packed_columns p ON p.reservoir_id = r.id WHERE t.slug <> 'bystander' AND r.records > 0",
      args: [NOW],
    });
    const closed = windows.rows.filter((row) => Number(row.closed) === 1);
    expect(closed.length).toBeGreaterThan(0);
    // The rule of app/query/pack.server.ts, restated: closed windows packed at their current next_seq, open ones not at all.
    expect(closed.every((row) => Number(row.current) === 1)).toBe(true);
    expect(windows.rows.filter((row) => Number(row.closed) === 0).every((row) => row.current === null)).toBe(true);
  });

  it("does nothing when run again", async () => {
    const before = await counts(db);
    const again = await seedDemo(db, { node: NODE, now: NOW + 3600_000 });
    expect(again).toEqual({ status: "present", collectors: [] });
    expect(await counts(db)).toEqual(before);
  });

  it("reset wipes and reseeds the demo tenants only, to the very same samples", async () => {
    const bystanderBefore = await findTenantBySlug(db, "bystander");
    const before = await counts(db);
    const reseeded = await seedDemo(db, { node: NODE, now: NOW, reset: true });
    expect(reseeded.collectors).toEqual(first.collectors);
    expect(await counts(db)).toEqual(before);
    expect(await sampleDigest(db)).toBe(firstDigest);
    expect(await findTenantBySlug(db, "bystander")).toEqual(bystanderBefore);
    const bystanderKeys = await db.$client.execute({ sql: "SELECT count(*) FROM api_keys WHERE tenant_id = ?", args: [bystanderBefore!.id] });
    expect(bystanderKeys.rows[0][0]).toBe(1);
  }, SEED_TIMEOUT_MS);

  it("keeps only documentation addresses (RFC 5737, RFC 3849) and AS numbers (RFC 5398)", async () => {
    const kept = await db.$client.execute(
      "SELECT k.data FROM kept_records k JOIN reservoirs r ON r.id = k.reservoir_id JOIN tenants t ON t.id = r.tenant_id WHERE t.slug IN ('riverline', 'tributary')",
    );
    expect(kept.rows.length).toBeGreaterThan(10_000);
    let ipv6 = 0;
    for (const row of kept.rows) {
      const { record } = decodeKeptRow(new Uint8Array(row.data as ArrayBuffer));
      if (!isDocumentationAddress(record.src) || !isDocumentationAddress(record.dst)) {
        expect.fail(`kept record outside documentation space: ${formatAddress(record.src)} → ${formatAddress(record.dst)}`);
      }
      for (const as of [record.srcAs, record.dstAs]) {
        if (as === null || as < AS_LOW || as > AS_HIGH) expect.fail(`AS number ${String(as)} outside ${AS_LOW}–${AS_HIGH}`);
      }
      if (!isIPv4Mapped(record.src)) ipv6++;
    }
    // Both families are in the mix.
    expect(ipv6).toBeGreaterThan(kept.rows.length / 20);
    expect(ipv6).toBeLessThan(kept.rows.length / 2);
  });

  it("makes the demo keys authenticate with their scopes, tenants and collectors", async () => {
    for (const scope of ["ingest", "query"] as const) {
      await expect(authenticateKey(db, bearer(DEMO_RIVERLINE_KEY), scope)).resolves.toMatchObject({
        tenant: { slug: "riverline", sampleSize: 256, windowSeconds: 300 },
        collector: { name: "pop-north" },
      });
    }
    await expect(authenticateKey(db, bearer(DEMO_TRIBUTARY_KEY), "query")).resolves.toMatchObject({
      tenant: { slug: "tributary", sampleSize: 128 },
      collector: { name: "office-gw" },
    });
    await expect(authenticateKey(db, bearer(DEMO_TRIBUTARY_KEY), "ingest")).rejects.toMatchObject({ status: 403 });
  });

  it("shows the scenario's events in the exact window counters", async () => {
    const windows = async (collector: string) => {
      const rows = await db.$client.execute({
        sql: "SELECT r.window_start, r.records, CAST(r.bytes AS REAL) AS bytes FROM reservoirs r JOIN collectors c ON c.id = r.collector_id JOIN tenants t ON t.id = r.tenant_id WHERE t.slug = 'riverline' AND c.name = ?",
        args: [collector],
      });
      return new Map(rows.rows.map((row) => [Number(row.window_start), { records: Number(row.records), bytes: Number(row.bytes) }]));
    };
    const day = Date.UTC(2026, 2, 9);
    const at = (hour: number, minute: number, nextDay = false) => day + (nextDay ? 86_400_000 : 0) + (hour * 60 + minute) * 60_000;

    // DNS burst at pop-south, 14:20–14:50 UTC: 600 extra flows a minute, 3000 a window.
    const south = await windows("pop-south");
    expect(south.get(at(14, 30))!.records - south.get(at(14, 0))!.records).toBeGreaterThan(2500);
    // Night backup at pop-north, 01:30–03:30 UTC: its window outweighs the busiest evening window.
    const north = await windows("pop-north");
    expect(north.get(at(2, 0, true))!.bytes).toBeGreaterThan(3 * north.get(at(17, 0))!.bytes);
  });
});

describe("demo seed refusals", () => {
  let dir: string;
  beforeAll(() => {
    dir = mkdtempSync(join(tmpdir(), "weir-seed-refuse-"));
  });
  afterAll(() => {
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it("will not build on a tenant of a demo name that it did not finish", async () => {
    const db = await createDb(`file:${join(dir, "handmade.db")}`);
    try {
      await runMigrations(db);
      await createTenant(db, { slug: "riverline" });
      await expect(seedDemo(db, { node: NODE, now: NOW })).rejects.toThrow(SeedError);
      await expect(seedDemo(db, { node: NODE, now: NOW })).rejects.toThrow(/riverline exists but is not a complete demo seed; run with --reset/);
      expect((await db.$client.execute("SELECT count(*) FROM reservoirs")).rows[0][0]).toBe(0);
    } finally {
      closeDb(db);
    }
  });

  it("refuses to run with NODE_ENV=production, before touching the database", async () => {
    const path = join(dir, "production.db");
    const result = await new Promise<{ code: number; stderr: string }>((resolve) => {
      execFile(
        process.execPath,
        ["--import", "tsx", "scripts/seed.ts"],
        { cwd: ROOT, env: { ...process.env, NODE_ENV: "production", SESSION_SECRET: "s".repeat(32), GITHUB_CLIENT_ID: "Iv1.0123456789abcdef", GITHUB_CLIENT_SECRET: "0".repeat(40), SMTP_URL: "smtp://mail.example.com:587", DATABASE_URL: `file:${path}` } },
        (error, _stdout, stderr) => resolve({ code: error ? Number(error.code) : 0, stderr }),
      );
    });
    expect(result.code).toBe(2);
    expect(result.stderr).toMatch(/refusing to run with NODE_ENV=production: the demo keys are public/);
    expect(existsSync(path)).toBe(false);
  });
});

describe("demo scenario flows", () => {
  const day = new Map<string, FlowRecord[]>();
  beforeAll(() => {
    for (const site of SITES) day.set(site.collector, [...dayOfFlows(site, NOW, SCENARIO_SEED)].flat());
  });

  it("are heavy-tailed: at every collector the top 1% of flows carry over 20% of the bytes", () => {
    // The scenario's own design claim (flow sizes drawn from Pareto laws), not a property of real traffic checked here.
    for (const [collector, flows] of day) {
      const bytes = flows.map((f) => Number(f.bytes)).sort((a, b) => b - a);
      const total = bytes.reduce((sum, b) => sum + b, 0);
      const top = bytes.slice(0, Math.ceil(bytes.length / 100)).reduce((sum, b) => sum + b, 0);
      expect(top / total, collector).toBeGreaterThan(0.2);
    }
  });

  it("use documentation space only, mean packet sizes within 64–1500 bytes, and end by the end of the day", () => {
    const end = Math.floor(NOW / 60_000) * 60_000;
    for (const [collector, flows] of day) {
      for (const f of flows) {
        const meanPacket = Number(f.bytes) / Number(f.packets);
        if (!isDocumentationAddress(f.src) || !isDocumentationAddress(f.dst)) expect.fail(`${collector}: address outside documentation space`);
        if (f.srcAs! < AS_LOW || f.srcAs! > AS_HIGH || f.dstAs! < AS_LOW || f.dstAs! > AS_HIGH) expect.fail(`${collector}: AS outside ${AS_LOW}–${AS_HIGH}`);
        if (meanPacket < 64 || meanPacket > 1500) expect.fail(`${collector}: ${f.bytes} bytes in ${f.packets} packets`);
        if (f.start! < end - 86_400_000 || f.start! > f.end! || f.end! > end) expect.fail(`${collector}: flow time ${f.start}–${f.end} outside the day`);
      }
    }
  });

  it("mix the protocols and ports the scenario names", () => {
    const all = [...day.values()].flat();
    const protocols = new Set(all.map((f) => f.proto));
    for (const proto of [1, 6, 17, 58]) expect(protocols.has(proto), `protocol ${proto}`).toBe(true);
    const serverPorts = new Set(all.flatMap((f) => [f.sport, f.dport]));
    for (const port of [22, 53, 80, 123, 443]) expect(serverPorts.has(port), `port ${port}`).toBe(true);
    expect(all.some((f) => f.sport >= 1024 && f.dport >= 1024)).toBe(true);
  });

  it("are records the ingest API accepts", () => {
    const sample = [...day.values()].flatMap((flows) => flows.filter((_, i) => i % 50 === 0));
    for (const flow of sample) {
      const parsed = parseFlowRecord(flowRecordToJson(flow));
      if (!parsed.ok) expect.fail(JSON.stringify(parsed.issues));
      expect(parsed.record).toEqual(flow);
    }
  });
});
