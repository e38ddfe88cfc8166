// The encoding examples of RFC 7011 Appendix A, written octet by octet from the RFC's figures
// (not with Weir's encoder), decoded by Weir's decoder and compared with the values the RFC
// states. Where a figure leaves a value open (the header's Export Time, Sequence Number and
// Observation Domain ID; the Enterprise Number of A.2.2 and A.4.2–A.4.3) the test picks one:
// 32473, the Private Enterprise Number for documentation (RFC 5612 §2, recalled from memory).
import { describe, expect, test } from "vitest";
import { concat, flow, harness, hex, source } from "./helpers";

// A.1: Version 0x000a, Length 152; the three open fields are chosen here.
const A1_HEADER = hex(`
  000a 0098    # Version = 0x000a, Length = 152
  6631a220     # Export Time: 2024-05-01T02:00:00Z (chosen)
  00000064     # Sequence Number: 100 (chosen)
  00000001     # Observation Domain ID: 1 (chosen)
`);

// A.2.1: Template Set, Length 28, Template ID 256, Field Count 5, five 4-octet fields.
const A21_TEMPLATE_SET = hex(`
  0002 001c    # Set ID = 2, Length = 28 octets
  0100 0005    # Template ID 256, Field Count = 5
  0008 0004    # sourceIPv4Address = 8, Field Length = 4
  000c 0004    # destinationIPv4Address = 12, Field Length = 4
  000f 0004    # ipNextHopIPv4Address = 15, Field Length = 4
  0002 0004    # packetDeltaCount = 2, Field Length = 4
  0001 0004    # octetDeltaCount = 1, Field Length = 4
`);

// A.3: Data Set for template 256, Length 64, three records.
const A3_DATA_SET = hex(`
  0100 0040    # Set ID = 256, Length = 64
  c000020c c00002fe c0000201 00001391 00518c81   # 192.0.2.12 | 192.0.2.254 | 192.0.2.1 | 5009 | 5344385
  c000021b c0000217 c0000202 000002ec 0005ef46   # 192.0.2.27 | 192.0.2.23  | 192.0.2.2 | 748  | 388934
  c0000238 c0000241 c0000203 00000005 00001986   # 192.0.2.56 | 192.0.2.65  | 192.0.2.3 | 5    | 6534
`);

// A.4.1: Options Template Set, Length 24, Template ID 258, scope lineCardId (141, 4 octets),
// exportedMessageTotalCount (41) and exportedFlowRecordTotalCount (42) in 2 octets, 2 octets of padding.
const A41_OPTIONS_TEMPLATE_SET = hex(`
  0003 0018    # Set ID = 3, Length = 24
  0102 0003    # Template ID 258, Field Count = 3
  0001 008d    # Scope Field Count = 1, lineCardId = 141
  0004 0029    # Scope 1 Field Length = 4, exportedMessageTotalCount = 41
  0002 002a    # Field Length = 2, exportedFlowRecordTotalCo. = 42
  0002 0000    # Field Length = 2, Padding
`);

// The Data Set of A.1's message for template 258 is not drawn in the RFC; A.4.4 reports the same
// information (two line cards: 345 messages / 10201 flows, 690 / 20402), written here for 258.
// With it the message is 16 + 28 + 64 + 24 + 20 = 152 octets, the Length of A.1.
const A4_OPTIONS_DATA_FOR_258 = hex(`
  0102 0014    # Set ID = 258, Length = 20
  00000001 0159 27d9   # line card 1 | 345 | 10201
  00000002 02b2 4fb2   # line card 2 | 690 | 20402
`);

const PEN = "00007ed9"; // 32473, documentation PEN (RFC 5612)

// A.2.2: Template Set, Length 32, Template ID 257, an enterprise-specific element 15 of 4 octets.
const A22_TEMPLATE_SET = hex(`
  0002 0020    # Set ID = 2, Length = 32 octets
  0101 0005    # Template ID 257, Field Count = 5
  0008 0004    # sourceIPv4Address = 8, Field Length = 4
  000c 0004    # destinationIPv4Address = 12, Field Length = 4
  800f 0004    # 1 | Information Element id. = 15, Field Length = 4
  ${PEN}       # Enterprise number
  0002 0004    # packetDeltaCount = 2, Field Length = 4
  0001 0004    # octetDeltaCount = 1, Field Length = 4
`);

// A.4.2: Options Template Set, Length 28, Template ID 259, an enterprise-specific element 42 of 4 octets.
const A42_OPTIONS_TEMPLATE_SET = hex(`
  0003 001c    # Set ID = 3, Length = 28
  0103 0003    # Template ID 259, Field Count = 3
  0001 008d    # Scope Field Count = 1, lineCardId = 141
  0004 0029    # Scope 1 Field Length = 4, exportedMessageTotalCount = 41
  0002 802a    # Field Length = 2, 1 | Information Element id. = 42
  0004 ${PEN.slice(0, 4)}   # Field Length = 4, Enterprise number ...
  ${PEN.slice(4)} 0000      # ... Enterprise number, Padding
`);

