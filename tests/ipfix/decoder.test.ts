// Hand-built messages (scripts/ipfix/encode.ts, an encoder that shares no code with the
// decoder) for the field encodings, times, counters, biflows and sampling of RFC 7011 / RFC 3954.
// Invented data: documentation addresses (RFC 5737, RFC 3849) and private AS numbers (RFC 5398).
import { describe, expect, test } from "vitest";
import { type Field, ipfixMessage, type IpfixSetDesc, netflow9Packet, ntpTimestamp, VARIABLE, type Value } from "../../scripts/ipfix/encode";
import { flow, harness, source, T0 } from "./helpers";

const EXPORT = 1714528800; // 2024-05-01T02:00:00Z, export time of every message here
const KEY: Field[] = [{ id: 8, length: 4 }, { id: 12, length: 4 }, { id: 7, length: 2 }, { id: 11, length: 2 }, { id: 4, length: 1 }];
const KEY_VALUES: Value[] = ["198.51.100.7", "203.0.113.9", 51514, 443, 6];

function message(sets: IpfixSetDesc[], sequence = 0, domain = 1): Uint8Array {
  return ipfixMessage({ exportTime: EXPORT, sequence, domain, sets });
}

/** One template and one data set of the given records. */
function single(fields: Field[], records: Value[][], id = 256): Uint8Array {
  return message([{ templates: [{ id, fields }] }, { templateId: id, fields, records }]);
}

describe("reduced-size encoding (RFC 7011 §6.2)", () => {
  test.each([1, 2, 3, 4, 5, 6, 7, 8])("octetDeltaCount and packetDeltaCount in %i octets", (octets) => {
    const fields = [...KEY, { id: 1, length: octets }, { id: 2, length: octets }];
    const largest = (1n << BigInt(8 * octets)) - 1n; // only leading zeros are dropped: any value that fits
    const { rows } = harness().decode(single(fields, [[...KEY_VALUES, largest, 1]]));
    expect(rows.map((r) => [r.bytes, r.packets])).toEqual([[largest, 1n]]);
  });

  test("ports, interfaces and AS numbers in fewer octets (NetFlow v9 sends interfaces in 2 by default, RFC 3954 §8)", () => {
    const fields: Field[] = [
      { id: 8, length: 4 }, { id: 12, length: 4 }, { id: 7, length: 1 }, { id: 11, length: 1 }, { id: 4, length: 1 },
      { id: 1, length: 4 }, { id: 2, length: 4 }, { id: 10, length: 2 }, { id: 14, length: 3 }, { id: 16, length: 2 }, { id: 17, length: 4 },
    ];
    const { rows } = harness().decode(single(fields, [["192.0.2.1", "192.0.2.2", 53, 200, 17, 100, 1, 513, 65536, 64496, 64511]]));
    expect(rows.map((r) => [r.sport, r.dport, r.ingressInterface, r.egressInterface, r.srcAs, r.dstAs])).toEqual([[53, 200, 513, 65536, 64496, 64511]]);
  });

  test("a field wider than its type allows is a malformed template", () => {
    const fields = [...KEY.slice(0, 4), { id: 4, length: 2 }, { id: 1, length: 9 }, { id: 2, length: 4 }];
    const { outcome } = harness().decode(single(fields, [[...KEY_VALUES.slice(0, 4), 6, 1n, 1]]));
    expect(outcome).toMatchObject({ status: "dropped", reason: "template 256: protocolIdentifier (4) has length 2; its type takes at most 1 octets (RFC 7011 §6.2)" });
  });

  test("interfaces and AS numbers absent from the template stay absent (null), not zero", () => {
    const fields = [...KEY, { id: 1, length: 4 }, { id: 2, length: 4 }];
    const { rows } = harness().decode(single(fields, [[...KEY_VALUES, 1500, 3]]));
    expect(rows.map((r) => [r.ingressInterface, r.egressInterface, r.srcAs, r.dstAs])).toEqual([[null, null, null, null]]);
  });
});

