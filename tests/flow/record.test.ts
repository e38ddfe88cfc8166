import fc from "fast-check";
import { describe, expect, test } from "vitest";
import {
  type FlowRecord,
  flowRecordToJson,
  maxBatchErrorDetails,
  parseFlowBatch,
  parseFlowRecord,
} from "~/flow/record.ts";
import { parseAddress } from "~/net/address.ts";

/** A valid record under Weir's aliases; documentation addresses (RFC 5737 §3, RFC 3849). */
const aliasRecord = {
  src: "198.51.100.7",
  dst: "203.0.113.9",
  sport: 51514,
  dport: 443,
  proto: 6,
  bytes: 15_000,
  packets: 12,
  start: 1_714_528_800_000,
  end: 1_714_528_805_000,
};

/** The same flow under IPFIX information-element names (RFC 7012 / IANA IPFIX registry). */
const ipfixRecord = {
  sourceIPv4Address: "198.51.100.7",
  destinationIPv4Address: "203.0.113.9",
  sourceTransportPort: 51514,
  destinationTransportPort: 443,
  protocolIdentifier: 6,
  octetDeltaCount: 15_000,
  packetDeltaCount: 12,
  flowStartMilliseconds: 1_714_528_800_000,
  flowEndMilliseconds: 1_714_528_805_000,
};

function ok(value: unknown): FlowRecord {
  const result = parseFlowRecord(value);
  if (!result.ok) throw new Error(`expected a valid record, got ${JSON.stringify(result.issues)}`);
  return result.record;
}

function issues(value: unknown) {
  const result = parseFlowRecord(value);
  if (result.ok) throw new Error("expected an invalid record");
  return result.issues;
}

