// Builds IP packets and writes them as a libpcap capture file, so tests can hand a real
// exporter (softflowd) or a reference decoder (tshark) traffic whose every byte they know.
//
// File format: the pcap-savefile(5) man page and draft-ietf-opsawg-pcap ("PCAP Capture File
// Format"), §4 file header, §5 packet record. IPv4: RFC 791 §3.1; IPv6: RFC 8200 §3 and §8.1
// (upper-layer checksums); TCP: RFC 793 §3.1; UDP: RFC 768; ICMP: RFC 792; ICMPv6: RFC 4443 §2.
// Ethernet II framing: IEEE 802.3 (common practice: captures keep the padding up to the
// 60-octet minimum frame, without the FCS).
import ipaddr from "ipaddr.js";

/** LINKTYPE_ETHERNET and LINKTYPE_RAW (draft-ietf-opsawg-pcap-linktype registry). */
export const LINKTYPE_ETHERNET = 1;
export const LINKTYPE_RAW = 101;

/** tcpdump's default snapshot length: large enough that no packet written here is cut (common practice). */
export const DEFAULT_SNAP_LENGTH = 262_144;

export const PROTOCOL_ICMP = 1;
export const PROTOCOL_TCP = 6;
export const PROTOCOL_UDP = 17;
export const PROTOCOL_ICMPV6 = 58;

/** TCP control bits, RFC 793 §3.1 (low six bits of octet 13). */
export const TCP_FIN = 0x01;
export const TCP_SYN = 0x02;
export const TCP_RST = 0x04;
export const TCP_PSH = 0x08;
export const TCP_ACK = 0x10;

export interface CapturedPacket {
  /** Capture time in microseconds since the Unix epoch. */
  timeMicros: number;
  /** The link-layer frame as captured (whole: nothing here is truncated). */
  frame: Uint8Array;
}

/**
 * A whole pcap file: the 24-octet file header and one 16-octet record header before each frame.
 * Written little-endian with magic 0xa1b2c3d4, so a reader sees d4 c3 b2 a1 and knows the byte order
 * (draft-ietf-opsawg-pcap §4: "MagicNumber ... 0xA1B2C3D4 ... time stamps in seconds and microseconds").
 */
export function pcapFile(packets: readonly CapturedPacket[], options: { linkType?: number; snapLength?: number } = {}): Buffer {
  const snapLength = options.snapLength ?? DEFAULT_SNAP_LENGTH;
  const size = 24 + packets.reduce((sum, p) => sum + 16 + p.frame.length, 0);
  const out = Buffer.alloc(size);
  // §4 file header
  out.writeUInt32LE(0xa1b2c3d4, 0); // MagicNumber
  out.writeUInt16LE(2, 4); // MajorVersion
  out.writeUInt16LE(4, 6); // MinorVersion
  out.writeInt32LE(0, 8); // Reserved1 (was thiszone)
  out.writeUInt32LE(0, 12); // Reserved2 (was sigfigs)
  out.writeUInt32LE(snapLength, 16); // SnapLen
  out.writeUInt32LE(options.linkType ?? LINKTYPE_ETHERNET, 20); // LinkType (FCS bits 0)
  let at = 24;
  for (const packet of packets) {
    if (packet.frame.length > snapLength) throw new Error(`frame of ${packet.frame.length} octets exceeds the snapshot length ${snapLength}`);
    // §5 packet record: Timestamp (seconds), Timestamp (microseconds), Captured Packet Length, Original Packet Length
    out.writeUInt32LE(Math.floor(packet.timeMicros / 1e6), at);
    out.writeUInt32LE(packet.timeMicros % 1e6, at + 4);
    out.writeUInt32LE(packet.frame.length, at + 8);
    out.writeUInt32LE(packet.frame.length, at + 12);
    out.set(packet.frame, at + 16);
    at += 16 + packet.frame.length;
  }
  return out;
}

export type Transport =
  | { protocol: "tcp"; sourcePort: number; destinationPort: number; sequence: number; acknowledgement: number; flags: number; window?: number; payloadBytes: number }
  | { protocol: "udp"; sourcePort: number; destinationPort: number; payloadBytes: number; payload?: Uint8Array }
  | { protocol: "icmp"; type: number; code: number; identifier: number; sequence: number; payloadBytes: number };

export interface IpPacketOptions {
  source: string;
  destination: string;
  transport: Transport;
  /** IPv4 TTL (RFC 791) or IPv6 Hop Limit (RFC 8200); 64 is common practice. */
  hopLimit?: number;
  /** IPv4 Identification (RFC 791 §3.1); ignored for IPv6. */
  identification?: number;
}

/** The 4 or 16 octets of an address in text form. */
export function addressBytes(text: string): Uint8Array {
  return Uint8Array.from(ipaddr.parse(text).toByteArray());
}

