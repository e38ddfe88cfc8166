// An invented, seeded traffic scenario written as a pcap, with its own truth: every flow's
// packets and IP octets, known because this code wrote every packet. Real exporters read the
// pcap; tests compare what they export (and what Weir records) with this truth.
//
// Only documentation address space (RFC 5737: 192.0.2.0/24, 198.51.100.0/24, 203.0.113.0/24;
// RFC 3849: 2001:db8::/32). Flow sizes are heavy-tailed (Pareto packet counts), as flow sizes
// are in real traffic (common practice to model them so), so a few flows carry most octets.
import ipaddr from "ipaddr.js";
import {
  ipPacket,
  ipPacketLength,
  LINKTYPE_RAW,
  pcapFile,
  protocolNumber,
  TCP_ACK,
  TCP_FIN,
  TCP_PSH,
  TCP_SYN,
  type CapturedPacket,
  type Transport,
} from "./pcap";

/**
 * One unidirectional flow as IPFIX defines it (RFC 7011 §2: packets sharing a set of properties
 * during a time interval), keyed by its 5-tuple.
 */
export interface TruthFlow {
  ipVersion: 4 | 6;
  /** Canonical text: dotted quad, or RFC 5952 for IPv6. */
  sourceAddress: string;
  destinationAddress: string;
  /** IANA protocol number: 6 TCP, 17 UDP, 1 ICMP, 58 ICMPv6. */
  protocol: number;
  /** 0 for ICMP, which has no ports. */
  sourcePort: number;
  destinationPort: number;
  /** ICMP type × 256 + code, the layout of icmpTypeCodeIPv4 / icmpTypeCodeIPv6 (IANA ids 32 / 139); absent for TCP and UDP. */
  icmpTypeCode?: number;
  packets: number;
  /**
   * Sum of the IP packets' total lengths (IPv4 Total Length, RFC 791; 40 + Payload Length for IPv6,
   * RFC 8200): "octets ... including IP header(s) and IP payload", octetDeltaCount, RFC 7012 / IANA id 1.
   */
  octets: number;
  firstMicros: number;
  lastMicros: number;
}

export interface FlowScenario {
  seed: number;
  /** The capture, LINKTYPE_RAW: each record is exactly one IP packet, so a frame's length is the IP length. */
  pcap: Buffer;
  linkType: number;
  flows: TruthFlow[];
  totals: { flows: number; packets: number; octets: number };
  startMicros: number;
  endMicros: number;
}

export interface ScenarioOptions {
  seed?: number;
  /** Conversations to invent; each gives one or two flows (a reply direction is a flow of its own). */
  conversations?: number;
  /** Capture start, µs since the epoch; a whole second keeps exporters' millisecond arithmetic exact. */
  startMicros?: number;
  spanSeconds?: number;
}

export const DEFAULT_SEED = 0x5eed_0009;
/** 2024-03-01T02:00:00Z, an arbitrary fixed instant. */
export const DEFAULT_START_MICROS = Date.UTC(2024, 2, 1, 2, 0, 0) * 1000;

/** A flow's 5-tuple as one string, the same for truth and for decoded records (ICMP: type/code in place of ports). */
export function flowKey(flow: { sourceAddress: string; destinationAddress: string; protocol: number; sourcePort: number; destinationPort: number; icmpTypeCode?: number }): string {
  const ports = flow.icmpTypeCode !== undefined ? `icmp ${flow.icmpTypeCode >> 8}/${flow.icmpTypeCode & 0xff}` : `${flow.sourcePort} > ${flow.destinationPort}`;
  return `${canonicalAddress(flow.sourceAddress)} > ${canonicalAddress(flow.destinationAddress)} proto ${flow.protocol} ${ports}`;
}

/** One text form per address (RFC 5952 for IPv6), so decoders that print addresses differently still compare equal. */
export function canonicalAddress(text: string): string {
  const parsed = ipaddr.parse(text);
  return parsed.kind() === "ipv6" ? (parsed as ipaddr.IPv6).toRFC5952String() : parsed.toString();
}

