import { execFile } from "node:child_process";
import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { promisify } from "node:util";
import { afterAll, beforeAll, describe, expect, test } from "vitest";
import { TSHARK } from "../global-setup";
import { buildFlowScenario, flowKey, type TruthFlow } from "../helpers/flow-scenario";
import { captureDatagrams, ipfixDumpDecode, referenceDecode, runSoftflowd, type ReferenceDecode, type ReferenceFlow, type ReceivedDatagram } from "../helpers/softflowd";

// Proves the real-exporter harness without Weir: the test writes a seeded pcap (so it knows every
// flow's packets and IP octets — the truth), Debian's softflowd exports it as IPFIX and NetFlow v9
// to a loopback socket of the test, and Debian's tshark and ipfixDump decode what arrived. Every
// counter they decode must equal the truth, flow by flow. Nothing is stored.

const scenario = buildFlowScenario();
const truthByKey = new Map(scenario.flows.map((f) => [flowKey(f), f]));

let dir = "";
let pcapPath = "";

beforeAll(() => {
  dir = mkdtempSync(join(tmpdir(), "weir-softflowd-test-"));
  pcapPath = join(dir, "scenario.pcap");
  writeFileSync(pcapPath, scenario.pcap);
});
afterAll(() => rmSync(dir, { recursive: true, force: true }));

/** Runs softflowd over a pcap (the scenario's by default) to a fresh socket and returns every datagram it sent. */
async function exportPcap(version: 9 | 10, extraArgs: string[] = [], path = pcapPath): Promise<{ datagrams: ReceivedDatagram[]; port: number; exportedRecords: number }> {
  const capture = await captureDatagrams();
  try {
    const run = await runSoftflowd({ pcapPath: path, port: capture.port, version, extraArgs });
    // softflowd's closing statistics say how many datagrams it sent; all of them must arrive.
    const datagrams = await capture.waitFor(run.exported.datagrams);
    return { datagrams: [...datagrams], port: capture.port, exportedRecords: run.exported.records };
  } finally {
    await capture.close();
  }
}

/** Flows whose decoded counters differ from the truth, and truth flows no record reported. */
function differencesFromTruth(flows: readonly ReferenceFlow[], truthFlows: ReadonlyMap<string, TruthFlow> = truthByKey): string[] {
  const differences: string[] = [];
  const seen = new Set<string>();
  for (const flow of flows) {
    const key = flowKey(flow);
    const truth = truthFlows.get(key);
    if (!truth) differences.push(`${key}: not in the pcap`);
    else if (seen.has(key)) differences.push(`${key}: reported twice`);
    else if (flow.octets !== truth.octets || flow.packets !== truth.packets)
      differences.push(`${key}: ${flow.octets} octets / ${flow.packets} packets, pcap has ${truth.octets} / ${truth.packets}`);
    seen.add(key);
  }
  for (const key of truthFlows.keys()) if (!seen.has(key)) differences.push(`${key}: missing`);
  return differences;
}

/** Milliseconds since the epoch of a flow's start or end as the export states it. */
type Clock = (flow: ReferenceFlow, which: "start" | "end") => number;

/**
 * The span softflowd reports for a flow. It keeps one entry for a flow and its exact reverse (one
 * start and one last-packet time for both), so each direction's record carries the times of the two
 * together — seen with softflowd 1.1.0. An ICMP reply is not the exact reverse of its request (its
 * type differs), so it has an entry, and times, of its own.
 */
function exporterSpanMicros(truth: TruthFlow): { first: number; last: number } {
  const reverse =
    truth.icmpTypeCode === undefined
      ? truthByKey.get(flowKey({ ...truth, sourceAddress: truth.destinationAddress, destinationAddress: truth.sourceAddress, sourcePort: truth.destinationPort, destinationPort: truth.sourcePort }))
      : undefined;
  return reverse
    ? { first: Math.min(truth.firstMicros, reverse.firstMicros), last: Math.max(truth.lastMicros, reverse.lastMicros) }
    : { first: truth.firstMicros, last: truth.lastMicros };
}

/** Truth time minus exported time, for every flow, at both ends. */
function timeErrors(flows: readonly ReferenceFlow[], clock: Clock): number[] {
  return flows.flatMap((flow) => {
    const span = exporterSpanMicros(truthByKey.get(flowKey(flow)) as TruthFlow);
    return [span.first / 1000 - clock(flow, "start"), span.last / 1000 - clock(flow, "end")];
  });
}

