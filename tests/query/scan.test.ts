import jStat from "jstat";
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { parseAddress } from "~/net/address";
import { coveringPrefix, formatPrefix } from "~/net/prefix";
import { buildAnswer, intervalJson, unseenPerWeight } from "~/query/answer";
import { toColumns, type KeptRow } from "~/query/columns";
import { parseEstimateRequest, type EstimateQuery, type EstimateRequest, type Metric } from "~/query/request";
import { compileQuery, scan, type ScanReservoir } from "~/query/scan";
import { addSums, EMPTY_SUM, estimateSubset, type EstimateSum } from "~/sampling/estimate";
import { seededUniform } from "~/sampling/uniform";
import { groupKey, matchesWhere, metricValue, type PlainRecord } from "./reference";

// The scan must give exactly what the published estimator gives record by record:
// Σ x/p and Σ x²(1−p)/p² over the matching kept records with p = min(1, w/τ)
// (N. Duffield, C. Lund, M. Thorup, J. ACM 54(6), 2007, §5; `estimateSubset` implements it),
// summed over reservoirs (independent samples). The reference below is a brute force over the
// same kept records with the plain predicates of ./reference.ts.

interface TestRecord extends PlainRecord {
  weight: number;
}

interface TestReservoir {
  tau: number;
  collector: string;
  windowStart: number;
  records: TestRecord[];
}

function columnsOf(records: TestRecord[]) {
  const rows: KeptRow[] = records.map((r) => ({
    weight: r.weight,
    record: {
      src: r.src,
      dst: r.dst,
      sport: r.sport,
      dport: r.dport,
      proto: r.proto,
      bytes: BigInt(r.bytes),
      packets: BigInt(r.packets),
      start: null,
      srcAs: r.srcAs ?? null,
      dstAs: r.dstAs ?? null,
      ingressInterface: r.inIf ?? null,
      egressInterface: r.outIf ?? null,
    },
  }));
  return toColumns(rows);
}

function toScan(reservoirs: TestReservoir[]): ScanReservoir[] {
  return reservoirs.map((r) => ({ tau: r.tau, collector: r.collector, windowStart: r.windowStart, columns: columnsOf(r.records) }));
}

function parse(request: EstimateRequest): EstimateQuery {
  const parsed = parseEstimateRequest(request);
  if (!parsed.ok) throw new Error(`test query did not parse: ${parsed.message}`);
  return parsed.query;
}

// ---- the brute-force reference ------------------------------------------------------------------

function bruteForce(reservoirs: TestReservoir[], q: EstimateQuery, metric: Metric) {
  let total: EstimateSum = { ...EMPTY_SUM };
  const groups = new Map<string, EstimateSum>();
  const value = metricValue(metric);
  const weight = (r: TestRecord) => r.weight;
  for (const res of reservoirs) {
    if (res.windowStart < q.from || res.windowStart >= q.to) continue;
    if (q.where.collectors.length > 0 && !q.where.collectors.includes(res.collector)) continue;
    const matching = res.records.filter((r) => matchesWhere(q, r));
    total = addSums(total, estimateSubset(res.tau, res.records, weight, value, (r) => matchesWhere(q, r)));
    if (q.groupBy === null) continue;
    const keyOf = (r: TestRecord) => groupKey(q, r, res.collector, res.windowStart);
    for (const key of new Set(matching.map(keyOf))) {
      const part = estimateSubset(res.tau, matching, weight, value, (r) => keyOf(r) === key);
      groups.set(key, addSums(groups.get(key) ?? EMPTY_SUM, part));
    }
  }
  return { total, groups };
}

function close(actual: number, expected: number): boolean {
  return Math.abs(actual - expected) <= 1e-9 * Math.max(1, Math.abs(actual), Math.abs(expected));
}

function expectSameSum(actual: EstimateSum, expected: EstimateSum, what: string): void {
  const same =
    close(actual.estimate, expected.estimate) &&
    close(actual.variance, expected.variance) &&
    close(actual.certain, expected.certain) &&
    actual.kept === expected.kept &&
    actual.uncertain === expected.uncertain;
  expect(same, `${what}: ${JSON.stringify(actual)} vs brute force ${JSON.stringify(expected)}`).toBe(true);
}

// ---- random kept records and queries -----------------------------------------------------------

