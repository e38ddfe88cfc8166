import jStat from "jstat";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import type { Tenant } from "~/db/schema.server";
import { parseFlowRecord, type FlowRecord } from "~/flow/record";
import { ReservoirManager } from "~/ingest/manager.server";
import type { EstimateAnswer } from "~/query/answer";
import { runRetention, type TenantRetentionReport } from "~/retention/rollup.server";
import { readStoredWindows, type StoredWindow } from "~/samples/store.server";
import { mergeStates } from "~/sampling/merge";
import { seededUniform } from "~/sampling/uniform";
import { findTenantBySlug } from "~/tenants.server";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// Roll-up retention against a real server (temporary SQLite file), fed over HTTP with invented
// records in the past and a seeded uniform source, so every run samples the same records.
//
// The roll-up merges a collector's fine windows of one hour into one hourly window by the merge
// rule of Duffield, Lund, Thorup ("Priority sampling for estimation of arbitrary subset sums",
// J. ACM 54(6), 2007): keep the k highest priorities of the union, τ = the (k+1)-th largest
// among those priorities and every input τ. The hourly sample is then a priority sample of the
// hour's records, so its estimates are unbiased (Theorem 1 of the paper) like the fine ones.

const T0 = Date.UTC(2026, 0, 5, 0, 0);
const HOUR_MS = 3_600_000;
const WINDOW_MS = 300_000;
const DAY_MS = 86_400_000;
const HOURS = 4;
const K = 64;
const Z95 = 1.959963984540054;

/** A record as posted, with the collector that sends it (not part of the body). */
interface Sent {
  collector: string;
  src: string;
  dst: string;
  sport: number;
  dport: number;
  proto: number;
  bytes: number;
  packets: number;
  start: number;
}

/**
 * Invented, bursty, heavy-tailed traffic in documentation space (RFC 5737, RFC 3849): in each
 * hour one 5-minute window of a collector is busy (`busy` records, beyond k) and the other
 * eleven are quiet (`quiet` records, within k, so kept whole). Bytes are Pareto with shape 1.2
 * (a few flows carry most bytes; common practice for modelling flow sizes).
 */
function traffic(seed: number, collector: string, options: { hours: number; busy: number; quiet: number; busyShift: number }): Sent[] {
  const u = seededUniform(seed);
  const pick = <T>(xs: readonly T[]) => xs[Math.floor(u() * xs.length)];
  const nets = ["192.0.2", "198.51.100", "203.0.113"];
  const sent: Sent[] = [];
  for (let h = 0; h < options.hours; h++) {
    for (let w = 0; w < 12; w++) {
      const windowStart = T0 + h * HOUR_MS + w * WINDOW_MS;
      const n = w === (h * 5 + options.busyShift) % 12 ? options.busy : options.quiet;
      for (let i = 0; i < n; i++) {
        const v6 = u() < 0.15;
        const host = () => 1 + Math.floor(u() * 254);
        const bytes = Math.min(2 ** 31, Math.round(64 / Math.pow(u(), 1 / 1.2)));
        const dport = pick([443, 443, 443, 80, 53, 22, 8080]);
        sent.push({
          collector,
          src: v6 ? `2001:db8:${host().toString(16)}::${host().toString(16)}` : `${pick(nets)}.${host()}`,
          dst: v6 ? `2001:db8:ff::${host().toString(16)}` : `${pick(nets)}.${host()}`,
          sport: 1024 + Math.floor(u() * 60_000),
          dport,
          proto: dport === 53 ? 17 : 6,
          bytes,
          packets: Math.max(1, Math.round(bytes / 900)),
          start: windowStart + Math.floor(u() * WINDOW_MS),
        });
      }
    }
  }
  return sent;
}

const body = (records: Sent[]) => JSON.stringify(records.map(({ collector: _, ...r }) => r));

/** The true sums of a subset of what was sent: the reference the estimates are unbiased for. */
function truth(sent: Sent[], keep: (r: Sent) => boolean) {
  let records = 0n, bytes = 0n, packets = 0n;
  for (const r of sent.filter(keep)) {
    records += 1n;
    bytes += BigInt(r.bytes);
    packets += BigInt(r.packets);
  }
  return { records, bytes, packets };
}

const asCounter = (n: bigint) => (n <= BigInt(Number.MAX_SAFE_INTEGER) ? Number(n) : n.toString());