test("the pcap holds the scenario: tshark reads every packet with valid checksums, and the IP lengths it reads add up to the truth", async () => {
  // Reference: tshark 4.0 dissecting the written file (pcap-savefile format, LINKTYPE_RAW).
  // ip.len is IPv4 Total Length (RFC 791 §3.1); an IPv6 packet is 40 + Payload Length (RFC 8200 §3).
  // Checksum status 1 = good: IPv4 header (RFC 791), TCP (RFC 793), UDP (RFC 768), ICMP (RFC 792), ICMPv6 (RFC 4443).
  const { stdout } = await promisify(execFile)(
    TSHARK,
    ["-r", pcapPath, "-o", "ip.check_checksum:TRUE", "-o", "tcp.check_checksum:TRUE", "-o", "udp.check_checksum:TRUE", "-T", "fields", "-E", "occurrence=f",
      "-e", "ip.len", "-e", "ipv6.plen", "-e", "ip.checksum.status", "-e", "tcp.checksum.status", "-e", "udp.checksum.status", "-e", "icmp.checksum.status", "-e", "icmpv6.checksum.status"],
    { maxBuffer: 64 * 1024 * 1024 },
  );
  const rows = stdout.trimEnd().split("\n").map((line) => line.split("\t"));
  expect(rows.length).toBe(scenario.totals.packets);
  const octets = rows.reduce((sum, [ipLength, ipv6PayloadLength]) => sum + (ipLength ? Number(ipLength) : 40 + Number(ipv6PayloadLength)), 0);
  expect(octets).toBe(scenario.totals.octets);
  const badChecksums = rows.filter((row) => row.slice(2).some((status) => status !== "" && status !== "1"));
  expect(badChecksums).toEqual([]);
  // Every transport packet had a checksum checked (status present), and IPv4 packets their header checksum too.
  expect(rows.every((row) => row.slice(3).some((status) => status === "1"))).toBe(true);
});

test("the scenario is heavy-tailed and every flow has a 5-tuple of its own", () => {
  // Distinct keys: the exporter must never merge two scenario flows into one record.
  expect(truthByKey.size).toBe(scenario.flows.length);
  expect(scenario.flows.length).toBeGreaterThanOrEqual(300);
  expect(new Set(scenario.flows.map((f) => f.ipVersion))).toEqual(new Set([4, 6]));
  expect(new Set(scenario.flows.map((f) => f.protocol))).toEqual(new Set([1, 6, 17, 58]));
  // Pareto packet counts with shape 1.1 (infinite variance): the top 1% of flows carry a large share
  // of the octets. 30% is a loose floor (this seed gives more); uniform sizes would give about 1%.
  const octets = scenario.flows.map((f) => f.octets).sort((a, b) => b - a);
  const top = octets.slice(0, Math.ceil(octets.length / 100)).reduce((s, x) => s + x, 0);
  expect(top / scenario.totals.octets).toBeGreaterThan(0.3);
});

describe("IPFIX export (softflowd -v 10)", () => {
  let sent: Awaited<ReturnType<typeof exportPcap>>;
  let tshark: ReferenceDecode;
  let ipfixDump: ReferenceDecode;

  beforeAll(async () => {
    sent = await exportPcap(10);
    tshark = await referenceDecode(sent.datagrams, sent.port);
    ipfixDump = await ipfixDumpDecode(sent.datagrams);
  });

  test("tshark decodes every flow with the octets and packets the pcap holds", () => {
    // Reference decoder: tshark 4.0; truth: the pcap this test wrote. octetDeltaCount counts IP
    // header and payload (RFC 7012 / IANA element 1), packetDeltaCount packets (element 2).
    expect(differencesFromTruth(tshark.flows)).toEqual([]);
    expect(tshark.totals).toEqual(scenario.totals);
    expect(tshark.totals.flows).toBe(sent.exportedRecords);
  });

  test("ipfixDump reads the same datagrams as one IPFIX file (RFC 5655) and finds the same flows", () => {
    // Second reference decoder: libfixbuf 2.4's ipfixDump over the messages written back to back.
    expect(ipfixDump.messages.length).toBe(sent.datagrams.length);
    expect(differencesFromTruth(ipfixDump.flows)).toEqual([]);
    expect(ipfixDump.totals).toEqual(scenario.totals);
    expect(ipfixDump.messages.map((m) => m.sequence)).toEqual(tshark.messages.map((m) => m.sequence));
  });

  test("flowStart/EndSysUpTime plus systemInitTimeMilliseconds give each flow's first and last packet time", () => {
    // softflowd sends sysUpTime-relative times (IANA elements 22 / 21, milliseconds) and the base in an
    // options record (systemInitTimeMilliseconds, element 160). With -a the clock is the pcap's.
    // Each exported time is the packet time cut to the element's millisecond: 0 ≤ truth − exported < 1 ms.
    expect(tshark.systemInitMillis).toBe(scenario.startMicros / 1000);
    const errors = timeErrors(tshark.flows, (flow, which) => {
      const time = flow[which]!;
      expect(time.clock).toBe("sysUpTime");
      return tshark.systemInitMillis! + time.millis;
    });
    expect(Math.min(...errors)).toBeGreaterThanOrEqual(0);
    expect(Math.max(...errors)).toBeLessThan(1);
  });

  test("message headers: sequence numbers, templates and an Observation Domain as softflowd 1.1.0 sends them", () => {
    // Facts the decoder must cope with, read by tshark. RFC 7011 §3.1 defines the Sequence Number as
    // the data records sent *before* this message; softflowd counts its flow records up to and
    // *including* this one (its options records are not counted).
    let records = 0;
    for (const message of tshark.messages) {
      records += message.flowRecords;
      expect(message.sequence).toBe(records);
      expect(message.domain).toBe(0);
    }
    // Templates 1024 (IPv4), 1025 (IPv4 ICMP), 2048 (IPv6), 2049 (IPv6 ICMP) and options template 256,
    // sent in the first message and again every 16 messages, each time with one options record.
    const withTemplates = tshark.messages.flatMap((m, i) => (m.templateIds.length > 0 ? [i] : []));
    expect(withTemplates[0]).toBe(0);
    expect(withTemplates.every((i) => i % 16 === 0)).toBe(true);
    for (const i of withTemplates) {
      expect([...tshark.messages[i].templateIds].sort()).toEqual([1024, 1025, 2048, 2049, 256]);
      expect(tshark.messages[i].optionsRecords).toBe(1);
    }
    expect(new Set(tshark.flows.map((f) => f.templateId))).toEqual(new Set([1024, 1025, 2048, 2049]));
  });
});