// Documentation address space only (RFC 5737, RFC 3849), dense enough that filters hit.
const v4 = fc
  .tuple(fc.constantFrom("192.0.2", "198.51.100", "203.0.113"), fc.integer({ min: 0, max: 255 }))
  .map(([net, host]) => parseAddress(`${net}.${host}`));
const v6 = fc
  .tuple(fc.integer({ min: 0, max: 2 }), fc.integer({ min: 0, max: 3 }), fc.integer({ min: 0, max: 0xffff }))
  .map(([a, b, c]) => parseAddress(`2001:db8:${a}:${b}::${c.toString(16)}`));
const address = fc.oneof(v4, v6);
const commonPort = fc.constantFrom(0, 22, 53, 80, 123, 443, 1024, 8080, 65535);
const port = fc.oneof({ arbitrary: commonPort, weight: 4 }, { arbitrary: fc.integer({ min: 0, max: 65535 }), weight: 1 });
const protoNumber = fc.constantFrom(1, 6, 17, 47);
// Documentation AS numbers (RFC 5398, both blocks, the second beyond 2 octets: RFC 6793) and a
// few ifIndex values (RFC 2863), absent (null: not exported) about a third of the time.
const asNumber = fc.oneof(fc.integer({ min: 64496, max: 64511 }), fc.integer({ min: 65536, max: 65551 }));
const ifIndex = fc.oneof(fc.integer({ min: 0, max: 8 }), fc.constant(4294967295));
const optional = <T>(item: fc.Arbitrary<T>) => fc.oneof({ arbitrary: fc.constant(null), weight: 1 }, { arbitrary: item, weight: 2 });
const rangeOf = (item: fc.Arbitrary<number>) =>
  fc.oneof(item, item.map(String), fc.tuple(item, item).map(([a, b]) => `${Math.min(a, b)}-${Math.max(a, b)}`));
const collectorNames = ["edge-1", "edge-2", "core"];
const windowStarts = [0, 300_000, 600_000, 900_000];

const record = fc
  .record({
    src: address,
    dst: address,
    sport: port,
    dport: port,
    proto: protoNumber,
    bytes: fc.integer({ min: 40, max: 5_000_000 }),
    packets: fc.integer({ min: 1, max: 4000 }),
    srcAs: optional(asNumber),
    dstAs: optional(asNumber),
    inIf: optional(ifIndex),
    outIf: optional(ifIndex),
    byPackets: fc.boolean(),
  })
  .map(({ byPackets, ...r }): TestRecord => ({ ...r, weight: byPackets ? r.packets : r.bytes }));

const reservoir = fc.record({
  // τ = 0 (every record kept, exact) or a threshold that leaves some records certain and some not.
  tau: fc.oneof(fc.constant(0), fc.double({ min: 1, max: 2_000_000, noNaN: true })),
  collector: fc.constantFrom(...collectorNames),
  windowStart: fc.constantFrom(...windowStarts),
  records: fc.array(record, { maxLength: 60 }),
});

/** A CIDR that often covers generated addresses: a generated address cut to a random length. */
const cidr = fc.oneof(
  fc.tuple(v4, fc.oneof(fc.integer({ min: 0, max: 24 }), fc.integer({ min: 0, max: 32 }))).map(([a, n]) => formatPrefix(coveringPrefix(a, n))),
  fc.tuple(v6, fc.oneof(fc.integer({ min: 0, max: 64 }), fc.integer({ min: 0, max: 128 }))).map(([a, n]) => formatPrefix(coveringPrefix(a, n))),
  fc.constantFrom("::/0", "0.0.0.0/0", "2001:db8::/32", "198.51.100.0/23", "2001:db8:1::/48"),
);
const portItem = fc.oneof(
  commonPort,
  fc.tuple(port, port).map(([a, b]) => `${Math.min(a, b)}-${Math.max(a, b)}`),
);
// Each filter is absent more often than not, so that combined filters still match some records.
const maybeList = <T>(item: fc.Arbitrary<T>) =>
  fc.oneof({ arbitrary: fc.constant(undefined), weight: 3 }, { arbitrary: fc.array(item, { minLength: 1, maxLength: 3 }), weight: 1 });