/** Deterministic 32-bit generator (mulberry32, public domain, T. Ettinger) giving floats in [0, 1). Test data only. */
export function seededRandom(seed: number): () => number {
  let state = seed >>> 0;
  return () => {
    state = (state + 0x6d2b79f5) >>> 0;
    let t = state;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

interface PendingPacket {
  timeMicros: number;
  order: number;
  source: string;
  destination: string;
  transport: Transport;
  identification: number;
}

// Pareto shape for packet counts: below 1.5 the variance is infinite and the largest few
// flows dominate the octet total (common practice for flow-size models).
const PARETO_SHAPE = 1.1;
const MAX_PACKETS_PER_FLOW = 2_500;
const TCP_MAX_SEGMENT_BYTES = 1_448; // MSS of a 1500-octet Ethernet path with TCP timestamps (common practice)

/**
 * Builds the scenario: IPv4 and IPv6 conversations of TCP (both directions, SYN first and FIN
 * last in each), UDP (some with a reply) and ICMP echo (request and reply are separate flows:
 * their type differs), each flow with a 5-tuple no other flow has, within `spanSeconds`.
 */
export function buildFlowScenario(options: ScenarioOptions = {}): FlowScenario {
  const seed = options.seed ?? DEFAULT_SEED;
  const conversations = options.conversations ?? 700;
  const startMicros = options.startMicros ?? DEFAULT_START_MICROS;
  const spanMicros = (options.spanSeconds ?? 60) * 1e6;
  const random = seededRandom(seed);
  const integer = (low: number, high: number) => low + Math.floor(random() * (high - low + 1));
  const pareto = () => Math.min(MAX_PACKETS_PER_FLOW, Math.floor(1 / Math.pow(1 - random(), 1 / PARETO_SHAPE)));

  const flows: TruthFlow[] = [];
  const pending: PendingPacket[] = [];
  const usedKeys = new Set<string>();
  let order = 0;

  const v4Clients = ["198.51.100.", "192.0.2."];
  const pickAddresses = (ipVersion: 4 | 6) =>
    ipVersion === 4
      ? { client: `${v4Clients[integer(0, 1)]}${integer(1, 254)}`, server: `203.0.113.${integer(1, 254)}` }
      : { client: `2001:db8:c::${integer(1, 0xffff).toString(16)}`, server: `2001:db8:5::${integer(1, 0xff).toString(16)}` };

  // A flow records its packets into the shared list; the truth accumulates from the same lengths.
  const newFlow = (ipVersion: 4 | 6, source: string, destination: string, transport: Transport): TruthFlow => {
    const icmp = transport.protocol === "icmp";
    return {
      ipVersion,
      sourceAddress: canonicalAddress(source),
      destinationAddress: canonicalAddress(destination),
      protocol: protocolNumber(transport.protocol, ipVersion),
      sourcePort: icmp ? 0 : transport.sourcePort,
      destinationPort: icmp ? 0 : transport.destinationPort,
      icmpTypeCode: icmp ? transport.type * 256 + transport.code : undefined,
      packets: 0,
      octets: 0,
      firstMicros: Infinity,
      lastMicros: -Infinity,
    };
  };
  const send = (flow: TruthFlow, timeMicros: number, transport: Transport) => {
    pending.push({ timeMicros, order: order++, source: flow.sourceAddress, destination: flow.destinationAddress, transport, identification: flow.packets });
    flow.packets += 1;
    flow.octets += ipPacketLength(flow.ipVersion, transport);
    flow.firstMicros = Math.min(flow.firstMicros, timeMicros);
    flow.lastMicros = Math.max(flow.lastMicros, timeMicros);
  };
  // Unique in both directions, so no two conversations share an exporter's (bidirectional) flow entry.
  const claim = (...keys: string[]) => {
    if (keys.some((k) => usedKeys.has(k))) return false;
    for (const k of keys) usedKeys.add(k);
    return true;
  };

  for (let made = 0; made < conversations; ) {
    const ipVersion: 4 | 6 = random() < 0.35 ? 6 : 4;
    const { client, server } = pickAddresses(ipVersion);
    const kind = random();
    // The first conversation starts at the capture start, so a capture's first packet is at a known instant.
    const begin = made === 0 ? startMicros : startMicros + Math.floor(random() * spanMicros * 0.9);
    const gapMicros = integer(50, 4_000);

    if (kind < 0.6) {
      const clientPort = integer(32_768, 60_999);
      const serverPort = [443, 80, 22, 8443, 993][integer(0, 4)];
      const forwardKey = `${client} ${clientPort} ${server} ${serverPort} tcp`;
      const reverseKey = `${server} ${serverPort} ${client} ${clientPort} tcp`;
      if (!claim(forwardKey, reverseKey)) continue;
      const dataSegments = pareto();
      const bulk = dataSegments > 20;
      const forward = newFlow(ipVersion, client, server, { protocol: "tcp", sourcePort: clientPort, destinationPort: serverPort, sequence: 0, acknowledgement: 0, flags: 0, payloadBytes: 0 });
      const reverse = newFlow(ipVersion, server, client, { protocol: "tcp", sourcePort: serverPort, destinationPort: clientPort, sequence: 0, acknowledgement: 0, flags: 0, payloadBytes: 0 });
      let clientSeq = integer(0, 0xffffffff);
      let serverSeq = integer(0, 0xffffffff);
      const tcp = (from: "client" | "server", flags: number, payloadBytes: number): Transport => {
        const segment: Transport = {
          protocol: "tcp",
          sourcePort: from === "client" ? clientPort : serverPort,
          destinationPort: from === "client" ? serverPort : clientPort,
          sequence: from === "client" ? clientSeq : serverSeq,
          acknowledgement: from === "client" ? serverSeq : clientSeq,
          flags,
          payloadBytes,
        };
        // SYN and FIN each take one sequence number (RFC 793 §3.3)
        const advance = payloadBytes + (flags & TCP_SYN ? 1 : 0) + (flags & TCP_FIN ? 1 : 0);
        if (from === "client") clientSeq = (clientSeq + advance) >>> 0;
        else serverSeq = (serverSeq + advance) >>> 0;
        return segment;
      };
      let t = begin;
      send(forward, t, tcp("client", TCP_SYN, 0));
      send(reverse, (t += gapMicros), tcp("server", TCP_SYN | TCP_ACK, 0));
      // The larger direction is the server's when the client downloads; both are heavy-tailed.
      const download = random() < 0.7;
      for (let i = 0; i < dataSegments; i++) {
        const size = bulk ? TCP_MAX_SEGMENT_BYTES : integer(1, 1_200);
        t += gapMicros;
        if (download) {
          send(reverse, t, tcp("server", TCP_ACK | TCP_PSH, size));
          if (i % 2 === 1) send(forward, t + 10, tcp("client", TCP_ACK, 0));
        } else {
          send(forward, t, tcp("client", TCP_ACK | TCP_PSH, size));
          if (i % 2 === 1) send(reverse, t + 10, tcp("server", TCP_ACK, 0));
        }
      }
      send(forward, (t += gapMicros), tcp("client", TCP_FIN | TCP_ACK, 0));
      send(reverse, (t += gapMicros), tcp("server", TCP_FIN | TCP_ACK, 0));
      flows.push(forward, reverse);
      made++;
    } else if (kind < 0.9) {
      const clientPort = integer(1_024, 65_535);
      const serverPort = [53, 123, 443, 4500, 5004][integer(0, 4)];
      const forwardKey = `${client} ${clientPort} ${server} ${serverPort} udp`;
      const reverseKey = `${server} ${serverPort} ${client} ${clientPort} udp`;
      if (!claim(forwardKey, reverseKey)) continue;
      const udp = (from: "client" | "server", payloadBytes: number): Transport =>
        from === "client"
          ? { protocol: "udp", sourcePort: clientPort, destinationPort: serverPort, payloadBytes }
          : { protocol: "udp", sourcePort: serverPort, destinationPort: clientPort, payloadBytes };
      const forward = newFlow(ipVersion, client, server, udp("client", 0));
      const packets = pareto();
      const size = packets > 20 ? integer(900, 1_400) : integer(20, 512);
      let t = begin;
      for (let i = 0; i < packets; i++) send(forward, (t += gapMicros), udp("client", size));
      flows.push(forward);
      if (random() < 0.5) {
        const reverse = newFlow(ipVersion, server, client, udp("server", 0));
        const replies = Math.max(1, Math.floor(packets / integer(1, 4)));
        for (let i = 0; i < replies; i++) send(reverse, (t += gapMicros), udp("server", integer(20, 1_400)));
        flows.push(reverse);
      }
      made++;
    } else {
      // Echo request and reply (RFC 792: types 8 and 0; RFC 4443 §4: 128 and 129). Exporters key ICMP
      // flows by type and code, not by identifier, so one address pair carries one exchange.
      const [requestType, replyType] = ipVersion === 4 ? [8, 0] : [128, 129];
      if (!claim(`${client} ${server} icmp`, `${server} ${client} icmp`)) continue;
      const identifier = integer(1, 0xffff);
      const echo = (type: number, sequence: number, payloadBytes: number): Transport => ({ protocol: "icmp", type, code: 0, identifier, sequence, payloadBytes });
      const request = newFlow(ipVersion, client, server, echo(requestType, 0, 0));
      const reply = newFlow(ipVersion, server, client, echo(replyType, 0, 0));
      const count = integer(1, 10);
      const payloadBytes = [56, 32, 1_000][integer(0, 2)];
      let t = begin;
      for (let i = 0; i < count; i++) {
        send(request, (t += integer(1_000, 200_000)), echo(requestType, i, payloadBytes));
        send(reply, (t += gapMicros), echo(replyType, i, payloadBytes));
      }
      flows.push(request, reply);
      made++;
    }
  }

  pending.sort((a, b) => a.timeMicros - b.timeMicros || a.order - b.order);
  const packets: CapturedPacket[] = pending.map((p) => ({
    timeMicros: p.timeMicros,
    frame: ipPacket({ source: p.source, destination: p.destination, transport: p.transport, identification: p.identification }),
  }));
  const totals = flows.reduce((sum, f) => ({ flows: sum.flows + 1, packets: sum.packets + f.packets, octets: sum.octets + f.octets }), { flows: 0, packets: 0, octets: 0 });
  return {
    seed,
    pcap: pcapFile(packets, { linkType: LINKTYPE_RAW }),
    linkType: LINKTYPE_RAW,
    flows,
    totals,
    startMicros: packets[0].timeMicros,
    endMicros: packets[packets.length - 1].timeMicros,
  };
}
