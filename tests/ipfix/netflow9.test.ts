// NetFlow v9 export packets written octet by octet from the layouts of RFC 3954: the header
// (§5.1), a Template FlowSet (§5.2), a Data FlowSet with padding (§5.3), an Options Template
// FlowSet (§6.1) and an Options Data Record (§6.2); field types from §8. The values are
// invented (documentation addresses, RFC 5737).
import { describe, expect, test } from "vitest";
import { flow, harness, hex, source } from "./helpers";

const HEADER_1 = hex(`
  0009 0003    # Version 9, Count = 3 (one template record and two data records, §5.1)
  0036ee80     # sysUpTime = 3 600 000 ms
  6631a220     # UNIX Secs = 1714528800 (2024-05-01T02:00:00Z)
  00000000     # Sequence Number = 0
  00000021     # Source ID = 33
`);

const TEMPLATE_FLOWSET = hex(`
  0000 0034    # FlowSet ID = 0, Length = 52
  0100 000b    # Template ID 256, Field Count = 11
  0008 0004    # IPV4_SRC_ADDR
  000c 0004    # IPV4_DST_ADDR
  0007 0002    # L4_SRC_PORT
  000b 0002    # L4_DST_PORT
  0004 0001    # PROTOCOL
  0001 0004    # IN_BYTES (N = 4, the default)
  0002 0004    # IN_PKTS
  0016 0004    # FIRST_SWITCHED (22)
  0015 0004    # LAST_SWITCHED (21)
  000a 0002    # INPUT_SNMP (N = 2, the default)
  000e 0002    # OUTPUT_SNMP
`);

const DATA_FLOWSET = hex(`
  0100 0048    # FlowSet ID = Template ID 256, Length = 72 (two 33-octet records and 2 octets of padding)
  c6336407 cb007109 c93a 01bb 06 00003a98 0000000c 0036c770 0036daf8 0003 0004
  c0000221 c63364c8 0035 80e8 11 0000004c 00000001 0036ea98 0036ea98 0005 0003
  0000         # Padding to a 4-octet boundary
`);

const HEADER_2 = hex(`
  0009 0004    # Version 9, Count = 4 (options template, options data, two data records)
  0036f250     # sysUpTime = 3 601 000 ms
  6631a221     # UNIX Secs = 1714528801
  00000001     # Sequence Number = 1
  00000021     # Source ID = 33
`);

const OPTIONS_TEMPLATE_FLOWSET = hex(`
  0001 0018    # FlowSet ID = 1, Length = 24
  0101         # Template ID 257
  0004         # Option Scope Length = 4 octets (one scope field)
  0008         # Option Length = 8 octets (two option fields)
  0001 0004    # Scope 1 Field Type = 1 (System), Length 4
  0022 0004    # SAMPLING_INTERVAL (34), Length 4
  0023 0001    # SAMPLING_ALGORITHM (35), Length 1
  0000         # Padding
`);

const OPTIONS_DATA_FLOWSET = hex(`
  0101 0010    # FlowSet ID = Template ID 257, Length = 16
  00000000     # Scope 1 value (the system)
  00000064     # SAMPLING_INTERVAL = 100: one packet in 100
  01           # SAMPLING_ALGORITHM = 1 (deterministic)
  000000       # Padding
`);

const BOOT = 1714528800_000 - 3_600_000;

describe("NetFlow v9 (RFC 3954)", () => {
  test("§5.1–5.3: header, Template FlowSet and a padded Data FlowSet decode to the records", () => {
    const h = harness();
    const { outcome, rows } = h.decode(new Uint8Array([...HEADER_1, ...TEMPLATE_FLOWSET, ...DATA_FLOWSET]), source("netflow9-udp"));
    expect(outcome).toEqual({ status: "decoded", version: 9, domain: 33, records: 2, unusable: 0, waiting: 0, replayed: 0, lost: 0 });
    // FIRST/LAST_SWITCHED are sysUpTime at the first and last packet (§8): boot + uptime.
    expect(rows.map((r) => ({ ...flow(r), in: r.ingressInterface, out: r.egressInterface }))).toEqual([
      { src: "198.51.100.7", dst: "203.0.113.9", sport: 51514, dport: 443, proto: 6, bytes: 15000n, packets: 12n, start: BOOT + 3_590_000, end: BOOT + 3_595_000, in: 3, out: 4 },
      { src: "192.0.2.33", dst: "198.51.100.200", sport: 53, dport: 33000, proto: 17, bytes: 76n, packets: 1n, start: BOOT + 3_599_000, end: BOOT + 3_599_000, in: 5, out: 3 },
    ]);
    expect(h.stats(33)[0]).toMatchObject({ version: 9, lostUnit: "packets", templates: [{ id: 256, options: false }] });
    expect(h.stats(33)[0].templates[0].fields).toEqual([
      "sourceIPv4Address", "destinationIPv4Address", "sourceTransportPort", "destinationTransportPort", "protocolIdentifier",
      "octetDeltaCount", "packetDeltaCount", "flowStartSysUpTime", "flowEndSysUpTime", "ingressInterface", "egressInterface",
    ]);
  });

  test("§6.1–6.2: an Options Template FlowSet and its Options Data Record announce sampling; counters are scaled", () => {
    const h = harness();
    h.decode(new Uint8Array([...HEADER_1, ...TEMPLATE_FLOWSET, ...DATA_FLOWSET]), source("netflow9-udp"));
    const { outcome, rows } = h.decode(new Uint8Array([...HEADER_2, ...OPTIONS_TEMPLATE_FLOWSET, ...OPTIONS_DATA_FLOWSET, ...DATA_FLOWSET]), source("netflow9-udp"));
    expect(outcome).toMatchObject({ status: "decoded", version: 9, domain: 33, records: 2, lost: 0 }); // sequence 0 → 1: no packet lost (§5.1)
    expect(rows.map((r) => [r.bytes, r.packets])).toEqual([[1_500_000n, 1200n], [7600n, 100n]]);
    const [stats] = h.stats(33);
    expect(stats.samplingInterval).toBe(100);
    expect(stats.templates.find((t) => t.id === 257)).toMatchObject({ options: true, fields: ["scope1", "samplingInterval", "samplingAlgorithm"] });
  });

  test("§5.1: a FlowSet whose length runs past the packet drops the packet", () => {
    const broken = new Uint8Array([...HEADER_1, ...TEMPLATE_FLOWSET, ...DATA_FLOWSET.subarray(0, 40)]);
    const { outcome } = harness().decode(broken, source("netflow9-udp"));
    expect(outcome).toEqual({ status: "dropped", version: 9, domain: 33, reason: "FlowSet 2 (id 256) of length 72 runs past the message end (40 octets left)" });
  });
});