describe("variable-length fields (RFC 7011 §7)", () => {
  const fields: Field[] = [{ id: 82, length: VARIABLE }, ...KEY, { id: 83, length: VARIABLE }, { id: 1, length: 4 }, { id: 2, length: 4 }];

  test("the 1-octet and the 3-octet length forms, empty and long values, decode to the same records", () => {
    const records: Value[][] = [
      ["ge-0/0/0", ...KEY_VALUES, "", 1000, 2],
      ["x".repeat(254), ...KEY_VALUES, "uplink to 192.0.2.0/24", 2000, 3],
      ["y".repeat(300), ...KEY_VALUES, null, 3000, 4], // 300 octets: only the 3-octet form can carry it
    ];
    const short = harness().decode(message([{ templates: [{ id: 256, fields }] }, { templateId: 256, fields, records }]));
    const long = harness().decode(message([{ templates: [{ id: 256, fields }] }, { templateId: 256, fields, records, longLengths: true }]));
    expect(short.rows.map((r) => [r.bytes, r.packets, r.sport])).toEqual([[1000n, 2n, 51514], [2000n, 3n, 51514], [3000n, 4n, 51514]]);
    expect(long.rows).toEqual(short.rows);
  });

  test("a mapped element sent as variable-length is refused: Weir reads it only as a fixed-length field", () => {
    const bad = [...KEY, { id: 1, length: VARIABLE }, { id: 2, length: 4 }];
    const { outcome } = harness().decode(message([{ templates: [{ id: 256, fields: bad }] }]));
    expect(outcome).toMatchObject({ status: "dropped", reason: expect.stringContaining("octetDeltaCount (1) is sent as variable-length") });
  });
});

describe("padding (RFC 7011 §3.3.1)", () => {
  test("padding after the records of a data set, a template set and an options template set is skipped", () => {
    const fields = [...KEY, { id: 1, length: 4 }, { id: 2, length: 4 }]; // 21-octet records
    const options = { id: 400, scope: [{ id: 149, length: 4 }], fields: [{ id: 34, length: 4 }] };
    const m = message([
      { templates: [{ id: 256, fields }], padding: 3 },
      { optionsTemplates: [options], padding: 2 },
      { templateId: 256, fields, records: [[...KEY_VALUES, 100, 1], [...KEY_VALUES, 200, 2]], padding: 3 },
    ]);
    const { outcome, rows } = harness().decode(m);
    expect(outcome).toMatchObject({ status: "decoded", records: 2, unusable: 0 });
    expect(rows.map((r) => r.bytes)).toEqual([100n, 200n]);
  });
});

describe("enterprise-specific elements (RFC 7011 §3.2)", () => {
  test("skipped by length, fixed or variable, and counted per (PEN, id) once per record", () => {
    const fields: Field[] = [
      { id: 1000, length: 4, enterprise: 32473 }, ...KEY, { id: 7, length: VARIABLE, enterprise: 32473 },
      { id: 1, length: 4 }, { id: 2, length: 4 }, { id: 1000, length: 2, enterprise: 64496 },
    ];
    const h = harness();
    const { outcome, rows } = h.decode(single(fields, [
      [0xdeadbeef, ...KEY_VALUES, "opaque", 100, 1, 7],
      [1, ...KEY_VALUES, "", 200, 2, 8],
    ]));
    expect(outcome).toMatchObject({ status: "decoded", records: 2 });
    expect(rows.map((r) => r.bytes)).toEqual([100n, 200n]);
    expect(h.stats(1)[0].enterpriseElements).toEqual([
      { enterprise: 32473, id: 1000, count: 2 },
      { enterprise: 32473, id: 7, count: 2 },
      { enterprise: 64496, id: 1000, count: 2 },
    ]);
    expect(h.stats(1)[0].templates[0].fields).toEqual([
      "e32473.1000", "sourceIPv4Address", "destinationIPv4Address", "sourceTransportPort", "destinationTransportPort",
      "protocolIdentifier", "e32473.7", "octetDeltaCount", "packetDeltaCount", "e64496.1000",
    ]);
  });

  test("an IANA id the 2014 table does not know is skipped and shown as ie<id>", () => {
    const fields: Field[] = [...KEY, { id: 1, length: 4 }, { id: 2, length: 4 }, { id: 490, length: 4 }];
    const h = harness();
    expect(h.decode(single(fields, [[...KEY_VALUES, 100, 1, 9]])).rows).toHaveLength(1);
    expect(h.stats(1)[0].templates[0].fields.at(-1)).toBe("ie490");
  });
});

