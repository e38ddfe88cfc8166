// Invented benchmark traffic: heavy-tailed flow sizes (Pareto, shape 1.2, at
// least 40 bytes — common practice to model flow sizes so) on documentation
// address space (RFC 5737, RFC 3849). Deterministic for a given seed.
import type { FlowRecord } from "~/flow/record";
import { formatAddress, parseAddress } from "~/net/address";
import { seededUniform } from "~/sampling/uniform";

const V4_BLOCKS = ["192.0.2", "198.51.100", "203.0.113"];
const PORTS = [443, 80, 53, 123, 22, 8443, 25, 3478];
const PROTOS = [6, 6, 6, 17, 17, 1];

/** Makes `count` records with start times spread evenly over [fromMs, toMs), in time order. */
export function* benchRecords(count: number, fromMs: number, toMs: number, seed: number): Generator<FlowRecord> {
  const u = seededUniform(seed);
  const addresses = Array.from({ length: 768 }, (_, i) => parseAddress(`${V4_BLOCKS[i % 3]}.${i % 256}`));
  const v6 = Array.from({ length: 256 }, (_, i) => parseAddress(`2001:db8:${(i % 16).toString(16)}::${i.toString(16)}`));
  const step = (toMs - fromMs) / count;
  for (let i = 0; i < count; i++) {
    const bytes = Math.round(40 / Math.pow(u(), 1 / 1.2));
    const size = 64 + Math.floor(u() * 1437);
    const ipv6 = u() < 0.2;
    const pick = u();
    const src = ipv6 ? v6[Math.floor(pick * 256)] : addresses[Math.floor(pick * pick * 768)];
    const dst = ipv6 ? v6[Math.floor(u() * 256)] : addresses[Math.floor(u() * 768)];
    const start = Math.floor(fromMs + i * step);
    const proto = PROTOS[Math.floor(u() * PROTOS.length)];
    yield {
      src,
      dst,
      sport: proto === 1 ? 0 : 1024 + Math.floor(u() * 64000),
      dport: proto === 1 ? 0 : PORTS[Math.floor(u() * u() * PORTS.length)],
      proto,
      bytes: BigInt(Math.min(bytes, Number.MAX_SAFE_INTEGER)),
      packets: BigInt(Math.max(1, Math.ceil(bytes / size))),
      start,
      end: start + Math.floor(u() * 30_000),
      ingressInterface: 1 + Math.floor(u() * 8),
      egressInterface: 1 + Math.floor(u() * 8),
      srcAs: 64496 + Math.floor(u() * 16),
      dstAs: 64496 + Math.floor(u() * 16),
    };
  }
}

/** The record as one NDJSON line under Weir's aliases. */
export function toNdjsonLine(r: FlowRecord): string {
  return JSON.stringify({
    src: formatAddress(r.src),
    dst: formatAddress(r.dst),
    sport: r.sport,
    dport: r.dport,
    proto: r.proto,
    bytes: Number(r.bytes),
    packets: Number(r.packets),
    start: r.start,
    end: r.end,
    ingressInterface: r.ingressInterface,
    egressInterface: r.egressInterface,
    bgpSourceAsNumber: r.srcAs,
    bgpDestinationAsNumber: r.dstAs,
  });
}