describe("names: IPFIX elements and Weir aliases", () => {
  test("aliases and IPFIX names give the same record", () => {
    // Field names: RFC 7012 / IANA IPFIX registry; aliases: Weir's design brief.
    const record = ok(aliasRecord);
    expect(ok(ipfixRecord)).toEqual(record);
    expect(record).toEqual({
      src: parseAddress("198.51.100.7"),
      dst: parseAddress("203.0.113.9"),
      sport: 51514,
      dport: 443,
      proto: 6,
      bytes: 15_000n,
      packets: 12n,
      start: 1_714_528_800_000,
      end: 1_714_528_805_000,
      ingressInterface: null,
      egressInterface: null,
      srcAs: null,
      dstAs: null,
    });
  });

  test("IPv6 flows under either name", () => {
    // sourceIPv6Address / destinationIPv6Address (IANA IPFIX registry); RFC 3849 documentation prefix.
    const ipfix = ok({
      sourceIPv6Address: "2001:db8:1::7",
      destinationIPv6Address: "2001:DB8:2::9",
      protocolIdentifier: 17,
      octetDeltaCount: 512,
      packetDeltaCount: 4,
    });
    const alias = ok({ src: "2001:db8:1::7", dst: "2001:db8:2::9", proto: 17, bytes: 512, packets: 4 });
    expect(ipfix).toEqual(alias);
    expect(alias.dst).toEqual(parseAddress("2001:db8:2::9"));
  });

  test("interfaces and AS numbers keep their IPFIX names", () => {
    // ingressInterface, egressInterface, bgpSourceAsNumber, bgpDestinationAsNumber (IANA IPFIX registry);
    // AS numbers 64496–64511 are for documentation (RFC 5398).
    const record = ok({
      ...aliasRecord,
      ingressInterface: 3,
      egressInterface: 7,
      bgpSourceAsNumber: 64496,
      bgpDestinationAsNumber: 64511,
    });
    expect([record.ingressInterface, record.egressInterface, record.srcAs, record.dstAs]).toEqual([3, 7, 64496, 64511]);
  });

  test("the same value under two names is accepted", () => {
    // Weir's rule: duplicates are harmless when they agree (compared after parsing, so text case does not matter).
    expect(ok({ ...aliasRecord, sourceIPv4Address: "198.51.100.7", octetDeltaCount: "15000" })).toEqual(ok(aliasRecord));
    const v6 = { src: "2001:db8::1", sourceIPv6Address: "2001:DB8:0::1", dst: "2001:db8::2", proto: 6, bytes: 1, packets: 1 };
    expect(ok(v6).src).toEqual(parseAddress("2001:db8::1"));
  });

  test("different values under two names: an error naming both", () => {
    // Weir's rule (design brief): a conflict must not be settled silently.
    const found = issues({ ...aliasRecord, sourceTransportPort: 80 });
    expect(found).toEqual([
      {
        path: "sport",
        message: "sourceTransportPort and sport name the same field with different values (80 vs 51514); send one",
      },
    ]);
    const address = issues({ ...aliasRecord, sourceIPv4Address: "198.51.100.8" });
    expect(address[0].path).toBe("src");
    expect(address[0].message).toContain("sourceIPv4Address and src");
    expect(address[0].message).toContain("198.51.100.8 vs 198.51.100.7");
  });

  test("sourceIPv4Address and sourceIPv6Address with different addresses conflict", () => {
    // A flow has one source address (RFC 7011 §2 Flow Key); Weir's conflict rule names both.
    const found = issues({ ...ipfixRecord, sourceIPv6Address: "2001:db8::1" });
    expect(found.map((i) => i.path)).toEqual(["sourceIPv6Address"]);
    expect(found[0].message).toContain("sourceIPv4Address and sourceIPv6Address");
  });

  test("family-specific names accept only their family", () => {
    // IANA IPFIX registry: sourceIPv4Address is ipv4Address, sourceIPv6Address is ipv6Address.
    expect(issues({ ...ipfixRecord, sourceIPv4Address: "2001:db8::1" })[0].path).toBe("sourceIPv4Address");
    const v6 = { ...ipfixRecord, sourceIPv4Address: undefined, sourceIPv6Address: "192.0.2.1" };
    expect(issues(v6)[0].path).toBe("sourceIPv6Address");
    // RFC 4291 §2.5.5.2: ::ffff:192.0.2.1 is IPv6 text for the IPv4 address 192.0.2.1.
    const mapped = ok({ ...ipfixRecord, sourceIPv4Address: undefined, sourceIPv6Address: "::ffff:192.0.2.1" });
    expect(mapped.src).toEqual(parseAddress("192.0.2.1"));
  });

  test("unknown fields are errors, with a suggestion for near misses", () => {
    // Weir's rule (design brief): strict names, so a typo cannot silently drop data.
    expect(issues({ ...aliasRecord, sprot: 53 })).toEqual([
      { path: "sprot", message: "is neither a Weir field nor an IPFIX information element name (IANA registry); did you mean sport?" },
    ]);
    expect(issues({ ...ipfixRecord, octetdeltacount: 5 })[0].message).toContain("did you mean octetDeltaCount?");
    expect(issues({ ...aliasRecord, colour: "blue" })[0].message).not.toContain("did you mean");
    const many = issues({ ...aliasRecord, a: 1, b: 2 });
    expect(many.map((i) => i.path)).toEqual(["a", "b"]);
  });

  test("a record must be a JSON object", () => {
    // RFC 8259 §4 object (recalled from memory); Weir's batch body is an array of objects.
    for (const value of [null, [], "flow", 42]) {
      expect(issues(value)).toEqual([{ path: "", message: "a flow record must be a JSON object" }]);
    }
  });

  test("null counts as absent", () => {
    // Common practice: JSON exporters write null for a missing optional value.
    const record = ok({ ...aliasRecord, sport: null, ingressInterface: null, bgpSourceAsNumber: null });
    expect(record.sport).toBe(0);
    expect(record.ingressInterface).toBeNull();
    expect(issues({ ...aliasRecord, src: null })).toEqual([
      { path: "src", message: "is required: send it as sourceIPv4Address, sourceIPv6Address or src" },
    ]);
  });
});