describe("usable records", () => {
  const fields = [...KEY, { id: 1, length: 4 }, { id: 2, length: 4 }];
  test("records with zero bytes or packets are counted unusable, not written (priority sampling needs w > 0)", () => {
    const { outcome, rows } = harness().decode(single(fields, [[...KEY_VALUES, 0, 1], [...KEY_VALUES, 100, 0], [...KEY_VALUES, 100, 1]]));
    expect(outcome).toMatchObject({ records: 1, unusable: 2 });
    expect(rows).toHaveLength(1);
  });

  test.each([
    ["no source address", [{ id: 12, length: 4 }, { id: 4, length: 1 }, { id: 1, length: 4 }, { id: 2, length: 4 }], ["192.0.2.2", 6, 1, 1]],
    ["no protocol", [{ id: 8, length: 4 }, { id: 12, length: 4 }, { id: 1, length: 4 }, { id: 2, length: 4 }], ["192.0.2.1", "192.0.2.2", 1, 1]],
    ["no packet count", [{ id: 8, length: 4 }, { id: 12, length: 4 }, { id: 4, length: 1 }, { id: 1, length: 4 }], ["192.0.2.1", "192.0.2.2", 6, 1]],
  ] as [string, Field[], Value[]][])("a template with %s makes unusable records", (_, f, values) => {
    expect(harness().decode(single(f, [values])).outcome).toMatchObject({ status: "decoded", records: 0, unusable: 1 });
  });

  test("IPv6 addresses; a template with both families uses the one that is set", () => {
    const dual: Field[] = [
      { id: 8, length: 4 }, { id: 12, length: 4 }, { id: 27, length: 16 }, { id: 28, length: 16 }, { id: 4, length: 1 },
      { id: 1, length: 4 }, { id: 2, length: 4 },
    ];
    const { rows } = harness().decode(single(dual, [
      ["0.0.0.0", "0.0.0.0", "2001:db8::1", "2001:db8:0:1::2", 58, 100, 1],
      ["192.0.2.1", "192.0.2.2", "::", "::", 6, 200, 2],
    ]));
    expect(rows.map((r) => [flow(r).src, flow(r).dst])).toEqual([["2001:db8:0:0:0:0:0:1", "2001:db8:0:1:0:0:0:2"], ["192.0.2.1", "192.0.2.2"]]);
  });
});

describe("counters", () => {
  test("octetTotalCount / packetTotalCount (85/86) when the template carries those instead; delta counts win when both come", () => {
    const totals = [...KEY, { id: 85, length: 8 }, { id: 86, length: 8 }];
    expect(harness().decode(single(totals, [[...KEY_VALUES, 9000, 6]])).rows.map((r) => [r.bytes, r.packets])).toEqual([[9000n, 6n]]);
    const both = [...KEY, { id: 85, length: 8 }, { id: 1, length: 4 }, { id: 86, length: 8 }, { id: 2, length: 4 }];
    expect(harness().decode(single(both, [[...KEY_VALUES, 9000, 1500, 6, 1]])).rows.map((r) => [r.bytes, r.packets])).toEqual([[1500n, 1n]]);
  });
});