const request: fc.Arbitrary<EstimateRequest> = fc
  .record({
    window: fc.tuple(fc.integer({ min: 0, max: 3 }), fc.integer({ min: 1, max: 4 })),
    src: maybeList(cidr),
    dst: maybeList(cidr),
    srcExclude: maybeList(cidr),
    dstExclude: maybeList(cidr),
    sport: maybeList(portItem),
    dport: maybeList(portItem),
    proto: maybeList(protoNumber),
    srcAs: maybeList(rangeOf(asNumber)),
    dstAs: maybeList(rangeOf(asNumber)),
    inIf: maybeList(rangeOf(ifIndex)),
    outIf: maybeList(rangeOf(ifIndex)),
    collectors: maybeList(fc.constantFrom(...collectorNames, "unknown")),
    metric: fc.constantFrom("bytes", "packets", "flows"),
    groupBy: fc.option(
      fc.constantFrom("src", "dst", "sport", "dport", "proto", "srcAs", "dstAs", "inIf", "outIf", "collector", "window"),
      { nil: undefined },
    ),
    prefixLength: fc.record({ ipv4: fc.integer({ min: 0, max: 32 }), ipv6: fc.integer({ min: 0, max: 128 }) }),
    top: fc.integer({ min: 1, max: 12 }),
  })
  .map((r) => {
    const first = Math.min(r.window[0], windowStarts.length - 1);
    const last = Math.min(first + r.window[1], windowStarts.length);
    return {
      from: windowStarts[first],
      to: last < windowStarts.length ? windowStarts[last] : windowStarts[windowStarts.length - 1] + 300_000,
      where: {
        src: r.src,
        dst: r.dst,
        srcExclude: r.srcExclude,
        dstExclude: r.dstExclude,
        sport: r.sport,
        dport: r.dport,
        proto: r.proto,
        srcAs: r.srcAs,
        dstAs: r.dstAs,
        inIf: r.inIf,
        outIf: r.outIf,
        collectors: r.collectors,
      },
      metric: r.metric,
      groupBy: r.groupBy,
      prefixLength: r.groupBy === "src" || r.groupBy === "dst" ? r.prefixLength : undefined,
      top: r.top,
    };
  });

// ---- tests --------------------------------------------------------------------------------------