describe("required fields and bounds", () => {
  test.each([
    ["src", "sourceIPv4Address, sourceIPv6Address or src"],
    ["dst", "destinationIPv4Address, destinationIPv6Address or dst"],
    ["proto", "protocolIdentifier or proto"],
    ["bytes", "octetDeltaCount or bytes"],
    ["packets", "packetDeltaCount or packets"],
  ])("%s is required", (field, names) => {
    // Weir's design brief: source, destination, bytes, packets and protocol are required.
    const { [field as keyof typeof aliasRecord]: _dropped, ...rest } = aliasRecord;
    expect(issues(rest)).toEqual([{ path: field, message: `is required: send it as ${names}` }]);
  });

  test("ports default to 0 when absent", () => {
    // Common practice: ICMP (protocol 1, IANA protocol numbers) carries no ports.
    const record = ok({ src: "192.0.2.1", dst: "192.0.2.2", proto: 1, bytes: 84, packets: 1 });
    expect([record.sport, record.dport]).toEqual([0, 0]);
  });

  test.each([
    ["sport", 0, true], // RFC 7012 unsigned16 lower bound
    ["sport", 65535, true], // RFC 7012 unsigned16 upper bound
    ["dport", 65536, false], // RFC 7012 unsigned16
    ["sourceTransportPort", -1, false], // RFC 7012 unsigned16
    ["destinationTransportPort", 80.5, false], // RFC 7012 unsigned16 is an integer
    ["dport", "443", false], // Weir's rule: ports are JSON numbers
    ["proto", 0, true], // RFC 7012 unsigned8 lower bound
    ["proto", 255, true], // RFC 7012 unsigned8 upper bound
    ["protocolIdentifier", 256, false], // RFC 7012 unsigned8
    ["ingressInterface", 4_294_967_295, true], // RFC 7012 unsigned32 upper bound
    ["egressInterface", 4_294_967_296, false], // RFC 7012 unsigned32
    ["bgpSourceAsNumber", 4_294_967_295, true], // RFC 6793 four-octet AS numbers
    ["bgpDestinationAsNumber", 4_294_967_296, false], // RFC 6793
    ["bgpDestinationAsNumber", -1, false], // RFC 6793
  ])("%s = %j valid: %s", (field, value, valid) => {
    const base = field in ipfixRecord ? { ...ipfixRecord } : { ...aliasRecord };
    const result = parseFlowRecord({ ...base, [field]: value });
    expect(result.ok).toBe(valid);
    if (!result.ok) {
      expect(result.issues[0].path).toBe(field);
      expect(result.issues[0].message).toMatch(/must be an integer from 0 to (65535|255|4294967295)/);
    }
  });
});

describe("counters", () => {
  test("2^53−1 as a JSON number is exact", () => {
    // ECMAScript Number.MAX_SAFE_INTEGER = 2^53−1, the largest integer a double holds with its neighbours.
    expect(ok({ ...aliasRecord, bytes: 9_007_199_254_740_991 }).bytes).toBe(9_007_199_254_740_991n);
  });

  test("2^53 as a JSON number is refused with a hint to send a string", () => {
    // ECMAScript: 2^53 + 1 parses to 2^53, so numbers from 2^53 up may already be rounded.
    expect(JSON.parse("9007199254740993")).toBe(9_007_199_254_740_992);
    const found = issues({ ...aliasRecord, bytes: 2 ** 53 });
    expect(found[0].path).toBe("bytes");
    expect(found[0].message).toContain("decimal string");
  });

  test("decimal strings up to 2^64−1 are exact", () => {
    // RFC 7012 unsigned64 for octetDeltaCount / packetDeltaCount: maximum 2^64−1.
    const record = ok({ ...ipfixRecord, octetDeltaCount: "18446744073709551615", packetDeltaCount: "9007199254740993" });
    expect(record.bytes).toBe(18_446_744_073_709_551_615n);
    expect(record.packets).toBe(9_007_199_254_740_993n);
  });

  test("2^64 is over unsigned64", () => {
    // RFC 7012 unsigned64.
    const found = issues({ ...ipfixRecord, octetDeltaCount: "18446744073709551616" });
    expect(found).toEqual([
      { path: "octetDeltaCount", message: "is above 2^64−1 = 18446744073709551615, the largest unsigned64 (RFC 7012)" },
    ]);
  });

  test("0 bytes or packets is refused, and the message says why", () => {
    // RFC 7011 §2: a Flow is a set of packets; the priority sampling paper (J. ACM 54(6), 2007) needs weights > 0.
    for (const field of ["bytes", "packets", "octetDeltaCount", "packetDeltaCount"]) {
      const base = field in ipfixRecord ? ipfixRecord : aliasRecord;
      const found = issues({ ...base, [field]: 0 });
      expect(found[0].path).toBe(field);
      expect(found[0].message).toMatch(/at least 1: a flow is a set of packets observed \(RFC 7011 §2\).*positive weight/);
    }
    expect(issues({ ...aliasRecord, bytes: "0" })[0].message).toContain("at least 1");
  });

  test.each([
    [-1], // RFC 7012 unsigned64 is non-negative
    [1.5], // RFC 7012 unsigned64 is an integer
    ["-1"], // Weir's rule: decimal digits only
    ["1e3"], // Weir's rule: no exponent
    ["0x10"], // Weir's rule: no hex (BigInt would read it)
    [" 5"], // Weir's rule: no spaces
    [""], // Weir's rule: at least one digit
    [true], // Weir's rule: a number or a string
  ])("refuses the counter %j", (value) => {
    expect(issues({ ...aliasRecord, bytes: value })[0].path).toBe("bytes");
  });
});