describe("time forms (IANA flowStart*/flowEnd*, RFC 7011 §6.1.7–6.1.10), stored as epoch ms, floor", () => {
  // 2024-05-01T02:00:00.123456789Z and 2.5 s later.
  const startNs = BigInt(Date.UTC(2024, 4, 1, 2, 0, 0)) * 1_000_000n + 123_456_789n;
  const endNs = startNs + 2_500_000_000n;
  const startMs = Number(startNs / 1_000_000n);
  const endMs = Number(endNs / 1_000_000n);

  test.each([
    ["Seconds (150/151)", 150, 151, 4, Number(startNs / 1_000_000_000n), Number(endNs / 1_000_000_000n), Math.floor(startMs / 1000) * 1000, Math.floor(endMs / 1000) * 1000],
    ["Milliseconds (152/153)", 152, 153, 8, startMs, endMs, startMs, endMs],
    ["Microseconds (154/155), NTP format", 154, 155, 8, ntpTimestamp(startNs), ntpTimestamp(endNs), startMs, endMs],
    ["Nanoseconds (156/157), NTP format", 156, 157, 8, ntpTimestamp(startNs), ntpTimestamp(endNs), startMs, endMs],
  ] as [string, number, number, number, Value, Value, number, number][])("flowStart/End%s", (_, startId, endId, length, start, end, wantStart, wantEnd) => {
    const fields = [...KEY, { id: 1, length: 4 }, { id: 2, length: 4 }, { id: startId, length }, { id: endId, length }];
    const { rows } = harness().decode(single(fields, [[...KEY_VALUES, 100, 1, start, end]]));
    expect(rows.map((r) => [r.start, r.end])).toEqual([[wantStart, wantEnd]]);
  });

  test("flowStart/EndDeltaMicroseconds (158/159): microseconds before the message's Export Time", () => {
    const fields = [...KEY, { id: 1, length: 4 }, { id: 2, length: 4 }, { id: 158, length: 4 }, { id: 159, length: 4 }];
    const { rows } = harness().decode(single(fields, [[...KEY_VALUES, 100, 1, 3_000_500, 1_000_000]]));
    // 3.0005 s and 1 s before 02:00:00: floor(…) = 01:59:56.999 and 01:59:59.000.
    expect(rows.map((r) => [r.start, r.end])).toEqual([[EXPORT * 1000 - 3001, EXPORT * 1000 - 1000]]);
  });

  test("flowStart/EndSysUpTime (22/21) with systemInitTimeMilliseconds (160) from an options record", () => {
    const init = Date.UTC(2024, 4, 1, 0, 0, 0); // the exporter booted at midnight
    const fields = [...KEY, { id: 1, length: 4 }, { id: 2, length: 4 }, { id: 22, length: 4 }, { id: 21, length: 4 }];
    const options = { id: 500, scope: [{ id: 144, length: 4 }], fields: [{ id: 160, length: 8 }] };
    const h = harness();
    const before = h.decode(single(fields, [[...KEY_VALUES, 100, 1, 7_200_000, 7_201_500]]));
    expect(before.rows.map((r) => [r.start, r.end])).toEqual([[null, null]]); // no init time known yet: times unknown
    const { rows } = h.decode(message([
      { optionsTemplates: [options] },
      { templateId: 500, fields: [...options.scope, ...options.fields], records: [[1, init]] },
      { templateId: 256, fields, records: [[...KEY_VALUES, 100, 1, 7_200_000, 7_201_500]] },
    ]));
    expect(rows.map((r) => [r.start, r.end])).toEqual([[init + 7_200_000, init + 7_201_500]]);
    // Kept for the domain: a later message without the options record uses it too.
    expect(h.decode(message([{ templateId: 256, fields, records: [[...KEY_VALUES, 100, 1, 10, 20]] }])).rows.map((r) => r.start)).toEqual([init + 10]);
  });

  test("systemInitTimeMilliseconds in the flow record itself", () => {
    const init = Date.UTC(2024, 4, 1, 1, 0, 0);
    const fields = [...KEY, { id: 1, length: 4 }, { id: 2, length: 4 }, { id: 22, length: 4 }, { id: 160, length: 8 }];
    const { rows } = harness().decode(single(fields, [[...KEY_VALUES, 100, 1, 5_000, init]]));
    expect(rows.map((r) => r.start)).toEqual([init + 5_000]);
  });

  test("NetFlow v9 FIRST/LAST_SWITCHED (22/21) against the header's sysUpTime and UNIX Secs (RFC 3954 §5.1, §8)", () => {
    const fields = [...KEY, { id: 1, length: 4 }, { id: 2, length: 4 }, { id: 22, length: 4 }, { id: 21, length: 4 }];
    const packet = (sysUptime: number, first: number, last: number) => netflow9Packet({
      sysUptime, unixSecs: EXPORT, sequence: 0, sourceId: 3,
      flowSets: [{ templates: [{ id: 256, fields }] }, { templateId: 256, fields, records: [[...KEY_VALUES, 100, 1, first, last]] }],
    });
    // The packet left at sysUpTime 3 600 000 ms = EXPORT: the flow ran from 5 s to 1 s before that.
    const { rows } = harness().decode(packet(3_600_000, 3_595_000, 3_599_000), source("netflow9-udp"));
    expect(rows.map((r) => [r.start, r.end])).toEqual([[EXPORT * 1000 - 5000, EXPORT * 1000 - 1000]]);
    // sysUpTime wraps after 2^32 ms (about 49.7 days): a flow that started before the wrap.
    const wrapped = harness().decode(packet(1_000, 4_294_966_296, 500), source("netflow9-udp"));
    expect(wrapped.rows.map((r) => [r.start, r.end])).toEqual([[EXPORT * 1000 - 2000, EXPORT * 1000 - 500]]);
  });
});

