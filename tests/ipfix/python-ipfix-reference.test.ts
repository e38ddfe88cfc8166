// A second, independent IPFIX implementation as the reference: Debian's python3-ipfix 0.9.7
// encodes messages (reduced-size counters, an enterprise-specific variable-length string,
// RFC 5103 reverse elements, an options template announcing sampling, its own sequence
// numbers) and Weir's decoder must find the records python3-ipfix was given.
import { execFileSync } from "node:child_process";
import { describe, expect, test } from "vitest";
import { flow, harness } from "./helpers";
import { DEBIAN_PYTHON, pythonIpfixDir } from "./debian";

// The exporter, in python3-ipfix's own API. It prints the messages (hex) and the records it was
// given, so the expectation comes from the reference side, not from Weir.
const EXPORTER = String.raw`
import json, calendar
from datetime import datetime
from ipaddress import ip_address
from ipfix import ie, template, message

ie.use_iana_default(); ie.use_5103_default()
ie.for_spec("weirNote(32473/1)<string>")   # enterprise-specific, PEN 32473 (documentation, RFC 5612)
flow = template.from_ielist(256, ie.spec_list([
    "sourceIPv4Address", "destinationIPv4Address", "sourceTransportPort", "destinationTransportPort",
    "protocolIdentifier", "weirNote", "octetDeltaCount[4]", "packetDeltaCount[2]",
    "flowStartMilliseconds", "flowEndMilliseconds", "reverseOctetDeltaCount", "reversePacketDeltaCount"]))
options = template.from_ielist(257, ie.spec_list(["observationDomainId", "samplingInterval"]))
options.scopecount = 1

def ms(dt):  # python3-ipfix takes naive datetimes as UTC
    return calendar.timegm(dt.timetuple()) * 1000 + dt.microsecond // 1000

buf = message.MessageBuffer()
out = {"messages": [], "records": [], "samplingInterval": 10}
n = 0
for m in range(3):
    buf.begin_export(8304)
    if m == 0:
        buf.add_template(flow)
        buf.add_template(options)
    buf.set_export_time(datetime(2024, 5, 1, 2, 0, m))
    sampled = m == 2
    if sampled:
        buf.export_ensure_set(257)
        buf.export_namedict({"observationDomainId": 8304, "samplingInterval": out["samplingInterval"]})
    buf.export_ensure_set(256)
    for i in range(4 + 3 * m):
        n += 1
        start = datetime(2024, 5, 1, 1, 59, n % 60, 1000 * n)
        end = datetime(2024, 5, 1, 1, 59, 59, 2000 * n)
        rec = {"sourceIPv4Address": ip_address("192.0.2.%d" % n), "destinationIPv4Address": ip_address("198.51.100.%d" % (200 + m)),
               "sourceTransportPort": 40000 + n, "destinationTransportPort": 443, "protocolIdentifier": 6,
               "weirNote": "n" * (37 * n % 300), "octetDeltaCount": 1000 * n + 7, "packetDeltaCount": n + 1,
               "flowStartMilliseconds": start, "flowEndMilliseconds": end,
               "reverseOctetDeltaCount": 500 * (n % 3), "reversePacketDeltaCount": n % 3}
        buf.export_namedict(rec)
        out["records"].append({"src": str(rec["sourceIPv4Address"]), "dst": str(rec["destinationIPv4Address"]),
            "sport": rec["sourceTransportPort"], "dport": 443, "proto": 6, "bytes": rec["octetDeltaCount"],
            "packets": rec["packetDeltaCount"], "start": ms(start), "end": ms(end), "rbytes": rec["reverseOctetDeltaCount"],
            "rpackets": rec["reversePacketDeltaCount"], "sampled": sampled})
    out["messages"].append(buf.to_bytes().hex())
print(json.dumps(out))
`;

interface Exported {
  messages: string[];
  records: { src: string; dst: string; sport: number; dport: number; proto: number; bytes: number; packets: number; start: number; end: number; rbytes: number; rpackets: number; sampled: boolean }[];
  samplingInterval: number;
}

describe("against python3-ipfix (a reference IPFIX encoder)", () => {
  test("Weir decodes python3-ipfix's messages to the records it was given", () => {
    pythonIpfixDir(); // installs python3-ipfix when missing
    const exported = JSON.parse(execFileSync(DEBIAN_PYTHON, ["-c", EXPORTER], { encoding: "utf8" })) as Exported;
    const h = harness();
    const rows = exported.messages.flatMap((m) => {
      const { outcome, rows } = h.decode(Uint8Array.from(Buffer.from(m, "hex")));
      expect(outcome).toMatchObject({ status: "decoded", lost: 0, unusable: 0, waiting: 0 }); // python3-ipfix numbers per RFC 7011 §3.1
      return rows;
    });
    // Each record, and its RFC 5103 reverse direction when that had packets; counters of the
    // message after the options record × the announced samplingInterval.
    const expected = exported.records.flatMap((r) => {
      const scale = BigInt(r.sampled ? exported.samplingInterval : 1);
      const forward = { src: r.src, dst: r.dst, sport: r.sport, dport: r.dport, proto: r.proto, bytes: BigInt(r.bytes) * scale, packets: BigInt(r.packets) * scale, start: r.start, end: r.end };
      if (r.rpackets === 0) return [forward];
      return [forward, { ...forward, src: r.dst, dst: r.src, sport: r.dport, dport: r.sport, bytes: BigInt(r.rbytes) * scale, packets: BigInt(r.rpackets) * scale }];
    });
    expect(rows.map(flow)).toEqual(expected);
    const [stats] = h.stats(8304);
    expect(stats).toMatchObject({ lost: 0, malformed: 0, samplingInterval: exported.samplingInterval });
    expect(stats.enterpriseElements).toEqual([{ enterprise: 32473, id: 1, count: exported.records.length }]);
    expect(stats.templates.map((t) => t.fields)).toEqual([
      ["sourceIPv4Address", "destinationIPv4Address", "sourceTransportPort", "destinationTransportPort", "protocolIdentifier", "e32473.1",
        "octetDeltaCount", "packetDeltaCount", "flowStartMilliseconds", "flowEndMilliseconds", "reverseOctetDeltaCount", "reversePacketDeltaCount"],
      ["observationDomainId", "samplingInterval"],
    ]);
  });
});