/** The IP protocol number (IPv4 Protocol, IPv6 Next Header) a transport travels under, for the given IP version. */
export function protocolNumber(transport: Transport["protocol"], ipVersion: 4 | 6): number {
  if (transport === "tcp") return PROTOCOL_TCP;
  if (transport === "udp") return PROTOCOL_UDP;
  return ipVersion === 4 ? PROTOCOL_ICMP : PROTOCOL_ICMPV6;
}

/** Octets the IP packet will have: what IPv4 Total Length (RFC 791) says; for IPv6, 40 + Payload Length (RFC 8200 §3). */
export function ipPacketLength(ipVersion: 4 | 6, transport: Transport): number {
  return (ipVersion === 4 ? 20 : 40) + transportHeaderLength(transport) + transport.payloadBytes;
}

function transportHeaderLength(transport: Transport): number {
  if (transport.protocol === "tcp") return 20; // RFC 793 §3.1, Data Offset 5, no options
  return 8; // UDP header (RFC 768); ICMP echo header (RFC 792, RFC 4443 §4.1)
}

/**
 * An IPv4 or IPv6 packet (the version follows the addresses) carrying one TCP segment,
 * UDP datagram or ICMP echo message, with every length and checksum filled in.
 */
export function ipPacket(options: IpPacketOptions): Uint8Array {
  const source = addressBytes(options.source);
  const destination = addressBytes(options.destination);
  if (source.length !== destination.length) throw new Error(`${options.source} and ${options.destination} are not of one IP version`);
  const ipVersion = source.length === 4 ? 4 : 6;
  const protocol = protocolNumber(options.transport.protocol, ipVersion);
  const segment = transportSegment(options.transport);
  // The upper-layer checksums cover a pseudo-header: RFC 793 §3.1 and RFC 768 for IPv4, RFC 8200 §8.1 for IPv6.
  // ICMP for IPv4 has none (RFC 792); ICMPv6 does (RFC 4443 §2.3).
  const checksumAt = options.transport.protocol === "tcp" ? 16 : options.transport.protocol === "udp" ? 6 : 2;
  const pseudo = options.transport.protocol === "icmp" && ipVersion === 4 ? new Uint8Array(0) : pseudoHeader(source, destination, protocol, segment.length);
  let sum = internetChecksum([pseudo, segment]);
  if (options.transport.protocol === "udp" && sum === 0) sum = 0xffff; // RFC 768: a computed zero is sent as all ones
  new DataView(segment.buffer, segment.byteOffset).setUint16(checksumAt, sum);

  const hopLimit = options.hopLimit ?? 64;
  if (ipVersion === 4) {
    const packet = new Uint8Array(20 + segment.length);
    const view = new DataView(packet.buffer);
    if (packet.length > 0xffff) throw new Error(`an IPv4 packet of ${packet.length} octets exceeds Total Length's 16 bits`);
    // RFC 791 §3.1
    view.setUint8(0, (4 << 4) | 5); // Version 4, IHL 5 words (no options)
    view.setUint8(1, 0); // Type of Service
    view.setUint16(2, packet.length); // Total Length: header and data, in octets
    view.setUint16(4, (options.identification ?? 0) & 0xffff); // Identification
    view.setUint16(6, 0x4000); // Flags: Don't Fragment; Fragment Offset 0
    view.setUint8(8, hopLimit); // Time to Live
    view.setUint8(9, protocol); // Protocol
    packet.set(source, 12);
    packet.set(destination, 16);
    view.setUint16(10, internetChecksum([packet.subarray(0, 20)])); // Header Checksum, computed with the field zero
    packet.set(segment, 20);
    return packet;
  }
  const packet = new Uint8Array(40 + segment.length);
  const view = new DataView(packet.buffer);
  if (segment.length > 0xffff) throw new Error(`an IPv6 payload of ${segment.length} octets needs a jumbogram`);
  // RFC 8200 §3
  view.setUint32(0, 6 << 28); // Version 6, Traffic Class 0, Flow Label 0
  view.setUint16(4, segment.length); // Payload Length: octets after this 40-octet header
  view.setUint8(6, protocol); // Next Header
  view.setUint8(7, hopLimit); // Hop Limit
  packet.set(source, 8);
  packet.set(destination, 24);
  packet.set(segment, 40);
  return packet;
}