describe("RFC 5103 biflows", () => {
  const REVERSE = 29305;
  const fields: Field[] = [
    ...KEY, { id: 1, length: 4 }, { id: 2, length: 4 }, { id: 152, length: 8 }, { id: 153, length: 8 }, { id: 10, length: 4 }, { id: 14, length: 4 },
    { id: 16, length: 4 }, { id: 17, length: 4 },
    { id: 1, length: 4, enterprise: REVERSE }, { id: 2, length: 4, enterprise: REVERSE },
  ];
  const t0 = Date.UTC(2024, 4, 1, 1, 59, 0);

  test("a biflow becomes two rows, the reverse with addresses, ports, interfaces and AS numbers swapped", () => {
    const h = harness();
    const { outcome, rows } = h.decode(single(fields, [[...KEY_VALUES, 1200, 10, t0, t0 + 5000, 3, 4, 64496, 64511, 48000, 40]]));
    expect(outcome).toMatchObject({ status: "decoded", records: 2, unusable: 0 });
    expect(rows.map((r) => ({ ...flow(r), in: r.ingressInterface, out: r.egressInterface, srcAs: r.srcAs, dstAs: r.dstAs }))).toEqual([
      { src: "198.51.100.7", dst: "203.0.113.9", sport: 51514, dport: 443, proto: 6, bytes: 1200n, packets: 10n, start: t0, end: t0 + 5000, in: 3, out: 4, srcAs: 64496, dstAs: 64511 },
      // No reverse times in the template: the forward ones; reverse packets enter where the forward ones left.
      { src: "203.0.113.9", dst: "198.51.100.7", sport: 443, dport: 51514, proto: 6, bytes: 48000n, packets: 40n, start: t0, end: t0 + 5000, in: 4, out: 3, srcAs: 64511, dstAs: 64496 },
    ]);
    expect(h.stats(1)[0].templates[0].fields.slice(-2)).toEqual(["reverseOctetDeltaCount", "reversePacketDeltaCount"]);
    expect(h.stats(1)[0].enterpriseElements).toEqual([]); // reverse elements Weir reads are not "skipped"
  });

  test("a reverse direction with no packets is left out, not counted; one with packets but no bytes is unusable", () => {
    const { outcome, rows } = harness().decode(single(fields, [
      [...KEY_VALUES, 1200, 10, t0, t0 + 5000, 3, 4, 64496, 64511, 0, 0],
      [...KEY_VALUES, 1200, 10, t0, t0 + 5000, 3, 4, 64496, 64511, 0, 2],
    ]));
    expect(outcome).toMatchObject({ records: 2, unusable: 1 });
    expect(rows.map((r) => flow(r).src)).toEqual(["198.51.100.7", "198.51.100.7"]);
  });

  test("reverse times when the template carries them (reverseFlowStart/EndMilliseconds)", () => {
    const withTimes: Field[] = [...fields, { id: 152, length: 8, enterprise: REVERSE }, { id: 153, length: 8, enterprise: REVERSE }];
    const { rows } = harness().decode(single(withTimes, [[...KEY_VALUES, 1200, 10, t0, t0 + 5000, 3, 4, 64496, 64511, 48000, 40, t0 + 10, t0 + 4990]]));
    expect(rows.map((r) => [r.start, r.end])).toEqual([[t0, t0 + 5000], [t0 + 10, t0 + 4990]]);
  });
});