// A.4.3: Options Template Set, Length 28, Template ID 260, enterprise-specific scope 123.
const A43_OPTIONS_TEMPLATE_SET = hex(`
  0003 001c    # Set ID = 3, Length = 28
  0104 0003    # Template ID 260, Field Count = 3
  0001 807b    # Scope Field Count = 1, 1 | Scope 1 Infor. El. id. = 123
  0004 ${PEN.slice(0, 4)}   # Scope 1 Field Length = 4, Enterprise Number ...
  ${PEN.slice(4)} 0029      # ... Enterprise Number, exportedMessageTotalCount = 41
  0002 002a    # Field Length = 2, exportedFlowRecordTotalCo. = 42
  0002 0000    # Field Length = 2, Padding
`);

// A.4.4: Data Set for template 260, Length 20.
const A44_DATA_SET = hex(`
  0104 0014    # Set ID = 260, Length = 20
  00000001     # 1
  0159 27d9    # 345 | 10201
  00000002     # 2
  02b2 4fb2    # 690 | 20402
`);

function header(length: number, sequence: number, domain = 1): Uint8Array {
  const h = new Uint8Array(16);
  const v = new DataView(h.buffer);
  v.setUint16(0, 10);
  v.setUint16(2, length);
  v.setUint32(4, 1714528800);
  v.setUint32(8, sequence);
  v.setUint32(12, domain);
  return h;
}

function message(sequence: number, ...sets: Uint8Array[]): Uint8Array {
  const body = concat(...sets);
  return concat(header(16 + body.length, sequence), body);
}

