import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { parseFlowRecord, parseFlowRecordThoroughly } from "~/flow/record";

// parseFlowRecord tries a one-pass fast path before the thorough zod path. The
// fast path must never change an answer: for any input, both give the same result
// (common practice for an optimised path beside a reference one).

const v4 = fc.tuple(fc.nat(255), fc.nat(255), fc.nat(255), fc.nat(255)).map((o) => o.join("."));
const junk = fc.oneof(fc.constant(null), fc.string(), fc.integer({ min: -10, max: 70000 }), fc.double(), fc.boolean(), fc.constant("18446744073709551615"), fc.constant(2 ** 53), fc.constant("2026-01-01T00:00:00Z"));

/** Mostly `usual`, about one time in twenty from `arb`. */
const rarely = <T, U>(arb: fc.Arbitrary<T>, usual: U) => fc.oneof({ arbitrary: fc.constant(usual), weight: 19 }, { arbitrary: arb, weight: 1 });

// Each field: its names (alias first) and a valid value generator.
const fields: [string[], fc.Arbitrary<unknown>, boolean][] = [
  [["src", "sourceIPv4Address"], v4, true],
  [["dst", "destinationIPv6Address"], fc.ipV6(), true],
  [["sport", "sourceTransportPort"], fc.integer({ min: 0, max: 65535 }), false],
  [["dport", "destinationTransportPort"], fc.integer({ min: 0, max: 65535 }), false],
  [["proto", "protocolIdentifier"], fc.integer({ min: 0, max: 255 }), true],
  [["bytes", "octetDeltaCount"], fc.integer({ min: 1, max: 2 ** 40 }), true],
  [["packets", "packetDeltaCount"], fc.integer({ min: 1, max: 1e6 }), true],
  [["start", "flowStartMilliseconds"], fc.integer({ min: 0, max: 2e12 }), false],
  [["end", "flowEndMilliseconds"], fc.integer({ min: 0, max: 2e12 }), false],
  [["ingressInterface"], fc.integer({ min: 0, max: 2 ** 32 - 1 }), false],
  [["bgpDestinationAsNumber"], fc.integer({ min: 64496, max: 64511 }), false],
  // Other time forms and the total counts (RFC 7012), mapped; other IANA elements, ignored and counted.
  [["flowStartSeconds", "flowStartMicroseconds"], fc.integer({ min: 0, max: 2e9 }), false],
  [["flowEndNanoseconds", "flowEndMicroseconds"], fc.integer({ min: 0, max: 2e18 }), false],
  [["octetTotalCount", "packetTotalCount"], fc.integer({ min: 1, max: 2 ** 40 }), false],
  [["tcpControlBits", "vlanId", "ipClassOfService"], fc.integer({ min: 0, max: 255 }), false],
];

const record = fc
  .tuple(
    ...fields.map(([names, valid, required]) =>
      fc.record({
        present: required ? rarely(fc.constant(false), true) : fc.boolean(),
        name: fc.constantFrom(...names),
        value: valid,
        twice: rarely(fc.boolean(), undefined),
        broken: rarely(junk, undefined),
      }),
    ),
    rarely(fc.string({ minLength: 1 }), undefined),
  )
  .map(([...parts]) => {
    const unknown = parts.pop() as string | undefined;
    const out: Record<string, unknown> = {};
    (parts as { present: boolean; name: string; value: unknown; twice?: boolean; broken?: unknown }[]).forEach((p, i) => {
      if (!p.present) return;
      out[p.name] = p.broken !== undefined ? p.broken : p.value;
      const other = fields[i][0].find((n) => n !== p.name);
      // The same field under its second name, with the same or a different value.
      if (p.twice !== undefined && other) out[other] = p.twice ? p.value : typeof p.value === "number" ? p.value + 1 : "192.0.2.255";
    });
    if (unknown !== undefined) out[`x-${unknown}`] = 1;
    return out;
  });

describe("the fast path of parseFlowRecord", () => {
  it("gives the same answer as the thorough path for any input (property)", () => {
    let accepted = 0;
    let refused = 0;
    fc.assert(
      fc.property(record, (value) => {
        const ignoredFast = new Map<string, number>();
        const ignoredThorough = new Map<string, number>();
        const result = parseFlowRecord(value, ignoredFast);
        expect(result).toEqual(parseFlowRecordThoroughly(value, ignoredThorough));
        expect(ignoredFast).toEqual(ignoredThorough);
        if (result.ok) accepted++;
        else refused++;
      }),
      { numRuns: 3000 },
    );
    // The generator must reach both branches often enough for the check to mean something.
    expect(accepted).toBeGreaterThan(100);
    expect(refused).toBeGreaterThan(100);
  });
});