describe("timestamps", () => {
  test("ISO 8601 with a timezone becomes epoch milliseconds", () => {
    // RFC 3339 §5.6 date-time; expected values from ECMAScript Date.UTC.
    const utc = Date.UTC(2024, 4, 1, 2, 0, 0);
    expect(ok({ ...aliasRecord, start: "2024-05-01T02:00:00Z", end: "2024-05-01T02:00:05Z" }).start).toBe(utc);
    expect(ok({ ...aliasRecord, start: "2024-05-01T04:00:00+02:00", end: undefined }).start).toBe(utc);
    expect(ok({ ...aliasRecord, start: "2024-04-30T21:30:00-04:30", end: undefined }).start).toBe(utc);
    expect(ok({ ...aliasRecord, start: "2024-05-01t02:00:00.250z", end: undefined }).start).toBe(utc + 250);
    // Fractions beyond milliseconds are truncated (Weir's rule; epoch milliseconds is the unit of flowStartMilliseconds).
    expect(ok({ ...aliasRecord, start: "2024-05-01T02:00:00.999999Z", end: undefined }).start).toBe(utc + 999);
    // RFC 3339 §5.6 NOTE: a space may stand for "T".
    expect(ok({ ...aliasRecord, start: "2024-05-01 02:00:00Z", end: undefined }).start).toBe(utc);
    // RFC 3339 §5.7 leap day.
    expect(ok({ ...aliasRecord, start: "2024-02-29T00:00:00Z", end: undefined }).start).toBe(Date.UTC(2024, 1, 29));
  });

  test("ISO text and epoch milliseconds mix", () => {
    // flowStartMilliseconds / flowEndMilliseconds are dateTimeMilliseconds (RFC 7012).
    const record = ok({ ...ipfixRecord, flowStartMilliseconds: "2024-05-01T02:00:00Z", flowEndMilliseconds: 1_714_528_805_000 });
    expect(record.start).toBe(1_714_528_800_000);
    expect(record.end).toBe(1_714_528_805_000);
  });

  test.each([
    ["2024-05-01T02:00:00", "needs an offset"], // RFC 3339 §4.4: local time without an offset is no instant
    ["2024-05-01", "needs a time and an offset"], // Weir's rule for records: a time of day is required
    ["2024-05-01T02:00Z", "needs seconds"], // RFC 3339 §5.6 partial-time: seconds are not optional
    ["2023-02-29T00:00:00Z", "not a real date"], // 2023 is not a leap year (RFC 3339 §5.7)
    ["2024-13-01T00:00:00Z", "not a real date"], // RFC 3339 §5.6 date-month 01–12
    ["2024-05-01T24:00:00Z", "not a real date"], // RFC 3339 §5.6 time-hour 00–23
    ["2024-05-01T02:00:00+2:00", "must be RFC 3339"], // RFC 3339 §5.6 time-numoffset is ±hh:mm
    ["1969-12-31T23:59:59Z", "before 1970"], // Weir's rule: non-negative epoch milliseconds
    ["1970-01-01T00:30:00+01:00", "before 1970"], // the offset moves it before the epoch
    ["2024-05-01T02:00:00Z trailing", "must be RFC 3339"], // RFC 3339 §5.6: nothing after time-offset
    ["10000-01-01T00:00:00Z", "must be RFC 3339"], // RFC 3339 §5.6 date-fullyear is 4DIGIT
  ])("refuses %j (%s)", (text, reason) => {
    const found = issues({ ...aliasRecord, start: text, end: undefined });
    expect(found[0].path).toBe("start");
    expect(found[0].message).toContain(reason);
  });

  test.each([[-1], [1.5], [2 ** 53]])("refuses the epoch value %j", (value) => {
    // Weir's rule: epoch milliseconds as a non-negative safe integer.
    expect(issues({ ...aliasRecord, start: value, end: undefined })[0].path).toBe("start");
  });

  test("refuses times RFC 3339 cannot write, from 10000-01-01 on, up to 2^53−1, with a unit hint where one fits", () => {
    // ECMA-262 TimeClip ends Dates at 8.64e15 ms; between it and 2^53−1 a value used to pass and then fail to format.
    for (const value of [253_402_300_800_000, 8.64e15, 8.64e15 + 1, Number.MAX_SAFE_INTEGER]) {
      const found = issues({ ...aliasRecord, start: value, end: undefined });
      expect(found).toHaveLength(1);
      expect(found[0]).toMatchObject({ path: "start", message: expect.stringContaining("is after 9999-12-31T23:59:59Z") });
    }
    // 2024-05-01T02:00:00Z in epoch microseconds, sent as milliseconds: ÷1000 is the time meant.
    const micro = issues({ ...aliasRecord, start: 1_714_528_800_000_000, end: undefined })[0].message;
    expect(micro).toContain("as microseconds it would be 2024-05-01T02:00:00.000Z");
    expect(ok({ ...aliasRecord, start: 253_402_300_799_999, end: undefined }).start).toBe(Date.UTC(9999, 11, 31, 23, 59, 59, 999));
  });

  test("end before start is an error at the end field", () => {
    // RFC 7011 §2: a Flow is observed during a time interval, so it cannot end before it starts.
    expect(issues({ ...aliasRecord, start: 2000, end: 1000 })).toEqual([
      { path: "end", message: "end (1000) is before start (2000); a flow ends after it starts" },
    ]);
    const ipfix = issues({ ...ipfixRecord, flowStartMilliseconds: 2000, flowEndMilliseconds: 1999 });
    expect(ipfix[0].path).toBe("flowEndMilliseconds");
    expect(ipfix[0].message).toContain("flowEndMilliseconds (1999) is before flowStartMilliseconds (2000)");
    expect(ok({ ...aliasRecord, start: 2000, end: 2000 }).end).toBe(2000); // common practice: a one-packet flow starts and ends at once
  });
});

