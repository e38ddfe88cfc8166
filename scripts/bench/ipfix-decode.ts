// Decode ceiling of the IPFIX decoder: records/s of FlowDecoder.decode on one core over a
// prepared buffer of realistic messages (a 15-field IPv4 flow template, 30 records a message,
// a few exporters, templates refreshed now and then), against parsing the same records as JSON
// objects with parseFlowBatch (JSON ingest's validation) in the same run.
import { parseFlowBatch } from "~/flow/record";
import { FlowDecoder, RowWriter } from "~/ipfix/decoder";
import type { MessageSource } from "~/ipfix/types";
import { seededUniform } from "~/sampling/uniform";
import { type Field, ipfixMessage, type Value } from "../ipfix/encode";

export interface IpfixDecodeBench {
  /** Flow records decoded per second (best round). */
  recordsPerSecond: number;
  nsPerRecord: number;
  /** Records and messages in one pass over the prepared buffer. */
  records: number;
  messages: number;
  bytesPerMessage: number;
  /** The same records as JSON objects through parseFlowBatch (best round). */
  jsonRecordsPerSecond: number;
  ratioToJson: number;
}

/** 15 fields, 61 octets a record: the IPv4 template of a typical router export. */
export const FIELDS: Field[] = [
  { id: 8, length: 4 }, // sourceIPv4Address
  { id: 12, length: 4 }, // destinationIPv4Address
  { id: 7, length: 2 }, // sourceTransportPort
  { id: 11, length: 2 }, // destinationTransportPort
  { id: 4, length: 1 }, // protocolIdentifier
  { id: 5, length: 1 }, // ipClassOfService (skipped)
  { id: 6, length: 1 }, // tcpControlBits (skipped)
  { id: 10, length: 4 }, // ingressInterface
  { id: 14, length: 4 }, // egressInterface
  { id: 16, length: 4 }, // bgpSourceAsNumber
  { id: 17, length: 4 }, // bgpDestinationAsNumber
  { id: 1, length: 8 }, // octetDeltaCount
  { id: 2, length: 8 }, // packetDeltaCount
  { id: 152, length: 8 }, // flowStartMilliseconds
  { id: 153, length: 8 }, // flowEndMilliseconds
];

const RECORDS_PER_MESSAGE = 30;
const EXPORTERS = 4;
const TEMPLATE_EVERY = 50; // messages between template refreshes (common practice: every 20 s to a few minutes)

interface Prepared {
  messages: Uint8Array[];
  sources: MessageSource[];
  records: number;
  json: Record<string, unknown>[];
}