describe("packet sampling announced in options records", () => {
  const fields = [...KEY, { id: 1, length: 4 }, { id: 2, length: 4 }];
  const scope = [{ id: 149, length: 4 }]; // observationDomainId as the scope

  function sampled(optionFields: Field[], values: Value[]) {
    const h = harness();
    const { rows } = h.decode(message([
      { templates: [{ id: 256, fields }] },
      { optionsTemplates: [{ id: 400, scope, fields: optionFields }] },
      { templateId: 400, fields: [...scope, ...optionFields], records: [[1, ...values]] },
      { templateId: 256, fields, records: [[...KEY_VALUES, 1500, 3], [...KEY_VALUES, 41, 1]] },
    ]));
    return { rows: rows.map((r) => [r.bytes, r.packets]), interval: h.stats(1)[0].samplingInterval };
  }

  test("samplingInterval (34): one packet in N, counters × N", () => {
    expect(sampled([{ id: 34, length: 4 }], [100])).toEqual({ rows: [[150000n, 300n], [4100n, 100n]], interval: 100 });
  });

  test("samplerRandomInterval (50) likewise", () => {
    expect(sampled([{ id: 50, length: 2 }], [64])).toEqual({ rows: [[96000n, 192n], [2624n, 64n]], interval: 64 });
  });

  test("samplingPacketInterval (305) with samplingPacketSpace (306): × (interval + space) / interval", () => {
    // Select 2, skip 3: 2 of every 5 packets, scale 2.5, rounded to whole numbers.
    expect(sampled([{ id: 305, length: 4 }, { id: 306, length: 4 }], [2, 3])).toEqual({ rows: [[3750n, 8n], [103n, 3n]], interval: 2.5 });
  });

  test("samplingSize (309) with samplingPopulation (310): × population / size", () => {
    expect(sampled([{ id: 309, length: 4 }, { id: 310, length: 4 }], [3, 1000])).toEqual({ rows: [[500000n, 1000n], [13667n, 333n]], interval: 1000 / 3 });
  });

  test("the scale stays for the domain and applies to later messages; another domain is not scaled", () => {
    const h = harness();
    h.decode(message([
      { templates: [{ id: 256, fields }] },
      { optionsTemplates: [{ id: 400, scope, fields: [{ id: 34, length: 4 }] }] },
      { templateId: 400, fields: [...scope, { id: 34, length: 4 }], records: [[1, 10]] },
    ]));
    const later = h.decode(message([{ templateId: 256, fields, records: [[...KEY_VALUES, 7, 1]] }], 1));
    expect(later.rows.map((r) => r.bytes)).toEqual([70n]);
    const other = h.decode(message([{ templates: [{ id: 256, fields }] }, { templateId: 256, fields, records: [[...KEY_VALUES, 7, 1]] }], 0, 2));
    expect(other.rows.map((r) => r.bytes)).toEqual([7n]);
    expect(h.stats().map((s) => [s.domain, s.samplingInterval])).toEqual([[1, 10], [2, null]]);
  });

  test("NetFlow v9 SAMPLING_INTERVAL (34) and FLOW_SAMPLER_RANDOM_INTERVAL (50) in an options template (RFC 3954 §6.1, §8)", () => {
    for (const [id, interval] of [[34, 1000], [50, 512]]) {
      const h = harness();
      const v9Scope = [{ id: 1, length: 4 }]; // scope type 1: System
      const optionFields = [{ id, length: 4 }];
      const { rows } = h.decode(netflow9Packet({
        sysUptime: 1000, unixSecs: EXPORT, sequence: 0, sourceId: 9,
        flowSets: [
          { templates: [{ id: 260, fields }] },
          { optionsTemplates: [{ id: 261, scope: v9Scope, fields: optionFields }], padding: 2 },
          { templateId: 261, fields: [...v9Scope, ...optionFields], records: [[0, interval]] },
          { templateId: 260, fields, records: [[...KEY_VALUES, 64, 1]] },
        ],
      }), source("netflow9-udp"));
      expect(rows.map((r) => [r.bytes, r.packets])).toEqual([[BigInt(64 * interval), BigInt(interval)]]);
      expect(h.stats(9)[0].samplingInterval).toBe(interval);
      expect(h.stats(9)[0].templates.find((t) => t.id === 261)?.fields).toEqual(["scope1", id === 34 ? "samplingInterval" : "samplerRandomInterval"]);
    }
  });
});

