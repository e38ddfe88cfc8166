import fc from "fast-check";
import { describe, expect, it } from "vitest";
import type { FlowRecord } from "~/flow/record";
import { parseAddress } from "~/net/address";
import { coordinatedUniform, flowKeyBytes, flowKeyLength, mergeCoordinated } from "~/sampling/coordinated";
import { estimateSubset } from "~/sampling/estimate";
import { mergeStates } from "~/sampling/merge";
import { Reservoir, type ReservoirState } from "~/sampling/reservoir";
import { sipHash24 } from "~/sampling/siphash";
import { seededUniform } from "~/sampling/uniform";
import { heavyTailedPopulation, moments } from "./population";

// Coordinated priorities for priority sampling (Duffield, Lund, Thorup, "Priority
// sampling for estimation of arbitrary subset sums", J. ACM 54(6), 2007): u_i from
// SipHash-2-4 (Aumasson & Bernstein, "SipHash: a fast short-input PRF", INDOCRYPT
// 2012) of the flow key, so overlapping collectors agree on priorities and a merge
// counts a flow they both exported once.

const bytes = (...xs: number[]) => Uint8Array.from(xs);
const counting = (n: number) => Uint8Array.from({ length: n }, (_, i) => i);
const hex64 = ({ hi, lo }: { hi: number; lo: number }) => hi.toString(16).padStart(8, "0") + lo.toString(16).padStart(8, "0");
/** The paper prints a hash as its 8 little-endian bytes; as a 64-bit number that is the reversed byte order. */
const fromLittleEndian = (text: string) => text.match(/../g)!.reverse().join("");

/** An invented flow in documentation address space (RFC 5737, RFC 3849); `id` makes its key unique. */
function flow(id: number, octets: number, start: number | null = 1_714_528_800_000 + id): FlowRecord {
  return {
    src: parseAddress(`192.0.2.${id % 256}`),
    dst: parseAddress(`2001:db8::${(id >>> 8).toString(16)}`),
    sport: 49152 + (id % 1000),
    dport: 443,
    proto: 6,
    bytes: BigInt(octets),
    packets: 1n,
    start,
    end: start,
    ingressInterface: null,
    egressInterface: null,
    srcAs: null,
    dstAs: null,
  };
}

const secretFrom = (u: () => number) => Uint8Array.from({ length: 16 }, () => Math.floor(u() * 256));
const draw = (secret: Uint8Array, record: FlowRecord) => coordinatedUniform(secret, flowKeyBytes(record));

describe("sipHash24", () => {
  it("gives the test vector of the paper: key 00…0f, message 00…0e → a129ca6149be45e5 (Aumasson & Bernstein 2012, Appendix A)", () => {
    expect(hex64(sipHash24(counting(16), counting(15)))).toBe("a129ca6149be45e5");
  });

  // Reference implementation's vectors.h (key 00…0f, message 00 01 … of length n), as
  // little-endian bytes: recalled from memory, and confirmed against OpenSSL 3.0's
  // SIPHASH MAC (openssl mac -macopt hexkey:000102…0f -macopt size:8 SIPHASH) when written.
  const referenceVectors: [number, string][] = [
    [0, "310e0edd47db6f72"],
    [1, "fd67dc93c539f874"],
    [2, "5a4fa9d909806c0d"],
    [3, "2d7efbd796666785"],
    [4, "b7877127e09427cf"],
    [5, "8da699cd64557618"],
    [6, "cee3fe586e46c9cb"],
    [7, "37d1018bf50002ab"],
    [8, "6224939a79f5f593"],
  ];
  for (const [n, expected] of referenceVectors) {
    it(`gives the reference vector for a ${n}-byte message (reference vectors.h, recalled from memory; checked with OpenSSL 3.0)`, () => {
      expect(hex64(sipHash24(counting(16), counting(n)))).toBe(fromLittleEndian(expected));
    });
  }

  it("gives OpenSSL 3.0's SIPHASH (size 8) for a 63-byte message, which crosses seven word boundaries", () => {
    // Computed with the openssl command above on the message 00 01 … 3e.
    expect(hex64(sipHash24(counting(16), counting(63)))).toBe(fromLittleEndian("724506eb4c328a95"));
  });

  it("refuses a key that is not 16 bytes (SipHash keys are 128 bits, paper §2)", () => {
    expect(() => sipHash24(counting(15), counting(3))).toThrow(/16 bytes/);
  });
});