/** Invented traffic on documentation prefixes (RFC 5737) and private AS numbers (RFC 5398); heavy-tailed sizes. */
function prepare(messageCount: number, startMs: number): Prepared {
  const u = seededUniform(2026);
  const pick = (n: number) => Math.floor(u() * n);
  const prefixes = ["192.0.2.", "198.51.100.", "203.0.113."];
  const messages: Uint8Array[] = [];
  const sources: MessageSource[] = [];
  const json: Record<string, unknown>[] = [];
  const sequence = new Array<number>(EXPORTERS).fill(0);
  let records = 0;
  for (let m = 0; m < messageCount; m++) {
    const exporter = m % EXPORTERS;
    const exportTime = Math.floor(startMs / 1000) + Math.floor(m / 100);
    const rows: Value[][] = [];
    for (let r = 0; r < RECORDS_PER_MESSAGE; r++) {
      const packets = Math.max(1, Math.floor(1 / Math.pow(u(), 1 / 1.2))); // Pareto, shape 1.2
      const bytes = packets * (40 + pick(1460));
      const start = exportTime * 1000 - 60_000 + pick(55_000);
      const src = prefixes[pick(3)] + (1 + pick(254));
      const dst = prefixes[pick(3)] + (1 + pick(254));
      const sport = 1024 + pick(60000);
      const dport = [443, 80, 53, 22, 8443][pick(5)];
      const proto = dport === 53 ? 17 : 6;
      const ingress = 1 + pick(48);
      const egress = 1 + pick(48);
      const srcAs = 64496 + pick(16);
      const dstAs = 64496 + pick(16);
      const end = start + pick(5000);
      rows.push([src, dst, sport, dport, proto, 0, 0x18, ingress, egress, srcAs, dstAs, bytes, packets, start, end]);
      json.push({
        sourceIPv4Address: src, destinationIPv4Address: dst, sourceTransportPort: sport, destinationTransportPort: dport,
        protocolIdentifier: proto, ingressInterface: ingress, egressInterface: egress, bgpSourceAsNumber: srcAs,
        bgpDestinationAsNumber: dstAs, octetDeltaCount: bytes, packetDeltaCount: packets, flowStartMilliseconds: start, flowEndMilliseconds: end,
      });
    }
    const withTemplate = m < EXPORTERS || m % TEMPLATE_EVERY === exporter;
    messages.push(ipfixMessage({
      exportTime,
      sequence: sequence[exporter],
      domain: 1,
      sets: [...(withTemplate ? [{ templates: [{ id: 256, fields: FIELDS }] }] : []), { templateId: 256, fields: FIELDS, records: rows }],
    }));
    sequence[exporter] += RECORDS_PER_MESSAGE;
    sources.push({ session: `udp:192.0.2.${100 + exporter}:4739`, exporter: `192.0.2.${100 + exporter}`, transport: "ipfix-udp", receivedAt: startMs });
    records += RECORDS_PER_MESSAGE;
  }
  return { messages, sources, records, json };
}

/** One pass of decoding every message; rows are taken every 100 messages, as a listener hands batches on. */
function timeDecode(p: Prepared): number {
  const decoder = new FlowDecoder({ templateLifetimeMs: 30 * 60_000 });
  const out = new RowWriter(4096);
  let rows = 0;
  const t0 = process.hrtime.bigint();
  for (let i = 0; i < p.messages.length; i++) {
    decoder.decode(p.sources[i], p.messages[i], out);
    if (i % 100 === 99) rows += out.take().count;
  }
  rows += out.take().count;
  const ns = Number(process.hrtime.bigint() - t0);
  if (rows !== p.records) throw new Error(`decoded ${rows} rows of ${p.records}: the benchmark data is wrong`);
  return ns;
}

function timeJson(p: Prepared): number {
  const batch = 3000;
  const t0 = process.hrtime.bigint();
  let n = 0;
  for (let i = 0; i < p.json.length; i += batch) {
    const result = parseFlowBatch(p.json.slice(i, i + batch));
    if (result.ok) n += result.records.length;
  }
  const ns = Number(process.hrtime.bigint() - t0);
  if (n !== p.records) throw new Error(`parseFlowBatch accepted ${n} of ${p.records}`);
  return ns;
}

export async function benchIpfixDecode(messageCount = 20_000, rounds = 5): Promise<IpfixDecodeBench> {
  const p = prepare(messageCount, Date.UTC(2024, 4, 1, 2, 0, 0));
  let decode = Infinity;
  let json = Infinity;
  timeDecode(p); // warm-up: let V8 optimise the decode loop before it is timed
  for (let round = 0; round < rounds; round++) {
    decode = Math.min(decode, timeDecode(p));
    json = Math.min(json, timeJson(p));
  }
  const recordsPerSecond = p.records / (decode / 1e9);
  const jsonRecordsPerSecond = p.records / (json / 1e9);
  return {
    recordsPerSecond,
    nsPerRecord: decode / p.records,
    records: p.records,
    messages: p.messages.length,
    bytesPerMessage: p.messages.reduce((n, m) => n + m.length, 0) / p.messages.length,
    jsonRecordsPerSecond,
    ratioToJson: recordsPerSecond / jsonRecordsPerSecond,
  };
}