describe("scan against a brute force over the same kept records", () => {
  it("agrees on totals and groups for random queries (filters, excludes, port, AS and interface ranges, absent values, IPv6, every group-by)", () => {
    fc.assert(
      fc.property(fc.array(reservoir, { minLength: 1, maxLength: 8 }), request, (reservoirs, req) => {
        const query = parse(req);
        const metric = query.metric!;
        const result = scan(toScan(reservoirs), compileQuery(query, metric));
        const brute = bruteForce(reservoirs, query, metric);
        expectSameSum(result.total, brute.total, "total");

        if (query.groupBy === null) {
          expect(result.groups).toEqual([]);
          return;
        }
        expect(result.groups.length).toBe(Math.min(query.top, brute.groups.size));
        for (const g of result.groups) {
          const expected = brute.groups.get(g.key);
          expect(expected, `group ${g.key} is one the brute force found`).toBeDefined();
          expectSameSum(g.sum, expected!, `group ${g.key}`);
        }
        // Largest estimate first, and nothing left out is larger than what was kept.
        for (let i = 1; i < result.groups.length; i++) {
          expect(result.groups[i].sum.estimate).toBeLessThanOrEqual(result.groups[i - 1].sum.estimate);
        }
        const shown = new Set(result.groups.map((g) => g.key));
        const smallestShown = result.groups.at(-1)?.sum.estimate ?? Infinity;
        for (const [key, sum] of brute.groups) {
          if (!shown.has(key)) expect(sum.estimate).toBeLessThanOrEqual(smallestShown * (1 + 1e-9));
        }
      }),
      { seed: 20070601, numRuns: 500 },
    );
  });

  it("worked example: bytes, packets and flows from one byte-weighted reservoir (DLT 2007 §5)", () => {
    const a = parseAddress("198.51.100.10");
    const b = parseAddress("2001:db8::1");
    const reservoirs: TestReservoir[] = [
      {
        tau: 1000,
        collector: "edge-1",
        windowStart: 0,
        records: [
          { src: a, dst: b, sport: 50000, dport: 443, proto: 6, bytes: 5000, packets: 4, weight: 5000 },
          { src: b, dst: a, sport: 53, dport: 40000, proto: 17, bytes: 300, packets: 3, weight: 300 },
        ],
      },
    ];
    const run = (metric: Metric, where: EstimateRequest["where"] = {}) =>
      scan(toScan(reservoirs), compileQuery(parse({ from: 0, to: 300_000, where }), metric)).total;
    // ŵ = max(w, τ): 5000 + 1000; v̂ = τ·max(0, τ − w) = 0 + 1000·700.
    // The largest uncertain term is the small record's ŵ = τ = 1000.
    expect(run("bytes")).toEqual({ estimate: 6000, variance: 700_000, certain: 5000, kept: 2, uncertain: 1, maxTerm: 1000 });
    // Horvitz–Thompson with p = 300/1000 for the small record: 4 + 3/0.3; v̂ = 9·0.7/0.09.
    expect(run("packets").estimate).toBeCloseTo(14, 12);
    expect(run("packets").variance).toBeCloseTo(70, 9);
    // Flows: 1 + 1/0.3.
    expect(run("flows").estimate).toBeCloseTo(1 + 1000 / 300, 12);
    // Filters: only the IPv6 source, only port 443, everything but UDP.
    expect(run("bytes", { src: ["2001:db8::/32"] }).estimate).toBe(1000);
    expect(run("bytes", { dport: ["400-500"] }).estimate).toBe(5000);
    expect(run("bytes", { srcExclude: ["198.51.100.0/24"] }).estimate).toBe(1000);
    expect(run("bytes", { proto: [6] }).estimate).toBe(5000);
    expect(run("bytes", { dst: ["::/0"] }).estimate).toBe(6000); // RFC 4291: ::/0 spans the IPv4-mapped space too
    expect(run("bytes", { dst: ["0.0.0.0/0"] }).estimate).toBe(1000); // an IPv4 prefix holds no IPv6 address
  });

  it("skips reservoirs outside the window range or the named collectors", () => {
    const one = (windowStart: number, collector: string): TestReservoir => ({
      tau: 0,
      collector,
      windowStart,
      records: [{ src: parseAddress("192.0.2.1"), dst: parseAddress("192.0.2.2"), sport: 1, dport: 2, proto: 6, bytes: 100, packets: 1, weight: 100 }],
    });
    const reservoirs = toScan([one(0, "edge-1"), one(300_000, "edge-1"), one(300_000, "edge-2"), one(600_000, "edge-1")]);
    const total = (req: EstimateRequest) => scan(reservoirs, compileQuery(parse(req), "bytes")).total.estimate;
    expect(total({ from: 0, to: 900_000 })).toBe(400);
    expect(total({ from: 300_000, to: 600_000 })).toBe(200); // window starts in [from, to)
    expect(total({ from: 1, to: 600_001 })).toBe(300);
    expect(total({ from: 0, to: 900_000, where: { collectors: ["edge-2"] } })).toBe(100);
    expect(total({ from: 0, to: 900_000, where: { collectors: ["nowhere"] } })).toBe(0);
  });
});

/** A TCP flow to 203.0.113.9 weighted by its bytes. */
function flow(src: string, dport: number, bytes: number): TestRecord {
  return { src: parseAddress(src), dst: parseAddress("203.0.113.9"), sport: 40000, dport, proto: 6, bytes, packets: 1, weight: bytes };
}