describe("flowKeyBytes", () => {
  it("encodes the documented example: mapped addresses, ports, protocol, start in network order", () => {
    const record = { ...flow(0, 1), src: parseAddress("192.0.2.1"), dst: parseAddress("198.51.100.7"), sport: 49152, dport: 443, proto: 6, start: 1000 };
    const mapped = (a: number, b: number, c: number, d: number) => [0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0xff, 0xff, a, b, c, d];
    expect(Array.from(flowKeyBytes(record))).toEqual([
      ...mapped(192, 0, 2, 1),
      ...mapped(198, 51, 100, 7),
      0xc0, 0x00, 0x01, 0xbb, 0x06,
      0, 0, 0, 0, 0, 0, 0x03, 0xe8,
    ]);
    expect(flowKeyBytes(record).length).toBe(flowKeyLength);
  });

  it("encodes a missing start time as the fixed marker ff×8, distinct from every real time", () => {
    const key = flowKeyBytes(flow(7, 1, null));
    expect(Array.from(key.subarray(37))).toEqual([0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff]);
    expect(flowKeyBytes(flow(7, 1, null))).toEqual(key);
    expect(flowKeyBytes(flow(7, 1, 0))).not.toEqual(key);
    expect(flowKeyBytes(flow(7, 1, Number.MAX_SAFE_INTEGER))).not.toEqual(key);
  });

  it("encodes start times above 2^32 ms exactly (8 bytes, big-endian)", () => {
    const start = 2 ** 40 + 5;
    expect(Array.from(flowKeyBytes(flow(1, 1, start)).subarray(37))).toEqual([0, 0, 1, 0, 0, 0, 0, 5]);
  });

  it("depends on the flow key only, not on counters, end time, interfaces or AS numbers", () => {
    const a = flow(3, 100);
    const b = { ...a, bytes: 9999n, packets: 7n, end: (a.start ?? 0) + 5000, ingressInterface: 4, egressInterface: 9, srcAs: 64496, dstAs: 64511 };
    expect(flowKeyBytes(b)).toEqual(flowKeyBytes(a));
    for (const change of [{ sport: a.sport + 1 }, { dport: 80 }, { proto: 17 }, { start: (a.start ?? 0) + 1 }, { src: parseAddress("192.0.2.200") }, { dst: parseAddress("2001:db8::ff") }]) {
      expect(flowKeyBytes({ ...a, ...change })).not.toEqual(flowKeyBytes(a));
    }
  });
});