describe("parseFlowBatch", () => {
  test("a valid batch returns every record in order", () => {
    // Weir's API sketch: a batch is atomic.
    const result = parseFlowBatch([aliasRecord, ipfixRecord, { ...aliasRecord, dport: 53, proto: 17 }]);
    expect(result.ok).toBe(true);
    if (result.ok) {
      expect(result.records.map((r) => r.dport)).toEqual([443, 443, 53]);
    }
  });

  test("caps details at 100 but counts every invalid record", () => {
    // Weir's design brief: at most 100 details, all invalid records counted.
    const values: unknown[] = [];
    for (let i = 0; i < 500; i++) values.push(i % 2 === 0 ? aliasRecord : { ...aliasRecord, sport: 70_000 });
    const result = parseFlowBatch(values);
    expect(result.ok).toBe(false);
    if (!result.ok) {
      expect(result.invalidCount).toBe(250);
      expect(maxBatchErrorDetails).toBe(100);
      expect(result.details).toHaveLength(100);
      expect(result.details[0]).toEqual({
        index: 1,
        path: "sport",
        message: "must be an integer from 0 to 65535 (a transport port, RFC 7012 unsigned16)",
      });
      expect(result.details.at(-1)?.index).toBe(199);
    }
  });

  test("details carry the index and the field name as sent", () => {
    // Weir's API sketch: errors list record index, field and reason.
    const result = parseFlowBatch([aliasRecord, { ...ipfixRecord, destinationIPv4Address: "203.0.113.256" }, { ...aliasRecord, bytez: 1 }]);
    expect(result).toEqual({
      ok: false,
      invalidCount: 2,
      details: [
        { index: 1, path: "destinationIPv4Address", message: 'invalid IPv4 address "203.0.113.256": an IPv4 octet is over 255' },
        {
          index: 2,
          path: "bytez",
          message: "is neither a Weir field nor an IPFIX information element name (IANA registry); did you mean bytes?",
        },
      ],
    });
  });

  test("an empty batch is valid", () => {
    // Common practice: nothing to reject.
    expect(parseFlowBatch([])).toEqual({ ok: true, records: [], ignoredFields: {} });
  });
});