describe("NetFlow v9 export (softflowd -v 9) of the same pcap", () => {
  let sent: Awaited<ReturnType<typeof exportPcap>>;
  let tshark: ReferenceDecode;

  beforeAll(async () => {
    sent = await exportPcap(9);
    tshark = await referenceDecode(sent.datagrams, sent.port);
  });

  test("tshark decodes every flow with the octets and packets the pcap holds", () => {
    // Reference: tshark 4.0 (see referenceDecode on the header Count it is given); truth: the pcap.
    expect(differencesFromTruth(tshark.flows)).toEqual([]);
    expect(tshark.totals).toEqual(scenario.totals);
    expect(tshark.totals.flows).toBe(sent.exportedRecords);
  });

  test("header: sequence counts packets, Count counts only flow records, times rest on sysUpTime and UNIX Secs", () => {
    // RFC 3954 §5.1: the sequence counts export packets — softflowd starts at 1 and counts the current
    // one; Count should be all records in the packet (templates and options included) — softflowd
    // counts only its flow data records.
    tshark.messages.forEach((message, i) => {
      expect(message.sequence).toBe(i + 1);
      expect(message.count).toBe(message.flowRecords);
    });
    // Absolute time = UNIX Secs·1000 − sysUpTime + FIRST/LAST_SWITCHED (RFC 3954 §5.1, §8 elements 22/21).
    // UNIX Secs has whole seconds, so the result is early by less than 1 s (plus the cut millisecond).
    const errors = timeErrors(tshark.flows, (flow, which) => {
      const header = tshark.messages[flow.message];
      const time = flow[which]!;
      expect(time.clock).toBe("sysUpTime");
      return header.exportSeconds * 1000 - header.sysUptimeMillis! + time.millis;
    });
    expect(Math.min(...errors)).toBeGreaterThanOrEqual(0);
    expect(Math.max(...errors)).toBeLessThan(1_001);
  });
});

test("NetFlow v9: a packet whose Count is below its number of FlowSets is still decoded whole", async () => {
  // A tiny scenario: one export packet with templates and a few flow records. softflowd's Count omits
  // template and options records, so it is smaller than the packet's FlowSets — where tshark would
  // stop early (see referenceDecode). FlowSet headers: RFC 3954 §5.2 (id, length), after the 20-octet header.
  const small = buildFlowScenario({ seed: 1, conversations: 3 });
  const smallPath = join(dir, "small.pcap");
  writeFileSync(smallPath, small.pcap);
  const sent = await exportPcap(9, [], smallPath);
  expect(sent.datagrams.length).toBe(1);
  const payload = sent.datagrams[0].payload;
  let flowSets = 0;
  for (let at = 20; at + 4 <= payload.length; at += payload.readUInt16BE(at + 2)) flowSets += 1;
  expect(payload.readUInt16BE(2)).toBeLessThan(flowSets);
  const tshark = await referenceDecode(sent.datagrams, sent.port);
  expect(differencesFromTruth(tshark.flows, new Map(small.flows.map((f) => [flowKey(f), f])))).toEqual([]);
});

describe("IPFIX export with absolute times (softflowd -v 10 -A milli)", () => {
  test("flowStart/EndMilliseconds are each flow's first and last packet time, and the counters still match", async () => {
    const sent = await exportPcap(10, ["-A", "milli"]);
    const tshark = await referenceDecode(sent.datagrams, sent.port);
    expect(differencesFromTruth(tshark.flows)).toEqual([]);
    // IANA elements 152 / 153, milliseconds since the epoch: 0 ≤ truth − exported < 1 ms.
    const errors = timeErrors(tshark.flows, (flow, which) => {
      const time = flow[which]!;
      expect(time.clock).toBe("epoch");
      return time.millis;
    });
    expect(Math.min(...errors)).toBeGreaterThanOrEqual(0);
    expect(Math.max(...errors)).toBeLessThan(1);
  });
});