describe("coordinatedUniform", () => {
  const secret = counting(16);

  it("maps the hash to (0, 1] with 53 bits: u = (⌊h / 2^11⌋ + 1) / 2^53, on the paper's vector (Appendix A)", () => {
    const h = 0xa129ca6149be45e5n;
    expect(coordinatedUniform(secret, counting(15))).toBe(Number((h >> 11n) + 1n) / 2 ** 53);
  });

  it("lies in (0, 1] and gives the same flow key the same draw (property)", () => {
    fc.assert(
      fc.property(fc.uint8Array({ minLength: 16, maxLength: 16 }), fc.uint8Array({ maxLength: 64 }), (key, message) => {
        const u = coordinatedUniform(key, message);
        expect(u).toBeGreaterThan(0);
        expect(u).toBeLessThanOrEqual(1);
        expect(coordinatedUniform(Uint8Array.from(key), Uint8Array.from(message))).toBe(u);
      }),
    );
  });

  it("gives two copies of one flow the same draw even when exporters differ in counters and interfaces", () => {
    const a = flow(42, 1500);
    const b = { ...a, bytes: 3000n, ingressInterface: 2 };
    expect(draw(secret, b)).toBe(draw(secret, a));
  });

  it("draws differently under a different secret (a PRF: keys give unrelated functions, paper §1)", () => {
    const other = secret.map((b) => b ^ 0x5a);
    const flows = Array.from({ length: 1000 }, (_, i) => flow(i, 1));
    const same = flows.filter((f) => draw(secret, f) === draw(other, f)).length;
    expect(same).toBe(0);
    // Unrelated draws: the sample correlation of 1000 pairs is near 0 (SE ≈ 1/√1000 ≈ 0.032; 4 SE).
    const xs = flows.map((f) => draw(secret, f));
    const ys = flows.map((f) => draw(other, f));
    const mx = moments(xs).mean;
    const my = moments(ys).mean;
    const cov = xs.reduce((s, x, i) => s + (x - mx) * (ys[i] - my), 0) / (xs.length - 1);
    const r = cov / Math.sqrt(moments(xs).variance * moments(ys).variance);
    expect(Math.abs(r)).toBeLessThan(4 / Math.sqrt(1000));
  });

  it("refuses a secret that is not 16 bytes", () => {
    expect(() => coordinatedUniform(counting(8), counting(3))).toThrow(/16 bytes/);
  });

  /** Kolmogorov–Smirnov statistic D_n = sup |F_n(x) − x| of a sample against U(0,1). */
  function ksUniform(sample: number[]): number {
    const sorted = [...sample].sort((a, b) => a - b);
    const n = sorted.length;
    let d = 0;
    sorted.forEach((x, i) => {
      d = Math.max(d, (i + 1) / n - x, x - i / n);
    });
    return d;
  }

  // 1% critical value of √n·D_n: 1.63 (the 0.99 quantile of the asymptotic Kolmogorov
  // distribution, 1.6276; Kolmogorov 1933, tabulated by Smirnov 1948). Fixed secret, so
  // the run is reproducible.
  const n = 20_000;
  const critical = 1.63 / Math.sqrt(n);
  const draws = Array.from({ length: n }, (_, i) => draw(secret, flow(i, 1)));

  it("is uniform: 20 000 draws over distinct flow keys pass Kolmogorov–Smirnov against U(0,1) at the 1% level", () => {
    expect(new Set(draws).size).toBe(n);
    expect(ksUniform(draws)).toBeLessThan(critical);
  });

  it("the Kolmogorov–Smirnov check has power: the same draws squared (not uniform) fail it", () => {
    expect(ksUniform(draws.map((u) => u * u))).toBeGreaterThan(critical);
  });
});