describe("groups", () => {
  it("keeps the top N by estimate, equal estimates in key order", () => {
    const records = [flow("192.0.2.1", 443, 500), flow("192.0.2.2", 80, 300), flow("192.0.2.3", 22, 300), flow("192.0.2.4", 53, 300), flow("192.0.2.5", 8080, 50)];
    const reservoirs = toScan([{ tau: 0, collector: "edge-1", windowStart: 0, records }]);
    const groups = scan(reservoirs, compileQuery(parse({ from: 0, to: 1, groupBy: "dport", top: 3 }), "bytes")).groups;
    // 443 carries most; 22, 53 and 80 tie at 300 and come in numeric order.
    expect(groups.map((g) => [g.key, g.sum.estimate])).toEqual([["443", 500], ["22", 300], ["53", 300]]);
  });

  it("groups addresses by prefix on each family's own scale (RFC 4632 §3.1, RFC 4291 §2.3)", () => {
    const records = [
      flow("198.51.100.7", 443, 100),
      flow("198.51.100.100", 443, 100),
      flow("198.51.100.200", 443, 100),
      flow("203.0.113.7", 443, 50),
      flow("2001:db8:1:2::5", 443, 1000),
      flow("2001:db8:1:3::5", 443, 1000),
      flow("2001:db8:2::1", 443, 10),
    ];
    const reservoirs = toScan([{ tau: 0, collector: "edge-1", windowStart: 0, records }]);
    const keys = (prefixLength: EstimateRequest["prefixLength"]) =>
      scan(reservoirs, compileQuery(parse({ from: 0, to: 1, groupBy: "src", prefixLength, top: 100 }), "bytes")).groups.map((g) => [g.key, g.sum.estimate]);
    expect(keys(undefined)).toEqual([
      ["2001:db8:1:2::/64", 1000],
      ["2001:db8:1:3::/64", 1000],
      ["198.51.100.0/24", 300],
      ["203.0.113.0/24", 50],
      ["2001:db8:2::/64", 10],
    ]);
    // A /25 splits 198.51.100.0/24 in halves (RFC 4632 §3.1; documentation space, RFC 5737).
    expect(keys({ ipv4: 25, ipv6: 48 })).toEqual([
      ["2001:db8:1::/48", 2000],
      ["198.51.100.0/25", 200],
      ["198.51.100.128/25", 100],
      ["203.0.113.0/25", 50],
      ["2001:db8:2::/48", 10],
    ]);
    expect(keys({ ipv4: 32, ipv6: 0 })[0]).toEqual(["::/0", 2010]);
    expect(keys(0)).toEqual([
      ["::/0", 2010],
      ["0.0.0.0/0", 350],
    ]);
  });

  it("groups by collector and window with keys the reader can use", () => {
    const r = (collector: string, windowStart: number, bytes: number): TestReservoir => ({
      tau: 0,
      collector,
      windowStart,
      records: [flow("192.0.2.1", 443, bytes)],
    });
    const reservoirs = toScan([r("edge-1", 0, 10), r("edge-2", 0, 20), r("edge-1", 300_000, 40)]);
    const by = (groupBy: "collector" | "window") =>
      scan(reservoirs, compileQuery(parse({ from: 0, to: 600_000, groupBy }), "bytes")).groups.map((g) => [g.key, g.sum.estimate]);
    expect(by("collector")).toEqual([["edge-1", 50], ["edge-2", 20]]);
    expect(by("window")).toEqual([["1970-01-01T00:05:00.000Z", 40], ["1970-01-01T00:00:00.000Z", 30]]);
  });
});

describe("the interval of a scanned estimate (toInterval)", () => {
  it("never puts the lower bound below the part known for certain, nor below 0", () => {
    // One certain record (w ≥ τ) and two small uncertain ones: 5000 + 2·1000 = 7000 bytes,
    // v̂ = 2·1000·(1000 − 10), so 7000 − 1.96·√v̂ ≈ 4242 would undercut the certain 5000.
    const records = [flow("192.0.2.1", 443, 5000), flow("192.0.2.2", 80, 10), flow("192.0.2.3", 80, 10)];
    const reservoirs = toScan([{ tau: 1000, collector: "edge-1", windowStart: 0, records }]);
    const q = parse({ from: 0, to: 1, groupBy: "dport" });
    const result = scan(reservoirs, compileQuery(q, "bytes"));
    const context = { unseenTerm: 1000, cap: 10_000 };
    const answer = buildAnswer({ metric: "bytes", result, windows: 1, collectors: ["edge-1"], exact: { records: 3n, bytes: 5020n, packets: 3n }, from: 0, to: 1, context });
    expect(answer.estimate).toBe(7000);
    // Two uncertain terms: the gamma interval of Fay and Feuer (Statistics in Medicine 16, 1997,
    // eqs. 4–5) on the uncertain part y = 2000, v = 2·1000·990, wM = 1000, added to the certain 5000;
    // quantiles from jstat (npm jstat). Its upper bound stops at the range's total (cap).
    const y = 2000;
    const v = 2 * 1000 * 990;
    expect(answer).toMatchObject({ method: "gamma", rough: true, roughReason: "the normal approximation would be poor: 2 uncertain terms" });
    expect(answer.ci95[0]).toBeCloseTo(5000 + (v / y) * jStat.gamma.inv(0.025, (y * y) / v, 1), 6);
    expect(answer.ci95[0]).toBeGreaterThanOrEqual(5000);
    expect(answer.ci95[1]).toBe(10_000);
    // The port-80 group has nothing certain: its lower bound is the gamma bound of 2000 alone.
    const port80 = answer.groups.find((g) => g.key === "80")!;
    expect(port80.estimate).toBe(2000);
    expect(port80.ci95[0]).toBeCloseTo((v / y) * jStat.gamma.inv(0.025, (y * y) / v, 1), 6);
    expect(port80.ci95[1]).toBeCloseTo(((v + 1e6) / (y + 1000)) * jStat.gamma.inv(0.975, (y + 1000) ** 2 / (v + 1e6), 1), 6);
    expect(answer.exact).toEqual({ records: 3, bytes: 5020, packets: 3 });
  });

  it("turns exact counters above 2^53−1 into decimal strings", () => {
    const result = { total: { ...EMPTY_SUM }, groups: [] };
    const answer = buildAnswer({ metric: "bytes", result, windows: 0, collectors: [], exact: { records: 0n, bytes: 2n ** 64n, packets: 2n ** 53n - 1n }, from: 0, to: 1 });
    expect(answer.exact).toEqual({ records: 0, bytes: "18446744073709551616", packets: 9007199254740991 });
    // τ = 0 everywhere: nothing was left out, so an empty subset is exactly 0.
    expect(intervalJson(EMPTY_SUM)).toMatchObject({ estimate: 0, stdError: 0, ci95: [0, 0], kept: 0, method: "exact", matched: false });
    // τ > 0: "no sampled record matched" and an upper bound, never [0, 0] (Garwood 1936: 3.689 for a count of 0).
    const none = intervalJson(EMPTY_SUM, { unseenTerm: 1000 });
    expect(none).toMatchObject({ ci95: [0, expect.closeTo(1000 * -Math.log(0.025), 6)], method: "no-match", matched: false, message: "no sampled record matched", rough: true });
  });
});