describe("sessions and observation domains", () => {
  const fields = [...KEY, { id: 1, length: 4 }, { id: 2, length: 4 }];
  test("the same template id in two domains and in two sessions are different templates (RFC 7011 §8)", () => {
    const other = [{ id: 8, length: 4 }, { id: 12, length: 4 }, { id: 4, length: 1 }, { id: 2, length: 4 }, { id: 1, length: 4 }];
    const h = harness();
    h.decode(message([{ templates: [{ id: 256, fields }] }], 0, 1));
    h.decode(message([{ templates: [{ id: 256, fields: other }] }], 0, 2));
    const one = h.decode(message([{ templateId: 256, fields, records: [[...KEY_VALUES, 100, 1]] }], 0, 1));
    const two = h.decode(message([{ templateId: 256, fields: other, records: [["192.0.2.1", "192.0.2.2", 17, 3, 300]] }], 0, 2));
    expect([...one.rows, ...two.rows].map((r) => [r.bytes, r.packets])).toEqual([[100n, 1n], [300n, 3n]]);
    // Another session (another exporter socket) does not know either template.
    const elsewhere = h.decode(message([{ templateId: 256, fields, records: [[...KEY_VALUES, 100, 1]] }], 0, 1), source("ipfix-udp", T0, "udp:192.0.2.11:50000"));
    expect(elsewhere.outcome).toMatchObject({ status: "decoded", records: 0, waiting: 1 });
  });

  test("at most maxSessions sessions are remembered; the least recently used is forgotten", () => {
    const h = harness({ maxSessions: 2 });
    for (const session of ["a", "b", "c"]) h.decode(message([{ templates: [{ id: 256, fields }] }]), source("ipfix-udp", T0, session));
    expect(h.stats().map((s) => s.session)).toEqual(["b", "c"]);
  });
});