describe("mergeCoordinated", () => {
  type Seen = { id: number; record: FlowRecord };
  const key = (e: { item: Seen }) => e.item.id;
  const keptIds = (s: ReservoirState<Seen>) => s.kept.map(key).sort((a, b) => a - b);

  function build(flows: Seen[], k: number, secret: Uint8Array): ReservoirState<Seen> {
    const r = new Reservoir<Seen>(k);
    for (const f of flows) r.offer(f, Number(f.record.bytes), draw(secret, f.record));
    return r.state();
  }
  const keyOf = (s: Seen) => flowKeyBytes(s.record);

  it("matches the worked example in its documentation", () => {
    const f = { id: 0, record: flow(0, 9) };
    const g = { id: 1, record: flow(1, 5) };
    const h = { id: 2, record: flow(2, 7) };
    const entry = (s: Seen, priority: number) => ({ item: s, weight: Number(s.record.bytes), priority });
    const a = { k: 2, tau: 0, seen: 2, kept: [entry(f, 9), entry(g, 5)] };
    const b = { k: 2, tau: 0, seen: 2, kept: [entry(f, 9), entry(h, 7)] };
    const m = mergeCoordinated([a, b], Infinity, keyOf);
    expect(m.duplicatesDropped).toBe(1);
    expect(m.state).toEqual({ k: 2, tau: 5, seen: 3, kept: [entry(f, 9), entry(h, 7)] });
  });

  it("on overlapping collectors equals one reservoir over the deduplicated union, and counts the duplicates (property; DLT 2007 merge rule)", () => {
    // Each flow is seen by collector A only (1), B only (2) or both (3), in each collector's own order.
    const scenario = fc.record({
      secret: fc.uint8Array({ minLength: 16, maxLength: 16 }),
      flows: fc.array(
        fc.record({
          octets: fc.integer({ min: 1, max: 1_000_000 }),
          seenBy: fc.constantFrom(1, 2, 3),
          rankA: fc.double({ min: 0, max: 1, noNaN: true }),
          rankB: fc.double({ min: 0, max: 1, noNaN: true }),
        }),
        { maxLength: 150 },
      ),
      kA: fc.integer({ min: 1, max: 30 }),
      kB: fc.integer({ min: 1, max: 30 }),
      kWanted: fc.option(fc.integer({ min: 1, max: 30 }), { nil: undefined }),
    });
    fc.assert(
      fc.property(scenario, ({ secret, flows, kA, kB, kWanted }) => {
        const all: Seen[] = flows.map((f, id) => ({ id, record: flow(id, f.octets) }));
        const priorities = all.map((s) => Number(s.record.bytes) / draw(secret, s.record));
        fc.pre(new Set(priorities).size === priorities.length); // ties: measure zero with continuous draws
        const streamA = all.filter((s) => flows[s.id].seenBy & 1).sort((p, q) => flows[p.id].rankA - flows[q.id].rankA);
        const streamB = all.filter((s) => flows[s.id].seenBy & 2).sort((p, q) => flows[p.id].rankB - flows[q.id].rankB);
        const a = build(streamA, kA, secret);
        const b = build(streamB, kB, secret);

        const merged = mergeCoordinated([a, b], kWanted ?? Infinity, keyOf);
        const km = Math.min(kWanted ?? Infinity, kA, kB);
        const direct = build(all, km, secret);

        expect(merged.state.k).toBe(km);
        expect(keptIds(merged.state)).toEqual(keptIds(direct));
        expect(merged.state.tau).toBe(direct.tau);
        const keptByBoth = a.kept.filter((e) => b.kept.some((f) => key(f) === key(e))).length;
        expect(merged.duplicatesDropped).toBe(keptByBoth);
        expect(merged.state.seen).toBe(streamA.length + streamB.length - keptByBoth);
        expect(merged.state.seen).toBeGreaterThanOrEqual(all.length);
      }),
      { numRuns: 300 },
    );
  });

  it("merging a reservoir with itself gives it back and drops every kept record once", () => {
    const secret = counting(16);
    const flows = Array.from({ length: 200 }, (_, id) => ({ id, record: flow(id, 40 + ((id * 7919) % 5000)) }));
    const r = build(flows, 20, secret);
    const m = mergeCoordinated([r, r], Infinity, keyOf);
    expect(m.duplicatesDropped).toBe(20);
    expect(keptIds(m.state)).toEqual(keptIds(r));
    expect(m.state.tau).toBe(r.tau);
  });

  it("on disjoint streams drops nothing and agrees with mergeStates (DLT 2007 merge rule)", () => {
    const secret = counting(16);
    const flows = Array.from({ length: 300 }, (_, id) => ({ id, record: flow(id, 40 + ((id * 104729) % 9000)) }));
    const a = build(flows.slice(0, 120), 25, secret);
    const b = build(flows.slice(120), 30, secret);
    const m = mergeCoordinated([a, b], 20, keyOf);
    expect(m.duplicatesDropped).toBe(0);
    expect(m.state).toEqual(mergeStates([a, b], 20));
  });

  it("refuses an empty input list and a non-positive sample size", () => {
    expect(() => mergeCoordinated([], 5, keyOf)).toThrow(/at least one/);
    expect(() => mergeCoordinated([{ k: 2, tau: 0, seen: 0, kept: [] }], 0, keyOf)).toThrow(/positive integer/);
  });
});