function transportSegment(transport: Transport): Uint8Array {
  const headerLength = transportHeaderLength(transport);
  const segment = new Uint8Array(headerLength + transport.payloadBytes);
  const view = new DataView(segment.buffer);
  if (transport.protocol === "udp" && transport.payload) {
    if (transport.payload.length !== transport.payloadBytes) throw new Error("payloadBytes must equal the payload's length");
    segment.set(transport.payload, headerLength);
  } else {
    // A recognisable filler; its content matters to nobody, only its length does.
    for (let i = headerLength; i < segment.length; i++) segment[i] = (i * 7) & 0xff;
  }
  switch (transport.protocol) {
    case "tcp": // RFC 793 §3.1
      view.setUint16(0, transport.sourcePort);
      view.setUint16(2, transport.destinationPort);
      view.setUint32(4, transport.sequence >>> 0);
      view.setUint32(8, transport.acknowledgement >>> 0);
      view.setUint8(12, (headerLength / 4) << 4); // Data Offset, in 32-bit words
      view.setUint8(13, transport.flags & 0x3f); // URG ACK PSH RST SYN FIN
      view.setUint16(14, transport.window ?? 65_535);
      // 16: Checksum (filled in by the caller), 18: Urgent Pointer 0
      break;
    case "udp": // RFC 768
      view.setUint16(0, transport.sourcePort);
      view.setUint16(2, transport.destinationPort);
      view.setUint16(4, segment.length); // Length: header and data
      break;
    case "icmp": // Echo: RFC 792 (type 8 request / 0 reply), RFC 4443 §4.1–4.2 (128 / 129)
      view.setUint8(0, transport.type);
      view.setUint8(1, transport.code);
      view.setUint16(4, transport.identifier);
      view.setUint16(6, transport.sequence);
      break;
  }
  return segment;
}

function pseudoHeader(source: Uint8Array, destination: Uint8Array, protocol: number, upperLength: number): Uint8Array {
  if (source.length === 4) {
    // RFC 793 §3.1 / RFC 768: source, destination, zero, protocol, TCP/UDP length
    const pseudo = new Uint8Array(12);
    pseudo.set(source, 0);
    pseudo.set(destination, 4);
    pseudo[9] = protocol;
    new DataView(pseudo.buffer).setUint16(10, upperLength);
    return pseudo;
  }
  // RFC 8200 §8.1: source, destination, 32-bit upper-layer packet length, 24 zero bits, next header
  const pseudo = new Uint8Array(40);
  pseudo.set(source, 0);
  pseudo.set(destination, 16);
  new DataView(pseudo.buffer).setUint32(32, upperLength);
  pseudo[39] = protocol;
  return pseudo;
}

/** The 16-bit one's complement of the one's complement sum (RFC 791 §3.1, RFC 1071), over the parts as one octet string. */
export function internetChecksum(parts: readonly Uint8Array[]): number {
  let sum = 0;
  let odd = -1; // a dangling high octet carried from a part of odd length
  for (const part of parts) {
    for (let i = 0; i < part.length; i++) {
      if (odd < 0) odd = part[i];
      else {
        sum += (odd << 8) | part[i];
        odd = -1;
      }
    }
  }
  if (odd >= 0) sum += odd << 8;
  while (sum > 0xffff) sum = (sum & 0xffff) + (sum >>> 16);
  return ~sum & 0xffff;
}

// Documentation MAC addresses, RFC 7042 §2.1.1 (00-00-5E-00-53-00 to -FF).
const DOCUMENTATION_MAC_A = Uint8Array.of(0x00, 0x00, 0x5e, 0x00, 0x53, 0x01);
const DOCUMENTATION_MAC_B = Uint8Array.of(0x00, 0x00, 0x5e, 0x00, 0x53, 0x02);
const ETHERNET_MINIMUM_FRAME = 60; // 64 octets on the wire less the 4-octet FCS, which captures leave out

/** An Ethernet II frame around an IP packet: EtherType 0x0800 (IPv4) or 0x86DD (IPv6), padded to the minimum frame. */
export function ethernetFrame(packet: Uint8Array): Uint8Array {
  const version = packet[0] >> 4;
  const frame = new Uint8Array(Math.max(ETHERNET_MINIMUM_FRAME, 14 + packet.length));
  frame.set(DOCUMENTATION_MAC_B, 0); // destination
  frame.set(DOCUMENTATION_MAC_A, 6); // source
  new DataView(frame.buffer).setUint16(12, version === 6 ? 0x86dd : 0x0800);
  frame.set(packet, 14);
  return frame;
}

export interface UdpDatagram {
  payload: Uint8Array;
  /** Receive time in microseconds since the Unix epoch; only the order matters to readers. */
  timeMicros: number;
  sourcePort: number;
  destinationPort: number;
}

/**
 * A pcap of UDP datagrams between two loopback addresses (127.0.0.1 by default), e.g. what an exporter sent
 * to a test socket, so a reference decoder can read it offline without capture privileges.
 */
export function udpCapture(datagrams: readonly UdpDatagram[], addresses: { source?: string; destination?: string } = {}): Buffer {
  return pcapFile(
    datagrams.map((d, i) => ({
      timeMicros: d.timeMicros,
      frame: ethernetFrame(
        ipPacket({
          source: addresses.source ?? "127.0.0.1",
          destination: addresses.destination ?? "127.0.0.1",
          identification: i,
          transport: { protocol: "udp", sourcePort: d.sourcePort, destinationPort: d.destinationPort, payloadBytes: d.payload.length, payload: d.payload },
        }),
      ),
    })),
  );
}
