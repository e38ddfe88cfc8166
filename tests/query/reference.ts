// The reference a query is checked against: plain predicates over whole records, written from
// the request's documented meaning (include lists OR within a field and AND across fields,
// excludes remove matches, a port matches any listed port or range, an AS number or interface
// index likewise, and a record without that value matches no list of the field) with the prefix
// match of RFC 4632 §3.1 (`prefixContains`). Nothing here shares code with the scan or with
// the field table (app/query/fields.ts).
import { isIPv4Mapped } from "~/net/address";
import { coveringPrefix, formatPrefix, prefixContains, type Prefix } from "~/net/prefix";
import type { EstimateQuery, Metric, PortRange } from "~/query/request";

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

function anyContains(prefixes: Prefix[], address: Uint8Array): boolean {
  return prefixes.some((p) => prefixContains(p, address));
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
      const address = g.by === "src" ? r.src : r.dst;
      return formatPrefix(coveringPrefix(address, isIPv4Mapped(address) ? g.prefixLength.ipv4 : g.prefixLength.ipv6));
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