describe("RFC 7011 Appendix A", () => {
  test("A.1: the whole example message (A.2.1, A.3, A.4.1 and two options records) is 152 octets and decodes", () => {
    const m = concat(A1_HEADER, A21_TEMPLATE_SET, A3_DATA_SET, A41_OPTIONS_TEMPLATE_SET, A4_OPTIONS_DATA_FOR_258);
    expect(m.length).toBe(152); // A.1: Length = 152
    const h = harness();
    const { outcome, rows } = h.decode(m);
    // A.3's records carry no protocolIdentifier, which Weir needs for a flow: all three are
    // counted unusable, none is stored (Weir's rule, issue 9 §1).
    expect(outcome).toEqual({ status: "decoded", version: 10, domain: 1, records: 0, unusable: 3, waiting: 0, replayed: 0, lost: 0 });
    expect(rows).toEqual([]);
    const [stats] = h.stats(1);
    // A.2.1 and A.4.1: the templates as the figures define them.
    expect(stats.templates).toEqual([
      { id: 256, options: false, fields: ["sourceIPv4Address", "destinationIPv4Address", "ipNextHopIPv4Address", "packetDeltaCount", "octetDeltaCount"], refreshedAt: expect.any(Number) },
      { id: 258, options: true, fields: ["lineCardId", "exportedMessageTotalCount", "exportedFlowRecordTotalCount"], refreshedAt: expect.any(Number) },
    ]);
    expect(stats.malformed).toBe(0);
  });

  test("A.3: the three Flow Records' addresses and counters (4-octet reduced-size counters, RFC 7011 §6.2)", () => {
    // The RFC's template and records with one amendment: Weir stores a flow only with its
    // protocol, so protocolIdentifier (4, 1 octet) is appended to A.2.1's template and an octet 6
    // (TCP) to each A.3 record, with 1 octet of set padding (RFC 7011 §3.3.1).
    const template = concat(hex("0002 0020 0100 0006"), A21_TEMPLATE_SET.subarray(8), hex("0004 0001"));
    const data = hex(`
      0100 0044
      c000020c c00002fe c0000201 00001391 00518c81 06
      c000021b c0000217 c0000202 000002ec 0005ef46 06
      c0000238 c0000241 c0000203 00000005 00001986 06
      00
    `);
    const { outcome, rows } = harness().decode(message(0, template, data));
    expect(outcome).toMatchObject({ status: "decoded", records: 3, unusable: 0 });
    // The table of A.3: Src IP Addr., Dst IP Addr., Packet Number, Octets Number (the next hop is not stored).
    expect(rows.map(flow)).toEqual([
      { src: "192.0.2.12", dst: "192.0.2.254", sport: 0, dport: 0, proto: 6, bytes: 5344385n, packets: 5009n, start: null, end: null },
      { src: "192.0.2.27", dst: "192.0.2.23", sport: 0, dport: 0, proto: 6, bytes: 388934n, packets: 748n, start: null, end: null },
      { src: "192.0.2.56", dst: "192.0.2.65", sport: 0, dport: 0, proto: 6, bytes: 6534n, packets: 5n, start: null, end: null },
    ]);
  });

  test("A.2.2: an enterprise-specific element is skipped by its length and counted per (PEN, id)", () => {
    // A.3's first record under template 257, the enterprise value (4 octets) in third place.
    const data = hex(`
      0101 0018
      c000020c c00002fe 0000abcd 00001391 00518c81
    `);
    const h = harness();
    const { outcome } = h.decode(message(0, A22_TEMPLATE_SET, data));
    expect(outcome).toMatchObject({ status: "decoded", records: 0, unusable: 1 }); // no protocol: unusable, as above
    const [stats] = h.stats(1);
    expect(stats.enterpriseElements).toEqual([{ enterprise: 32473, id: 15, count: 1 }]);
    expect(stats.templates[0].fields).toEqual(["sourceIPv4Address", "destinationIPv4Address", "e32473.15", "packetDeltaCount", "octetDeltaCount"]);
  });

  test("A.4.2: an options template with an enterprise-specific option field is accepted", () => {
    const h = harness();
    expect(h.decode(message(0, A42_OPTIONS_TEMPLATE_SET)).outcome).toMatchObject({ status: "decoded", records: 0 });
    expect(h.stats(1)[0].templates).toEqual([
      { id: 259, options: true, fields: ["lineCardId", "exportedMessageTotalCount", "e32473.42"], refreshedAt: expect.any(Number) },
    ]);
  });

  test("A.4.3 and A.4.4: an enterprise-specific scope; the two options records count as Data Records for the sequence", () => {
    const h = harness();
    const first = h.decode(message(100, A43_OPTIONS_TEMPLATE_SET, A44_DATA_SET)).outcome;
    expect(first).toMatchObject({ status: "decoded", records: 0, unusable: 0, lost: 0 });
    expect(h.stats(1)[0].enterpriseElements).toEqual([{ enterprise: 32473, id: 123, count: 2 }]);
    // RFC 7011 §3.1: the Sequence Number counts all Data Records sent before, options records
    // included, so the next message carries 102: nothing lost.
    const next = h.decode(message(102, A44_DATA_SET)).outcome;
    expect(next).toMatchObject({ status: "decoded", lost: 0 });
    expect(h.stats(1)[0].lost).toBe(0);
  });

  describe("A.5: variable-length Information Elements", () => {
    // A template with a variable-length interfaceName (82, string; RFC 7011 §7: Field Length 65535)
    // between the addresses and the counters, so every later offset depends on the length read.
    const template = hex(`
      0002 0020   # Template Set, Length 32
      0105 0006   # Template ID 261, Field Count 6
      0008 0004   # sourceIPv4Address
      000c 0004   # destinationIPv4Address
      0052 ffff   # interfaceName, Field Length = 65535 (variable)
      0004 0001   # protocolIdentifier
      0002 0004   # packetDeltaCount
      0001 0004   # octetDeltaCount
    `);

    test("A.5.1: a length below 255 in one octet before the element", () => {
      const data = hex(`
        0105 001c                  # Set ID = 261, Length = 4 + 8 + 6 + 9 + 1 = 28
        c0000201 c0000202
        05 6574683031              # Length 5 | 5-octet Information Element ("eth01")
        11 00000002 00000080       # UDP | 2 packets | 128 octets
        00                         # padding
      `);
      const { outcome, rows } = harness().decode(message(0, template, data));
      expect(outcome).toMatchObject({ status: "decoded", records: 1, unusable: 0 });
      expect(rows.map(flow)).toEqual([{ src: "192.0.2.1", dst: "192.0.2.2", sport: 0, dport: 0, proto: 17, bytes: 128n, packets: 2n, start: null, end: null }]);
    });

    test("A.5.2: 255 then a 2-octet length (1000) before the element", () => {
      const element = "61".repeat(1000); // a 1000-octet Information Element
      const data = hex(`
        0105 0400                  # Set ID = 261, Length = 4 + 8 + 3 + 1000 + 9 = 1024
        c0000201 c0000202
        ff 03e8                    # 255 | Length = 1000
        ${element}
        06 00000003 000005dc       # TCP | 3 packets | 1500 octets
      `);
      const { outcome, rows } = harness().decode(message(0, template, data));
      expect(outcome).toMatchObject({ status: "decoded", records: 1, unusable: 0 });
      expect(rows.map(flow)).toEqual([{ src: "192.0.2.1", dst: "192.0.2.2", sport: 0, dport: 0, proto: 6, bytes: 1500n, packets: 3n, start: null, end: null }]);
    });

    test("a variable length that runs past its set drops the message (RFC 7011 §7)", () => {
      const data = hex(`
        0105 0018                  # Length = 4 + 8 + 3 + 9 = 24
        c0000201 c0000202
        ff 03e8                    # claims 1000 octets, but the set ends after 9 more
        000000000000000000
      `);
      const h = harness();
      const { outcome, rows } = h.decode(message(0, template, data), source());
      expect(outcome).toMatchObject({ status: "dropped", version: 10, domain: 1 });
      expect(outcome.status === "dropped" && outcome.reason).toMatch(/variable-length field .* runs past the end of its set/);
      expect(rows).toEqual([]);
      expect(h.stats(1)[0].malformed).toBe(1);
    });
  });
});
