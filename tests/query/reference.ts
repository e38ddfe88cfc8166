// The reference a query is checked against: plain predicates over whole records, written from
// the request's documented meaning (include lists OR within a field and AND across fields,
// excludes remove matches, a port matches any listed port or range, an AS number or interface
// index likewise, and a record without that value matches no list of the field) with the prefix
// match of RFC 4632 §3.1. Nothing here shares code with the scan, the field table
// (app/query/fields.ts) or the address and prefix helpers (app/net/): the prefix arithmetic
// below is its own, on 128-bit integers rather than bytes, and only the parsed query (its
// prefixes' network bytes and lengths) comes from the project.
import type { EstimateQuery, Metric, PortRange } from "~/query/request";

/** A 16-byte address (IPv4 stored IPv4-mapped, ::ffff:a.b.c.d, RFC 4291 §2.5.5.2) as one 128-bit integer. */
function toBigInt(bytes: Uint8Array): bigint {
  let value = 0n;
  for (const b of bytes) value = (value << 8n) | BigInt(b);
  return value;
}

/** The first `length` bits of a 128-bit value, the rest cleared. */
function network(value: bigint, length: number): bigint {
  const host = BigInt(128 - length);
  return (value >> host) << host;
}

/** RFC 4291 §2.5.5.2: 80 zero bits, 16 one bits, then the IPv4 address. */
function isMapped(value: bigint): boolean {
  return value >> 32n === 0xffffn;
}

/** RFC 4632 §3.1: the address lies in the prefix when their first `length` bits agree. */
function prefixHolds(prefix: { bytes: Uint8Array; length: number }, address: Uint8Array): boolean {
  return network(toBigInt(address), prefix.length) === network(toBigInt(prefix.bytes), prefix.length);
}

/**
 * RFC 5952 §4 text of a 128-bit value that is not IPv4-mapped: eight lowercase hex groups
 * without leading zeros, the longest run of two or more zero groups (the first on a tie) as "::".
 */
function ipv6Text(value: bigint): string {
  const groups = Array.from({ length: 8 }, (_, i) => Number((value >> BigInt(16 * (7 - i))) & 0xffffn));
  let best = { start: -1, length: 1 };
  for (let i = 0; i < 8; ) {
    let j = i;
    while (j < 8 && groups[j] === 0) j++;
    if (j - i > best.length) best = { start: i, length: j - i };
    i = j === i ? i + 1 : j;
  }
  const hex = groups.map((g) => g.toString(16));
  if (best.start < 0) return hex.join(":");
  return `${hex.slice(0, best.start).join(":")}::${hex.slice(best.start + best.length).join(":")}`;
}

/** The covering prefix of an address as the API documents a group key: `a.b.c.d/n` for IPv4 (RFC 4632 §3.1), RFC 5952 text `/n` for IPv6. */
function coveringPrefixText(address: Uint8Array, prefixLength: { ipv4: number; ipv6: number }): string {
  const value = toBigInt(address);
  if (isMapped(value)) {
    const v4 = network(value, 96 + prefixLength.ipv4) & 0xffffffffn;
    const octets = [24n, 16n, 8n, 0n].map((shift) => String((v4 >> shift) & 0xffn));
    return `${octets.join(".")}/${prefixLength.ipv4}`;
  }
  return `${ipv6Text(network(value, prefixLength.ipv6))}/${prefixLength.ipv6}`;
}

export interface PlainRecord {
  src: Uint8Array;
  dst: Uint8Array;
  sport: number;
  dport: number;
  proto: number;
  bytes: number;
  packets: number;
  /** bgpSourceAsNumber, bgpDestinationAsNumber, ingressInterface, egressInterface; null or absent: not sent. */
  srcAs?: number | null;
  dstAs?: number | null;
  inIf?: number | null;
  outIf?: number | null;
}

function inPorts(port: number, ranges: PortRange[]): boolean {
  return ranges.length === 0 || ranges.some((r) => port >= r.low && port <= r.high);
}

/** An optional value: matched by no list when absent. */
function inNumbers(value: number | null | undefined, ranges: PortRange[]): boolean {
  if (ranges.length === 0) return true;
  return value !== null && value !== undefined && ranges.some((r) => value >= r.low && value <= r.high);
}

function anyContains(prefixes: readonly { bytes: Uint8Array; length: number }[], address: Uint8Array): boolean {
  return prefixes.some((p) => prefixHolds(p, address));
}

/** Whether a record passes the query's address, port and protocol filters. */
export function matchesWhere(q: EstimateQuery, r: PlainRecord): boolean {
  const w = q.where;
  return (
    (w.src.length === 0 || anyContains(w.src, r.src)) &&
    (w.dst.length === 0 || anyContains(w.dst, r.dst)) &&
    !anyContains(w.srcExclude, r.src) &&
    !anyContains(w.dstExclude, r.dst) &&
    inPorts(r.sport, w.sport) &&
    inPorts(r.dport, w.dport) &&
    (w.proto.length === 0 || w.proto.includes(r.proto)) &&
    inNumbers(r.srcAs, w.srcAs) &&
    inNumbers(r.dstAs, w.dstAs) &&
    inNumbers(r.inIf, w.inIf) &&
    inNumbers(r.outIf, w.outIf)
  );
}

/** A record's value of the metric: its bytes, its packets, or 1 for flows. */
export function metricValue(metric: Metric): (r: PlainRecord) => number {
  return metric === "bytes" ? (r) => r.bytes : metric === "packets" ? (r) => r.packets : () => 1;
}

/** The group key of a record as the API documents it. */
export function groupKey(q: EstimateQuery, r: PlainRecord, collector: string, windowStart: number): string {
  const g = q.groupBy!;
  switch (g.by) {
    case "src":
    case "dst": {
      return coveringPrefixText(g.by === "src" ? r.src : r.dst, g.prefixLength);
    }
    case "sport":
      return String(r.sport);
    case "dport":
      return String(r.dport);
    case "proto":
      return String(r.proto);
    case "collector":
      return collector;
    case "window":
      return new Date(windowStart).toISOString();
    case "srcAs":
    case "dstAs":
    case "inIf":
    case "outIf": {
      const value = r[g.by];
      // Records without the value form one group, keyed "none" (the documented key).
      return value === null || value === undefined ? "none" : String(value);
    }
  }
}

/**
 * Whether an optional value is matched by a filter list as a request writes it (numbers, digit
 * strings, "low-high" ranges), read here from the text itself rather than from a parsed query:
 * an empty list matches everything, an absent value matches no item.
 */
export function matchesItems(value: number | null | undefined, items: readonly (number | string)[] | undefined): boolean {
  if (items === undefined || items.length === 0) return true;
  if (value === null || value === undefined) return false;
  return items.some((item) => {
    const [low, high = low] = String(item).split("-").map(Number);
    return value >= low && value <= high;
  });
}