/** Subsets chosen after sampling, with how to tell their records in what was sent. */
const RANGE = { from: new Date(T0).toISOString(), to: new Date(T0 + HOURS * HOUR_MS).toISOString() };
const SUBSETS: { name: string; request: Record<string, unknown>; keep: (r: Sent) => boolean; metric: "bytes" | "packets" | "flows" }[] = [
  { name: "all bytes", request: {}, keep: () => true, metric: "bytes" },
  { name: "source 198.51.100.0/24", request: { where: { src: "198.51.100.0/24" } }, keep: (r) => r.src.startsWith("198.51.100."), metric: "bytes" },
  { name: "destination port 443", request: { where: { dport: 443 } }, keep: (r) => r.dport === 443, metric: "bytes" },
  { name: "IPv6 destinations 2001:db8::/32, packets", request: { where: { dst: "2001:db8::/32" }, metric: "packets" }, keep: (r) => r.dst.includes(":"), metric: "packets" },
  { name: "edge-2 UDP flows", request: { where: { collectors: ["edge-2"], proto: 17 }, metric: "flows" }, keep: (r) => r.collector === "edge-2" && r.proto === 17, metric: "flows" },
];

function trueValue(sent: Sent[], subset: (typeof SUBSETS)[number]): number {
  const t = truth(sent, subset.keep);
  return Number(subset.metric === "flows" ? t.records : subset.metric === "bytes" ? t.bytes : t.packets);
}

const stateOf = (w: StoredWindow) => ({ k: w.k, tau: w.tau, seen: w.records, kept: w.kept });
const hourOf = (ms: number) => Math.floor(ms / HOUR_MS) * HOUR_MS;