describe("flowRecordToJson", () => {
  test("writes Weir's aliases, text addresses and safe counters as numbers", () => {
    // Addresses printed per RFC 5952 §4 / dotted IPv4 (RFC 4291 §2.5.5.2); counters per the 2^53−1 rule above.
    const record = ok({ ...ipfixRecord, sourceIPv4Address: undefined, sourceIPv6Address: "2001:DB8:0:0:1::1", bgpSourceAsNumber: 64500 });
    expect(flowRecordToJson(record)).toEqual({
      src: "2001:db8::1:0:0:1",
      dst: "203.0.113.9",
      sport: 51514,
      dport: 443,
      proto: 6,
      bytes: 15_000,
      packets: 12,
      start: 1_714_528_800_000,
      end: 1_714_528_805_000,
      bgpSourceAsNumber: 64500,
    });
    const big = ok({ ...aliasRecord, bytes: "18446744073709551615", packets: 9_007_199_254_740_991 });
    expect(flowRecordToJson(big).bytes).toBe("18446744073709551615");
    expect(flowRecordToJson(big).packets).toBe(9_007_199_254_740_991);
  });

  test("round-trips through JSON text and the parser", () => {
    // Property: parse(JSON(toJson(r))) === r for any record (Weir's design brief).
    const bytes16 = fc.oneof(
      fc.uint8Array({ minLength: 16, maxLength: 16 }),
      fc.uint8Array({ minLength: 4, maxLength: 4 }).map((v4) => Uint8Array.from([0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 255, 255, ...v4])),
    );
    const counter = fc.bigInt({ min: 1n, max: 2n ** 64n - 1n });
    const u32 = fc.option(fc.nat(4_294_967_295), { nil: null });
    const times = fc
      .option(fc.tuple(fc.nat(2 ** 45), fc.nat(2 ** 20)), { nil: null })
      .chain((t) => fc.record({ start: fc.constant(t === null ? null : t[0]), end: fc.constant(t === null ? null : t[0] + t[1]) }));
    const record = fc.record({
      src: bytes16,
      dst: bytes16,
      sport: fc.nat(65535),
      dport: fc.nat(65535),
      proto: fc.nat(255),
      bytes: counter,
      packets: counter,
      times,
      ingressInterface: u32,
      egressInterface: u32,
      srcAs: u32,
      dstAs: u32,
    });
    fc.assert(
      fc.property(record, ({ times: t, ...rest }) => {
        const flow: FlowRecord = { ...rest, start: t.start, end: t.end };
        const wire = JSON.parse(JSON.stringify(flowRecordToJson(flow)));
        expect(ok(wire)).toEqual(flow);
      }),
      { numRuns: 2000 },
    );
  });
});