describe("subset sums after a coordinated deduplicating merge, Monte Carlo over secrets", () => {
  // DLT 2007 Theorem 1 applied to the deduplicated union stream: the merge equals a
  // priority sample of that stream, so Σ_{i∈Q∩S} max(w_i, τ) is unbiased for Σ_{i∈Q} w_i
  // over the draw of the secret (SipHash under a random key standing in for independent
  // uniforms, as a PRF does). Tolerance: 4 standard errors of the Monte Carlo mean, fixed seed.
  const N = 900;
  const K = 60;
  const TRIALS = 2000;
  const population = heavyTailedPopulation(N, 20121209).map((r) => ({ ...r, record: flow(r.id, r.bytes) }));
  type Flow = (typeof population)[number];
  // Collector A sees ids ≡ 0, 1 (mod 3), collector B ids ≡ 1, 2: a third of the flows reach both.
  const seenByA = population.filter((r) => r.id % 3 !== 2);
  const seenByB = population.filter((r) => r.id % 3 !== 0);
  const keys = population.map((r) => flowKeyBytes(r.record));

  const subsets: Record<string, (r: Flow) => boolean> = {
    everything: () => true,
    "port 443": (r) => r.port === 443,
    "flows both collectors saw": (r) => r.id % 3 === 1,
    "one block of twenty": (r) => r.block === 3,
  };
  const truth = (include: (r: Flow) => boolean) => population.reduce((s, r) => (include(r) ? s + r.bytes : s), 0);

  const estimates = new Map<string, number[]>(Object.keys(subsets).map((name) => [name, []]));
  const naiveTotals: number[] = [];
  const dropped: number[] = [];
  const random = seededUniform(20070601);
  for (let t = 0; t < TRIALS; t++) {
    const secret = secretFrom(random);
    const u = keys.map((k) => coordinatedUniform(secret, k));
    const sample = (flows: Flow[]) => {
      const r = new Reservoir<Flow>(K);
      for (const f of flows) r.offer(f, f.bytes, u[f.id]);
      return r.state();
    };
    const a = sample(seenByA);
    const b = sample(seenByB);
    const merged = mergeCoordinated([a, b], K, (f) => keys[f.id]);
    dropped.push(merged.duplicatesDropped);
    const kept = merged.state.kept.map((e) => e.item);
    for (const [name, include] of Object.entries(subsets)) {
      estimates.get(name)!.push(estimateSubset(merged.state.tau, kept, (r) => r.bytes, undefined, include).estimate);
    }
    const naive = mergeStates([a, b], K);
    naiveTotals.push(estimateSubset(naive.tau, naive.kept.map((e) => e.item), (r) => r.bytes).estimate);
  }

  for (const name of Object.keys(subsets)) {
    it(`bytes of ${name}: the mean estimate is within 4 standard errors of the deduplicated truth (DLT 2007 Thm 1)`, () => {
      const { mean, variance } = moments(estimates.get(name)!);
      expect(Math.abs(mean - truth(subsets[name]))).toBeLessThanOrEqual(4 * Math.sqrt(variance / TRIALS));
    });
  }

  it("the check has power: merging without deduplication overestimates the total by more than 4 standard errors", () => {
    const { mean, variance } = moments(naiveTotals);
    expect(mean - truth(subsets.everything)).toBeGreaterThan(4 * Math.sqrt(variance / TRIALS));
    expect(Math.min(...dropped)).toBeGreaterThan(0);
  });
});