describe("what one record left out may add (unseenPerWeight)", () => {
  it("is 1 per unit of weight except bytes under a packet weight: 65 535, the largest IPv4 Total Length (RFC 791 §3.1, a 16-bit field)", () => {
    expect(unseenPerWeight("packets", "bytes")).toBe(2 ** 16 - 1);
    for (const metric of ["bytes", "packets", "flows"] as const) expect(unseenPerWeight("bytes", metric)).toBe(1);
    expect(unseenPerWeight("packets", "packets")).toBe(1);
    expect(unseenPerWeight("packets", "flows")).toBe(1);
  });
});

describe("speed", () => {
  it("scans a day of 5-minute windows at k = 1024 (printed, not asserted)", () => {
    const u = seededUniform(288);
    const nets = ["192.0.2", "198.51.100", "203.0.113"];
    const randomAddress = () =>
      u() < 0.8
        ? parseAddress(`${nets[Math.floor(u() * 3)]}.${Math.floor(u() * 256)}`)
        : parseAddress(`2001:db8:${Math.floor(u() * 4)}::${Math.floor(u() * 65536).toString(16)}`);
    const reservoirs: ScanReservoir[] = [];
    for (let w = 0; w < 288; w++) {
      const rows: KeptRow[] = [];
      for (let i = 0; i < 1024; i++) {
        const bytes = Math.max(40, Math.round(40 / Math.pow(u(), 1 / 1.2)));
        rows.push({
          weight: bytes,
          record: { src: randomAddress(), dst: randomAddress(), sport: Math.floor(u() * 65536), dport: [443, 80, 53][Math.floor(u() * 3)], proto: 6, bytes: BigInt(bytes), packets: 1n, start: null },
        });
      }
      reservoirs.push({ tau: 5000, collector: "edge-1", windowStart: w * 300_000, columns: toColumns(rows) });
    }
    const time = (req: EstimateRequest) => {
      const compiled = compileQuery(parse(req), "bytes");
      const runs: number[] = [];
      let result = scan(reservoirs, compiled);
      for (let i = 0; i < 15; i++) {
        const started = performance.now();
        result = scan(reservoirs, compiled);
        runs.push(performance.now() - started);
      }
      runs.sort((a, b) => a - b);
      return { p50: runs[7], result };
    };
    const day = { from: 0, to: 288 * 300_000 };
    const filtered = time({ ...day, where: { src: ["198.51.100.0/24"] }, groupBy: "dst" });
    const plain = time(day);
    console.log(
      `scan of ${288 * 1024} kept records: CIDR filter + group by dst /24: p50 ${filtered.p50.toFixed(1)} ms ` +
        `(${filtered.result.total.kept} matched, ${filtered.result.groups.length} groups shown); no filter: p50 ${plain.p50.toFixed(1)} ms`,
    );
    expect(plain.result.total.kept).toBe(288 * 1024);
    expect(filtered.result.total.kept).toBeGreaterThan(0);
  });
});
