// Hand-built IPFIX / NetFlow v9 traffic for the listener and file tests, with its own truth.
import { createSocket } from "node:dgram";
import { connect } from "node:net";
import { ipfixMessage, netflow9Packet, type Field, type Value } from "../../scripts/ipfix/encode";

/** One flow as the tests send it and as they expect it stored. */
export interface TestFlow {
  src: string;
  dst: string;
  sport: number;
  dport: number;
  proto: number;
  bytes: number;
  packets: number;
  start: number;
  end: number;
}

// IANA IPFIX element ids (RFC 7012 / the IANA registry): 8 sourceIPv4Address,
// 12 destinationIPv4Address, 7 sourceTransportPort, 11 destinationTransportPort,
// 4 protocolIdentifier, 1 octetDeltaCount, 2 packetDeltaCount, 152/153 flowStart/EndMilliseconds.
export const V4_FIELDS: Field[] = [
  { id: 8, length: 4 },
  { id: 12, length: 4 },
  { id: 7, length: 2 },
  { id: 11, length: 2 },
  { id: 4, length: 1 },
  // Reduced-size encoding (RFC 7011 §6.2): a 4-octet octetDeltaCount.
  { id: 1, length: 4 },
  { id: 2, length: 8 },
  { id: 152, length: 8 },
  { id: 153, length: 8 },
];

// NetFlow v9 field types (RFC 3954 §8) share these numbers with IPFIX; v9 has no millisecond
// times, so the flows carry FIRST_SWITCHED/LAST_SWITCHED (22/21) in sysUptime milliseconds.
export const V9_FIELDS: Field[] = [
  { id: 8, length: 4 },
  { id: 12, length: 4 },
  { id: 7, length: 2 },
  { id: 11, length: 2 },
  { id: 4, length: 1 },
  { id: 1, length: 4 },
  { id: 2, length: 4 },
  { id: 22, length: 4 },
  { id: 21, length: 4 },
];

function values(f: TestFlow): Value[] {
  return [f.src, f.dst, f.sport, f.dport, f.proto, f.bytes, f.packets, f.start, f.end];
}

/** `count` invented flows on documentation addresses (RFC 5737), heavy-tailed sizes, from a seed. */
export function testFlows(count: number, seed: number, startMs: number): TestFlow[] {
  let state = seed >>> 0;
  const next = () => {
    // xorshift32 (Marsaglia, "Xorshift RNGs", J. Stat. Software 8(14), 2003)
    state ^= state << 13;
    state >>>= 0;
    state ^= state >>> 17;
    state ^= state << 5;
    state >>>= 0;
    return state / 2 ** 32;
  };
  return Array.from({ length: count }, (_, i) => {
    // Pareto packet counts (shape 1.2): a few flows carry most bytes, as real traffic does.
    const packets = Math.min(1_000_000, Math.max(1, Math.floor(1 / Math.pow(1 - next(), 1 / 1.2))));
    const start = startMs + Math.floor(next() * 60_000);
    return {
      src: `198.51.100.${1 + (i % 200)}`,
      dst: `203.0.113.${1 + Math.floor(next() * 250)}`,
      sport: 1024 + Math.floor(next() * 60000),
      dport: [443, 80, 53, 22][i % 4],
      proto: i % 4 === 2 ? 17 : 6,
      bytes: packets * (40 + Math.floor(next() * 1460)),
      packets,
      start,
      end: start + Math.floor(next() * 5000),
    };
  });
}

/** IPFIX messages of `perMessage` flows each, the template in the first message. */
export function ipfixMessages(flows: TestFlow[], domain: number, perMessage = 20, templateEvery = Infinity): Uint8Array[] {
  const out: Uint8Array[] = [];
  let sequence = 0;
  for (let i = 0; i < flows.length; i += perMessage) {
    const batch = flows.slice(i, i + perMessage);
    const n = out.length;
    const withTemplate = n === 0 || n % templateEvery === 0;
    out.push(
      ipfixMessage({
        exportTime: Math.floor(batch[0].end / 1000),
        sequence,
        domain,
        sets: [...(withTemplate ? [{ templates: [{ id: 256, fields: V4_FIELDS }] }] : []), { templateId: 256, fields: V4_FIELDS, records: batch.map(values) }],
      }),
    );
    sequence += batch.length; // RFC 7011 §3.1: data records sent before this message
  }
  return out;
}

/** NetFlow v9 packets: the exporter booted at `bootMs`; times go as sysUptime milliseconds. */
export function netflow9Packets(flows: TestFlow[], sourceId: number, bootMs: number, perPacket = 20): Uint8Array[] {
  const out: Uint8Array[] = [];
  for (let i = 0; i < flows.length; i += perPacket) {
    const batch = flows.slice(i, i + perPacket);
    const exportMs = Math.max(...batch.map((f) => f.end)) + 1000;
    const secs = Math.floor(exportMs / 1000);
    out.push(
      netflow9Packet({
        // unix_secs and sysUptime describe the same instant (RFC 3954 §5.1)
        sysUptime: secs * 1000 - bootMs,
        unixSecs: secs,
        sequence: out.length,
        sourceId,
        flowSets: [
          ...(out.length === 0 ? [{ templates: [{ id: 300, fields: V9_FIELDS }] }] : []),
          { templateId: 300, fields: V9_FIELDS, records: batch.map((f) => [f.src, f.dst, f.sport, f.dport, f.proto, f.bytes, f.packets, f.start - bootMs, f.end - bootMs]) },
        ],
      }),
    );
  }
  return out;
}

/** Sends datagrams from `fromAddress` (any 127.0.0.0/8 address works on loopback) to a local port, paced lightly. */
export async function sendUdp(messages: Uint8Array[], port: number, fromAddress = "127.0.0.1"): Promise<void> {
  const socket = createSocket("udp4");
  await new Promise<void>((resolve) => socket.bind(0, fromAddress, resolve));
  for (let i = 0; i < messages.length; i++) {
    await new Promise<void>((resolve, reject) => socket.send(messages[i], port, "127.0.0.1", (error) => (error ? reject(error) : resolve())));
    if (i % 50 === 49) await new Promise((resolve) => setTimeout(resolve, 1));
  }
  await new Promise<void>((resolve) => socket.close(() => resolve()));
}

/** Sends messages over one TCP connection from `fromAddress`, then closes it. */
export async function sendTcp(messages: Uint8Array[], port: number, fromAddress = "127.0.0.1"): Promise<void> {
  const socket = connect({ port, host: "127.0.0.1", localAddress: fromAddress });
  await new Promise<void>((resolve, reject) => socket.once("connect", resolve).once("error", reject));
  for (const message of messages) socket.write(message);
  await new Promise<void>((resolve) => socket.end(resolve));
}

/** Polls until `done()` or the time is up (then fails with `what`). */
export async function waitFor(done: () => boolean | Promise<boolean>, what: string, timeoutMs = 15_000): Promise<void> {
  const until = Date.now() + timeoutMs;
  while (!(await done())) {
    if (Date.now() > until) throw new Error(`timed out waiting for ${what}`);
    await new Promise((resolve) => setTimeout(resolve, 20));
  }
}

export function sums(flows: TestFlow[]): { records: number; bytes: bigint; packets: bigint } {
  return { records: flows.length, bytes: flows.reduce((s, f) => s + BigInt(f.bytes), 0n), packets: flows.reduce((s, f) => s + BigInt(f.packets), 0n) };
}