describe("roll-up retention", () => {
  let t: TestServer;
  const sql = async (q: string, args: (string | number)[] = []) => (await t.server.db.$client.execute({ sql: q, args })).rows;
  let slugs = 0;

  beforeAll(async () => {
    // The timer stays off: these tests run retention themselves, at times of their choosing.
    t = await startTestServer({ uniform: seededUniform(20_070_601), env: { RETENTION_INTERVAL_MINUTES: "0" } });
  });
  afterAll(() => t?.close());

  /** A fresh tenant (k 64, 5-minute windows) with N and M days, and keys for edge-1 and edge-2. */
  async function tenant(fineDays: number, hourlyDays: number) {
    const made = await tenantWithKey(t.server, `riverline-${++slugs}`, { sampleSize: K, windowSeconds: 300 });
    await sql("UPDATE tenants SET retention_days = ?, hourly_retention_days = ? WHERE id = ?", [fineDays, hourlyDays, made.tenant.id]);
    const edge2 = await keyFor(t.server, made.tenant.id, "edge-2");
    const keys: Record<string, string> = { "edge-1": made.key, "edge-2": edge2.key };
    const tenantRow = (await findTenantBySlug(t.server.db, made.tenant.slug))!;
    const send = async (records: Sent[]) => {
      for (const collector of ["edge-1", "edge-2"]) {
        const mine = records.filter((r) => r.collector === collector);
        if (mine.length === 0) continue;
        const res = await postFlows(t.url, keys[collector], body(mine));
        expect(res.status, await res.clone().text()).toBe(200);
      }
    };
    const estimate = async (request: Record<string, unknown>): Promise<EstimateAnswer> => {
      const res = await fetch(`${t.url}/api/v1/estimate`, {
        method: "POST",
        headers: { authorization: `Bearer ${made.key}`, "content-type": "application/json" },
        body: JSON.stringify({ ...RANGE, ...request }),
      });
      expect(res.status).toBe(200);
      return (await res.json()) as EstimateAnswer;
    };
    const retain = async (now: number): Promise<TenantRetentionReport> => {
      const [report] = await runRetention({ db: t.server.db, manager: t.server.manager, node: t.server.env.NODE_ID }, now, { tenant: tenantRow.slug });
      expect(report.error).toBeUndefined();
      return report;
    };
    const windows = () =>
      sql("SELECT window_start, window_seconds, node, records FROM reservoirs WHERE tenant_id = ? ORDER BY window_seconds, window_start, collector_id, node", [tenantRow.id]);
    return { tenant: tenantRow, send, estimate, retain, windows };
  }

  describe("rolls fine windows up into hourly ones after N days", () => {
    let setup: Awaited<ReturnType<typeof tenant>>;
    let sent: Sent[];
    let fineBefore: StoredWindow[];
    const before = new Map<string, EstimateAnswer>();
    const exactBefore = new Map<string, EstimateAnswer["exact"]>();
    let report: TenantRetentionReport;

    beforeAll(async () => {
      setup = await tenant(30, 365);
      sent = [
        ...traffic(11, "edge-1", { hours: HOURS, busy: 1000, quiet: 4, busyShift: 0 }),
        ...traffic(12, "edge-2", { hours: HOURS, busy: 1000, quiet: 4, busyShift: 7 }),
      ];
      await setup.send(sent);

      // A second node sampled some of edge-1's records of the second hour on its own:
      // its reservoirs sit beside node-1's and roll up with them.
      const nodeB = new ReservoirManager(t.server.db, { node: "node-b", uniform: seededUniform(5) });
      const extra = traffic(13, "edge-1", { hours: 2, busy: 0, quiet: 3, busyShift: 0 }).filter((r) => r.start >= T0 + HOUR_MS);
      const [collector] = await sql("SELECT id, name FROM collectors WHERE tenant_id = ? AND name = 'edge-1'", [setup.tenant.id]);
      const records: FlowRecord[] = extra.map(({ collector: _, ...r }) => {
        const parsed = parseFlowRecord(r);
        if (!parsed.ok) throw new Error(JSON.stringify(parsed.issues));
        return parsed.record;
      });
      await nodeB.ingest({ tenant: setup.tenant, collector: { id: Number(collector.id), name: "edge-1" }, records, receivedAt: T0 });
      sent.push(...extra);

      fineBefore = await readStoredWindows(t.server.db.$client, setup.tenant.id, { from: T0, to: T0 + HOURS * HOUR_MS });
      for (const subset of SUBSETS) before.set(subset.name, await setup.estimate(subset.request));
      for (const collectors of [[], ["edge-1"], ["edge-2"]]) exactBefore.set(collectors.join(), (await setup.estimate({ where: { collectors } })).exact);

      // Every hour ended 30 days before this, none 365 days before.
      report = await setup.retain(T0 + HOURS * HOUR_MS + 30 * DAY_MS);
    });

    it("reports what it merged and leaves one hourly window per collector and hour, written by this node", async () => {
      const hourly = await readStoredWindows(t.server.db.$client, setup.tenant.id, { from: T0, to: T0 + HOURS * HOUR_MS, windowSeconds: 3600 });
      expect(report).toMatchObject({
        tenant: setup.tenant.slug,
        fineDays: 30,
        hourlyDays: 365,
        rolledUp: { hours: HOURS, fineWindows: fineBefore.length, hourlyWindows: 2 * HOURS, kept: hourly.reduce((n, w) => n + w.kept.length, 0) },
        deleted: { windows: 0, kept: 0 },
      });
      expect(fineBefore.some((w) => w.node === "node-b")).toBe(true);
      const rows = await setup.windows();
      expect(rows).toHaveLength(2 * HOURS);
      for (const row of rows) expect(row).toMatchObject({ window_seconds: 3600, node: t.server.env.NODE_ID });
      const ledger = await sql("SELECT actor, detail FROM audit_log WHERE tenant_id = ? AND action = 'retention.run'", [setup.tenant.id]);
      expect(ledger).toHaveLength(1);
      expect(ledger[0].actor).toBe("retention");
      expect(JSON.parse(String(ledger[0].detail))).toMatchObject({ hoursRolledUp: HOURS, fineWindowsMerged: fineBefore.length, hourlyWindowsWritten: 2 * HOURS, windowsDeleted: 0 });
    });

    it("keeps the exact counters exactly, per collector and in total, equal to the records sent", async () => {
      for (const collectors of [[], ["edge-1"], ["edge-2"]]) {
        const after = (await setup.estimate({ where: { collectors } })).exact;
        expect(after, collectors.join()).toEqual(exactBefore.get(collectors.join()));
        const sums = truth(sent, (r) => collectors.length === 0 || collectors.includes(r.collector));
        expect(after, collectors.join()).toEqual({ records: asCounter(sums.records), bytes: asCounter(sums.bytes), packets: asCounter(sums.packets) });
      }
    });

    it("writes each hourly window as the DLT 2007 merge of that hour's fine windows: same kept priorities and τ", async () => {
      const hourly = await readStoredWindows(t.server.db.$client, setup.tenant.id, { from: T0, to: T0 + HOURS * HOUR_MS, windowSeconds: 3600 });
      expect(hourly).toHaveLength(2 * HOURS);
      for (const w of hourly) {
        const inputs = fineBefore.filter((f) => f.collector === w.collector && hourOf(f.windowStart) === w.windowStart);
        expect(inputs.length).toBeGreaterThanOrEqual(12);
        const expected = mergeStates(inputs.map(stateOf), K);
        expect(w.k).toBe(expected.k);
        expect(w.tau).toBe(expected.tau);
        expect(w.tau).toBeGreaterThan(0);
        expect(w.kept.map((e) => e.priority)).toEqual(expected.kept.map((e) => e.priority));
        expect(w.kept.map((e) => e.weight)).toEqual(expected.kept.map((e) => e.weight));
        expect(w.records).toBe(expected.seen);
        expect(w.bytes).toBe(inputs.reduce((s, f) => s + f.bytes, 0n));
        expect(w.packets).toBe(inputs.reduce((s, f) => s + f.packets, 0n));
      }
    });

    it("answers each subset with an estimate inside the 95% interval of the other, before and after (both unbiased, DLT 2007 Theorem 1)", async () => {
      // The hourly sample keeps a subset of the fine samples' records (a second stage of
      // priority sampling), so Var(after − before) = Var(after) − Var(before), each estimated by
      // its answer's SE² (DLT 2007, Theorem 1 and §5: Var̂ is unbiased; a negative plug-in
      // difference counts as 0). How far a miss of either interval lies, in standard deviations
      // of (after − before), is computed here for each subset: the least distance from an
      // estimate to its own interval's ends over √(SE_after² − SE_before²). It is not above 4 for
      // every subset (the IPv6 packets, with gamma intervals, come a little under), so what is
      // asserted is the computed chance that an unbiased roll-up fails these checks: each
      // subset beyond 3.5 SD, and the two-sided normal tails (jstat) summed below 1e-3.
      let falseAlarm = 0;
      for (const subset of SUBSETS) {
        const a = before.get(subset.name)!;
        const b = await setup.estimate(subset.request);
        expect(a.stdError, subset.name).toBeGreaterThan(0);
        // An unbiased estimate may exceed the range's exact total; an interval never does (the
        // total caps it: no subset holds more). Compared with the other interval, an estimate
        // counts at most as the total.
        const cap = Number(b.exact[subset.metric === "flows" ? "records" : subset.metric]);
        // How far the other estimate must move from this one to fall outside this interval: below
        // its low end, or above its high end unless that end is the cap (an estimate counts as at most the cap).
        const margins = (x: EstimateAnswer) => [x.estimate - x.ci95[0], x.ci95[1] >= cap ? Infinity : x.ci95[1] - x.estimate];
        const sdOfDifference = Math.sqrt(Math.max(0, b.stdError ** 2 - a.stdError ** 2));
        const missInSd = Math.min(...margins(a), ...margins(b)) / sdOfDifference;
        expect(missInSd, subset.name).toBeGreaterThan(3.5);
        if (Number.isFinite(missInSd)) falseAlarm += 2 * (1 - jStat.normal.cdf(missInSd, 0, 1));
        expect(Math.min(a.estimate, cap), subset.name).toBeGreaterThanOrEqual(b.ci95[0]);
        expect(Math.min(a.estimate, cap), subset.name).toBeLessThanOrEqual(b.ci95[1]);
        expect(Math.min(b.estimate, cap), subset.name).toBeGreaterThanOrEqual(a.ci95[0]);
        expect(Math.min(b.estimate, cap), subset.name).toBeLessThanOrEqual(a.ci95[1]);
        // And the byte estimates (the weight, DLT 2007's own estimator) lie near the true sum:
        // within 4 standard errors, a false alarm of probability below 1e-4 per check under the
        // normal approximation. Packets and flows of small subsets are too skewed for that bound.
        if (subset.metric === "bytes") {
          const real = trueValue(sent, subset);
          for (const answer of [a, b]) expect(Math.abs(answer.estimate - real), subset.name).toBeLessThanOrEqual(4 * answer.stdError);
        }
        // A normal interval below the cap is estimate ± z·SE (z = Φ⁻¹(0.975)).
        if (b.method === "normal" && b.ci95[1] < cap) expect(b.ci95[1] - b.estimate).toBeCloseTo(Z95 * b.stdError, 6);
      }
      expect(falseAlarm).toBeLessThan(1e-3);
    });

    it("lists the hourly windows as the answer's resolution", async () => {
      const answer = await setup.estimate({});
      // Hourly windows rolled up from fine ones carry the widening disclosure (tests/retention/disclosure.test.ts).
      expect(answer.resolution).toEqual([{ windowSeconds: 3600, windows: HOURS, from: RANGE.from, to: RANGE.to, rollUp: expect.objectContaining({ boundRatio: expect.any(Number) }) }]);
      expect(answer.windows).toBe(HOURS);
    });

    it("changes nothing when run again: rolling up is idempotent", async () => {
      const snapshot = () =>
        sql(
          "SELECT r.id, r.window_start, r.window_seconds, r.node, r.k, r.tau, r.records, r.bytes, r.packets, r.next_seq, hex(group_concat(k.data, '')) AS kept " +
            "FROM reservoirs r LEFT JOIN kept_records k ON k.reservoir_id = r.id WHERE r.tenant_id = ? GROUP BY r.id ORDER BY r.id",
          [setup.tenant.id],
        );
      const first = await snapshot();
      const again = await setup.retain(T0 + HOURS * HOUR_MS + 30 * DAY_MS);
      expect(again.rolledUp).toEqual({ hours: 0, fineWindows: 0, hourlyWindows: 0, kept: 0 });
      expect(again.deleted).toEqual({ windows: 0, kept: 0 });
      expect(await snapshot()).toEqual(first);
      // Nothing changed, so nothing in the ledger.
      expect(await sql("SELECT id FROM audit_log WHERE tenant_id = ? AND action = 'retention.run'", [setup.tenant.id])).toHaveLength(1);
    });

    it("merges a late record's fine window into the existing hourly window at the next run", async () => {
      const edge1 = (await readStoredWindows(t.server.db.$client, setup.tenant.id, { from: T0, to: T0 + 1, windowSeconds: 3600 })).find((w) => w.collector === "edge-1")!;
      const late: Sent = { collector: "edge-1", src: "203.0.113.9", dst: "198.51.100.77", sport: 40_000, dport: 443, proto: 6, bytes: 1_000_000, packets: 700, start: T0 + 10 * 60_000 };
      await setup.send([late]);
      const [fine] = await readStoredWindows(t.server.db.$client, setup.tenant.id, { from: T0, to: T0 + HOUR_MS, shorterThan: 3600 });
      expect(fine).toMatchObject({ collector: "edge-1", windowStart: T0 + 10 * 60_000, windowSeconds: 300, records: 1 });

      const report = await setup.retain(T0 + HOURS * HOUR_MS + 30 * DAY_MS);
      expect(report.rolledUp).toMatchObject({ hours: 1, fineWindows: 1, hourlyWindows: 1 });
      const merged = (await readStoredWindows(t.server.db.$client, setup.tenant.id, { from: T0, to: T0 + 1, windowSeconds: 3600 })).find((w) => w.collector === "edge-1")!;
      const expected = mergeStates([stateOf(edge1), stateOf(fine)], K);
      expect(merged.tau).toBe(expected.tau);
      expect(merged.kept.map((e) => e.priority)).toEqual(expected.kept.map((e) => e.priority));
      expect(merged.records).toBe(edge1.records + 1);
      expect(merged.bytes).toBe(edge1.bytes + 1_000_000n);
      expect(await readStoredWindows(t.server.db.$client, setup.tenant.id, { from: T0, to: T0 + HOURS * HOUR_MS, shorterThan: 3600 })).toEqual([]);

      const all = await setup.estimate({ where: { collectors: ["edge-1"] } });
      const sums = truth([...sent, late], (r) => r.collector === "edge-1");
      expect(all.exact).toEqual({ records: asCounter(sums.records), bytes: asCounter(sums.bytes), packets: asCounter(sums.packets) });
    });
  });

  it("answers a range across the roll-up from hourly and 5-minute windows, and says so in `resolution`", async () => {
    const setup = await tenant(30, 365);
    await setup.send(traffic(21, "edge-1", { hours: HOURS, busy: 80, quiet: 5, busyShift: 3 }));
    // Only the first two hours ended 30 days before this instant.
    const report = await setup.retain(T0 + 2 * HOUR_MS + 30 * DAY_MS);
    expect(report.rolledUp).toMatchObject({ hours: 2, fineWindows: 24, hourlyWindows: 2 });
    const answer = await setup.estimate({ groupBy: "window", top: 1000 });
    expect(answer.resolution).toEqual([
      { windowSeconds: 3600, windows: 2, from: new Date(T0).toISOString(), to: new Date(T0 + 2 * HOUR_MS).toISOString(), rollUp: expect.any(Object) },
      { windowSeconds: 300, windows: 24, from: new Date(T0 + 2 * HOUR_MS).toISOString(), to: RANGE.to },
    ]);
    expect(answer.windows).toBe(26);
    expect(answer.groups.map((g) => g.key)).toContain(new Date(T0 + HOUR_MS).toISOString());
  });

  it("at a \"now\" inside an hour rolls up only the hours that ended N days before it: the cutoff rounds down", async () => {
    const setup = await tenant(30, 365);
    await setup.send(traffic(71, "edge-1", { hours: HOURS, busy: 80, quiet: 5, busyShift: 2 }));
    const third = { from: T0 + 2 * HOUR_MS, to: T0 + 3 * HOUR_MS };
    const thirdBefore = await readStoredWindows(t.server.db.$client, setup.tenant.id, third);
    expect(thirdBefore).toHaveLength(12);
    // Half an hour into the third hour, N = 30 days on: the hours of T0 and T0 + 1 h have ended
    // N days before; the third ends only at T0 + 3 h, half an hour after the cutoff, and stays fine.
    const report = await setup.retain(T0 + 2 * HOUR_MS + 30 * 60_000 + 30 * DAY_MS);
    expect(report.rollUpBefore).toBe(new Date(T0 + 2 * HOUR_MS + 30 * 60_000).toISOString());
    expect(report.rolledUp).toMatchObject({ hours: 2, fineWindows: 24, hourlyWindows: 2 });
    const rows = await setup.windows();
    expect(rows.filter((r) => r.window_seconds === 3600).map((r) => Number(r.window_start))).toEqual([T0, T0 + HOUR_MS]);
    // The third hour's fine windows are untouched, kept records and all.
    expect(await readStoredWindows(t.server.db.$client, setup.tenant.id, third)).toEqual(thirdBefore);
    expect(rows.filter((r) => r.window_seconds === 300)).toHaveLength(24);
  });

  it("deletes every window once it ended M days ago, and not a millisecond earlier", async () => {
    const setup = await tenant(30, 60);
    await setup.send(traffic(31, "edge-2", { hours: 2, busy: 100, quiet: 2, busyShift: 1 }));
    await setup.retain(T0 + 2 * HOUR_MS + 30 * DAY_MS);
    const hourly = await readStoredWindows(t.server.db.$client, setup.tenant.id, { from: T0, to: T0 + 2 * HOUR_MS });
    expect(hourly.map((w) => [w.windowStart, w.windowSeconds])).toEqual([
      [T0, 3600],
      [T0 + HOUR_MS, 3600],
    ]);

    // The first hourly window ends at T0 + 1 h: deleted once now − 60 days reaches that.
    const early = await setup.retain(T0 + HOUR_MS + 60 * DAY_MS - 1);
    expect(early.deleted).toEqual({ windows: 0, kept: 0 });
    const due = await setup.retain(T0 + HOUR_MS + 60 * DAY_MS);
    expect(due.deleted).toEqual({ windows: 1, kept: hourly[0].kept.length });
    expect((await setup.windows()).map((r) => r.window_start)).toEqual([T0 + HOUR_MS]);
    const ledger = await sql("SELECT detail FROM audit_log WHERE tenant_id = ? AND action = 'retention.run' ORDER BY id", [setup.tenant.id]);
    expect(JSON.parse(String(ledger.at(-1)!.detail))).toMatchObject({ windowsDeleted: 1, keptDeleted: hourly[0].kept.length, hoursRolledUp: 0 });
  });

  it("with M = N deletes fine windows at N days without rolling them up", async () => {
    const setup = await tenant(30, 30);
    await setup.send(traffic(41, "edge-1", { hours: HOURS, busy: 70, quiet: 3, busyShift: 5 }));
    const now = T0 + 2 * HOUR_MS + 30 * DAY_MS;
    const keptDue = await sql(
      "SELECT count(*) AS n FROM kept_records k JOIN reservoirs r ON r.id = k.reservoir_id WHERE r.tenant_id = ? AND r.window_start + r.window_seconds * 1000 <= ?",
      [setup.tenant.id, now - 30 * DAY_MS],
    );
    const report = await setup.retain(now);
    expect(report.rolledUp).toEqual({ hours: 0, fineWindows: 0, hourlyWindows: 0, kept: 0 });
    // The window 01:55–02:00 ends exactly at now − 30 days: deleted; the one of 02:00 stays.
    expect(report.deleted).toEqual({ windows: 24, kept: Number(keptDue[0].n) });
    const rows = await setup.windows();
    expect(rows).toHaveLength(24);
    expect(rows.every((r) => r.window_seconds === 300 && Number(r.window_start) >= T0 + 2 * HOUR_MS)).toBe(true);
  });

  it("rolls up more than a day of hours in several transactions, and leaves windows that do not divide an hour for deletion", async () => {
    const setup = await tenant(30, 60);
    const days = traffic(61, "edge-1", { hours: 30, busy: 2, quiet: 1, busyShift: 0 });
    await setup.send(days);
    // A 7-minute window (not one ingest makes today, but a stored one may have any length): it cannot be cut into hours.
    await sql("INSERT INTO reservoirs (tenant_id, collector_id, window_start, window_seconds, node, k, records, updated_at) SELECT tenant_id, collector_id, ?, 420, 'node-1', 64, 1, 0 FROM reservoirs WHERE tenant_id = ? LIMIT 1", [
      T0 + 2 * HOUR_MS,
      setup.tenant.id,
    ]);
    const report = await setup.retain(T0 + 30 * HOUR_MS + 30 * DAY_MS);
    expect(report.rolledUp).toMatchObject({ hours: 30, fineWindows: 30 * 12, hourlyWindows: 30 });
    const rows = await setup.windows();
    expect(rows.filter((r) => r.window_seconds === 3600).map((r) => Number(r.window_start))).toEqual(Array.from({ length: 30 }, (_, h) => T0 + h * HOUR_MS));
    expect(rows.filter((r) => r.window_seconds !== 3600)).toEqual([{ window_start: T0 + 2 * HOUR_MS, window_seconds: 420, node: "node-1", records: 1 }]);
    const exact = (await setup.estimate({ to: new Date(T0 + 30 * HOUR_MS).toISOString() })).exact;
    const sums = truth(days, () => true);
    expect(exact).toEqual({ records: asCounter(sums.records + 1n), bytes: asCounter(sums.bytes), packets: asCounter(sums.packets) });

    const later = await setup.retain(T0 + 2 * HOUR_MS + 7 * 60_000 + 60 * DAY_MS);
    expect(later.deleted.windows).toBe(3); // the hours of 00:00 and 01:00, and the 7-minute window
    expect((await setup.windows()).map((r) => Number(r.window_start))[0]).toBe(T0 + 2 * HOUR_MS);
  });

  it("leaves other tenants alone when one is named, and rolls up every tenant when none is", async () => {
    const a = await tenant(30, 365);
    const b = await tenant(30, 365);
    for (const s of [a, b]) await s.send(traffic(51, "edge-1", { hours: 1, busy: 10, quiet: 1, busyShift: 0 }));
    const now = T0 + HOUR_MS + 30 * DAY_MS;
    await a.retain(now);
    expect((await b.windows()).every((r) => r.window_seconds === 300)).toBe(true);
    const reports = await runRetention({ db: t.server.db, manager: t.server.manager, node: t.server.env.NODE_ID }, now);
    expect(reports.find((r) => r.tenant === b.tenant.slug)?.rolledUp).toMatchObject({ hours: 1, fineWindows: 12, hourlyWindows: 1 });
    expect(reports.find((r) => r.tenant === a.tenant.slug)?.rolledUp).toMatchObject({ hours: 0, fineWindows: 0 });
    expect((await b.windows()).map((r) => r.window_seconds)).toEqual([3600]);
    await expect(runRetention({ db: t.server.db, node: "node-1" }, now, { tenant: "no-such-tenant" })).rejects.toThrow("no tenant 'no-such-tenant'");
  });
});
