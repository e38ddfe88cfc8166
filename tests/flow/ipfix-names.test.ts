// JSON ingest and the IPFIX decoder read one element table (app/ipfix/elements.ts). Expected ids:
// RFC 7012 §5 / RFC 5102 §5 and the IANA "IPFIX Information Elements" registry.
import { describe, expect, test } from "vitest";
import { flowRecordWireSchema, parseFlowRecord } from "~/flow/record";
import { elementByName } from "~/ipfix/elements";

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
  flowStartMilliseconds: 152,
  flowEndMilliseconds: 153,
};

const record = { src: "198.51.100.7", dst: "203.0.113.9", proto: 6, bytes: 1500, packets: 1 };

describe("IPFIX names in JSON records", () => {
  test("every IPFIX name the JSON schema accepts is in the element table with its registry id", () => {
    const names = Object.keys(flowRecordWireSchema.shape).filter((name) => !ALIASES.has(name));
    expect(names.sort()).toEqual(Object.keys(EXPECTED_IDS).sort());
    for (const name of names) expect([name, elementByName(name)?.id]).toEqual([name, EXPECTED_IDS[name]]);
  });

  test("an IPFIX element Weir does not store is named as such, with its id", () => {
    const result = parseFlowRecord({ ...record, tcpControlBits: 2 });
    // tcpControlBits is element 6 (RFC 5102 §5.8.7, recalled from memory; IANA registry).
    expect(result).toEqual({ ok: false, issues: [{ path: "tcpControlBits", message: "is an IPFIX element (id 6) that Weir does not store; leave it out" }] });
  });

  test("an RFC 5103 reverse element is named as such", () => {
    const result = parseFlowRecord({ ...record, reverseOctetDeltaCount: 10 });
    expect(result.ok).toBe(false);
    if (!result.ok) expect(result.issues[0].message).toMatch(/^is an RFC 5103 reverse element \(enterprise 29305, id 1\)/);
  });

  test("typos still get a suggestion, and other unknown names the plain message", () => {
    const typo = parseFlowRecord({ ...record, octetDeltaCont: 5 });
    expect(!typo.ok && typo.issues[0].message).toContain("did you mean octetDeltaCount?");
    const other = parseFlowRecord({ ...record, colour: "blue" });
    expect(!other.ok && other.issues[0].message).toBe("is not a known field (IPFIX element names and Weir aliases only)");
  });
});
