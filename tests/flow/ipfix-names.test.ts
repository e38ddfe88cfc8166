// JSON ingest and the IPFIX decoder read one element table (app/ipfix/elements.ts). Expected ids:
// RFC 7012 §5 / RFC 5102 §5 and the IANA "IPFIX Information Elements" registry.
import { describe, expect, test } from "vitest";
import { flowRecordWireSchema, parseFlowBatch, parseFlowRecord } from "~/flow/record";
import { elementByName, elementNames } from "~/ipfix/elements";

/** Weir's own short names (design brief), which are not IPFIX elements. */
const ALIASES = new Set(["src", "dst", "sport", "dport", "proto", "bytes", "packets", "start", "end"]);

const EXPECTED_IDS: Record<string, number> = {
  octetDeltaCount: 1,
  packetDeltaCount: 2,
  protocolIdentifier: 4,
  sourceTransportPort: 7,
  sourceIPv4Address: 8,
  ingressInterface: 10,
  destinationTransportPort: 11,
  destinationIPv4Address: 12,
  egressInterface: 14,
  bgpSourceAsNumber: 16,
  bgpDestinationAsNumber: 17,
  sourceIPv6Address: 27,
  destinationIPv6Address: 28,
  octetTotalCount: 85,
  packetTotalCount: 86,
  flowStartSeconds: 150,
  flowEndSeconds: 151,
  flowStartMilliseconds: 152,
  flowEndMilliseconds: 153,
  flowStartMicroseconds: 154,
  flowEndMicroseconds: 155,
  flowStartNanoseconds: 156,
  flowEndNanoseconds: 157,
};

const record = { src: "198.51.100.7", dst: "203.0.113.9", proto: 6, bytes: 1500, packets: 1 };

describe("IPFIX names in JSON records", () => {
  test("every IPFIX name the JSON schema accepts is in the element table with its registry id", () => {
    const names = Object.keys(flowRecordWireSchema.shape).filter((name) => !ALIASES.has(name));
    expect(names.sort()).toEqual(Object.keys(EXPECTED_IDS).sort());
    for (const name of names) expect([name, elementByName(name)?.id]).toEqual([name, EXPECTED_IDS[name]]);
  });

  test("every IANA element name of the table is accepted: the ones Weir does not store are ignored and counted", () => {
    const stored = new Set(Object.keys(flowRecordWireSchema.shape));
    const others = elementNames().filter((name) => !stored.has(name));
    expect(others.length).toBeGreaterThan(350); // the 2014 snapshot holds 399 elements (elements.ts)
    const ignored = new Map<string, number>();
    for (const name of others) {
      const result = parseFlowRecord({ ...record, [name]: 1 }, ignored);
      expect([name, result.ok]).toEqual([name, true]);
    }
    expect(ignored).toEqual(new Map(others.map((name) => [name, 1])));
    // tcpControlBits is element 6, vlanId 58 (RFC 7012 §5 / IANA registry, recalled from memory).
    expect(parseFlowBatch([{ ...record, tcpControlBits: 2, vlanId: 10 }, { ...record, vlanId: 11 }])).toMatchObject({ ok: true, ignoredFields: { tcpControlBits: 1, vlanId: 2 } });
  });

  test("time forms map to epoch milliseconds, truncated (RFC 7011 §6.1.7–6.1.10 define the units; JSON counts them from the Unix epoch)", () => {
    const at = Date.UTC(2024, 4, 1, 2, 0, 0);
    const start = (fields: Record<string, unknown>) => {
      const result = parseFlowRecord({ ...record, ...fields });
      if (!result.ok) throw new Error(JSON.stringify(result.issues));
      return [result.record.start, result.record.end];
    };
    expect(start({ flowStartSeconds: at / 1000, flowEndSeconds: at / 1000 + 5 })).toEqual([at, at + 5000]);
    expect(start({ flowStartMicroseconds: at * 1000 + 250_999, flowEndMicroseconds: (at + 1000) * 1000 + 999 })).toEqual([at + 250, at + 1000]);
    // Nanoseconds of 2024 exceed 2^53: exact as a decimal string, within 256 ns as a JSON number.
    expect(start({ flowStartNanoseconds: `${at + 123}456789`, flowEndNanoseconds: at * 1e6 + 2e9 })).toEqual([at + 123, at + 2000]);
    expect(start({ flowStartSeconds: "2024-05-01T02:00:00Z" })).toEqual([at, null]);
    // Two forms of one time agree when equal at the coarser one's precision; the finer one is kept.
    expect(start({ flowStartSeconds: at / 1000, flowStartMilliseconds: at + 999 })).toEqual([at + 999, null]);
    const clash = parseFlowRecord({ ...record, flowStartSeconds: at / 1000, start: at + 1000 });
    expect(clash.ok ? [] : clash.issues.map((i) => i.path)).toEqual(["flowStartSeconds"]);
  });

  test("total counts stand in for absent delta counts; beside a delta count they are ignored (RFC 7012 §5: octetTotalCount 85, octetDeltaCount 1)", () => {
    const { bytes: _b, packets: _p, ...noCounts } = record;
    const totals = parseFlowRecord({ ...noCounts, octetTotalCount: 4000, packetTotalCount: 3 });
    expect(totals.ok && [totals.record.bytes, totals.record.packets]).toEqual([4000n, 3n]);
    const ignored = new Map<string, number>();
    const both = parseFlowRecord({ ...record, octetTotalCount: 9000, packetTotalCount: 9 }, ignored);
    expect(both.ok && [both.record.bytes, both.record.packets]).toEqual([1500n, 1n]);
    expect(ignored).toEqual(new Map([["octetTotalCount", 1], ["packetTotalCount", 1]]));
    const none = parseFlowRecord(noCounts);
    expect(none.ok ? [] : none.issues.map((i) => i.message)).toEqual(["is required: send it as octetDeltaCount or bytes", "is required: send it as packetDeltaCount or packets"]);
  });

  test("an RFC 5103 reverse element is refused as one, not called invalid", () => {
    const result = parseFlowRecord({ ...record, reverseOctetDeltaCount: 10 });
    expect(result.ok).toBe(false);
    if (!result.ok) {
      expect(result.issues[0].message).toMatch(/^is an RFC 5103 reverse element \(enterprise 29305, id 1\): a Weir record carries one direction/);
      expect(result.issues[0].message).not.toMatch(/invalid|unknown|not a known/i);
    }
  });

  test("a name in no registry is an error; typos of Weir and IANA names get a suggestion", () => {
    const typo = parseFlowRecord({ ...record, octetDeltaCont: 5 });
    expect(!typo.ok && typo.issues[0].message).toContain("did you mean octetDeltaCount?");
    const ianaTypo = parseFlowRecord({ ...record, tcpControlBit: 5 });
    expect(!ianaTypo.ok && ianaTypo.issues[0].message).toContain("did you mean tcpControlBits?");
    const other = parseFlowRecord({ ...record, colour: "blue" });
    expect(!other.ok && other.issues[0].message).toBe("is neither a Weir field nor an IPFIX information element name (IANA registry)");
  });
});
