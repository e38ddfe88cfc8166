/**
 * The flow-record schema: what `POST /api/v1/flows` accepts for one record.
 *
 * Canonical JSON names are IPFIX information-element names (RFC 7012, IANA IPFIX registry);
 * Weir's short aliases (`src`, `dst`, `sport`, `dport`, `proto`, `bytes`, `packets`,
 * `start`, `end`) are accepted beside them. Naming one field twice is fine when both names
 * carry the same value and an error naming both when they differ. Unknown names are an
 * error: a typo must not silently drop data. `null` counts as absent.
 *
 * Each record becomes a weighted item of a priority sample (Duffield, Lund, Thorup,
 * "Priority sampling for estimation of arbitrary subset sums", J. ACM 54(6), 2007), whose
 * weight must be positive; hence bytes and packets of at least 1.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import { z } from "zod";
import { elementByName } from "../ipfix/elements.ts";
import { formatAddress, parseAddress, parseIPv4, parseIPv6 } from "../net/address.ts";

/** One validated flow record. Addresses are 16 bytes, IPv4 stored IPv4-mapped (RFC 4291 §2.5.5.2). */
export type FlowRecord = {
  src: Uint8Array;
  dst: Uint8Array;
  sport: number;
  dport: number;
  proto: number;
  bytes: bigint;
  packets: bigint;
  /** Epoch milliseconds. */
  start: number | null;
  /** Epoch milliseconds. */
  end: number | null;
  ingressInterface: number | null;
  egressInterface: number | null;
  srcAs: number | null;
  dstAs: number | null;
};

/** A FlowRecord as JSON under Weir's aliases (IPFIX names where there is no alias). */
export type FlowRecordJson = {
  src: string;
  dst: string;
  sport: number;
  dport: number;
  proto: number;
  bytes: number | string;
  packets: number | string;
  start?: number;
  end?: number;
  ingressInterface?: number;
  egressInterface?: number;
  bgpSourceAsNumber?: number;
  bgpDestinationAsNumber?: number;
};

/** Where a record is wrong: `path` is the field name as sent (empty for the record itself). */
export type FlowRecordIssue = { path: string; message: string };

export type FlowRecordResult = { ok: true; record: FlowRecord } | { ok: false; issues: FlowRecordIssue[] };

export type FlowBatchResult =
  | { ok: true; records: FlowRecord[] }
  | { ok: false; invalidCount: number; details: { index: number; path: string; message: string }[] };

/** At most this many error details are returned for one batch; all invalid records are still counted. */
export const maxBatchErrorDetails = 100;

const UNSIGNED32_MAX = 4_294_967_295;
// unsigned64 (RFC 7012 abstract data type): the largest octetDeltaCount / packetDeltaCount there is.
const UNSIGNED64_MAX = 18_446_744_073_709_551_615n;

const POSITIVE_WEIGHT =
  "a flow is a set of packets observed (RFC 7011 §2), and priority sampling needs a positive weight";

// ---- values ----------------------------------------------------------------------------

// Converters return the value, or a reason string for the issue.
type Convert<T> = (value: never) => T | string;

function address(parse: (text: string) => Uint8Array): Convert<Uint8Array> {
  return (text: string) => {
    try {
      return parse(text);
    } catch (error) {
      return (error as Error).message;
    }
  };
}

/**
 * Counters (RFC 7012 unsigned64) are kept as exact `bigint`s. JSON numbers are IEEE doubles,
 * exact only up to 2^53−1: JSON.parse has already rounded anything larger before we see it
 * (9007199254740993 arrives as 9007199254740992), so such numbers are refused rather than
 * stored wrong, and values up to 2^64−1 travel as decimal strings instead.
 */
function counter(value: number | string): bigint | string {
  let count: bigint;
  if (typeof value === "number") {
    if (!Number.isInteger(value)) return "must be a whole number";
    if (!Number.isSafeInteger(value)) {
      return 'is above 2^53−1, where JSON numbers stop being exact; send larger counters as a decimal string such as "18446744073709551615"';
    }
    count = BigInt(value);
  } else {
    if (value.length === 0 || value.length > 64) return "must be a decimal string of at most 20 digits";
    for (let i = 0; i < value.length; i++) {
      const c = value.charCodeAt(i);
      if (c < 48 || c > 57) return "must be a decimal string of digits only (no sign, spaces, exponent or hex)";
    }
    count = BigInt(value);
    if (count > UNSIGNED64_MAX) return "is above 2^64−1 = 18446744073709551615, the largest unsigned64 (RFC 7012)";
  }
  if (count < 1n) return `must be at least 1: ${POSITIVE_WEIGHT}`;
  return count;
}

function readDigits(text: string, at: number, count: number): number {
  if (at + count > text.length) return -1;
  let value = 0;
  for (let i = at; i < at + count; i++) {
    const c = text.charCodeAt(i);
    if (c < 48 || c > 57) return -1;
    value = value * 10 + (c - 48);
  }
  return value;
}

function daysInMonth(year: number, month: number): number {
  if (month === 2) return (year % 4 === 0 && year % 100 !== 0) || year % 400 === 0 ? 29 : 28;
  return month === 4 || month === 6 || month === 9 || month === 11 ? 30 : 31;
}

const ISO_FORM = "ISO 8601 text with a timezone, e.g. 2024-05-01T02:00:00Z or 2024-05-01T04:00:00.250+02:00";
const BEFORE_EPOCH = "is before 1970-01-01T00:00:00Z; flow times are non-negative epoch milliseconds";

/**
 * ISO 8601 date-time with a timezone (the RFC 3339 §5.6 profile; seconds optional) to epoch
 * milliseconds. Fractions beyond milliseconds are truncated. A leap second (:60) is accepted
 * and lands on the next second, as POSIX time does. Returns a reason string when invalid.
 */
function isoToMilliseconds(text: string): number | string {
  const bad = `must be epoch milliseconds or ${ISO_FORM}`;
  const year = readDigits(text, 0, 4);
  const month = readDigits(text, 5, 2);
  const day = readDigits(text, 8, 2);
  const hour = readDigits(text, 11, 2);
  const minute = readDigits(text, 14, 2);
  if (
    year < 0 || month < 0 || day < 0 || hour < 0 || minute < 0 ||
    text[4] !== "-" || text[7] !== "-" || (text[10] !== "T" && text[10] !== "t") || text[13] !== ":"
  ) {
    return bad;
  }
  let i = 16;
  let second = 0;
  let millisecond = 0;
  if (text[i] === ":") {
    second = readDigits(text, i + 1, 2);
    if (second < 0) return bad;
    i += 3;
    if (text[i] === "." || text[i] === ",") {
      i++;
      const start = i;
      let scale = 100;
      while (i < text.length && text.charCodeAt(i) >= 48 && text.charCodeAt(i) <= 57) {
        millisecond += (text.charCodeAt(i) - 48) * scale;
        scale /= 10;
        i++;
      }
      if (i === start) return bad;
      millisecond = Math.floor(millisecond);
    }
  }
  let offsetMinutes = 0;
  const zone = text[i];
  if (zone === "Z" || zone === "z") {
    i++;
  } else if (zone === "+" || zone === "-") {
    const offsetHour = readDigits(text, i + 1, 2);
    const offsetMinute = readDigits(text, i + 4, 2);
    if (offsetHour < 0 || offsetMinute < 0 || text[i + 3] !== ":" || offsetHour > 23 || offsetMinute > 59) return bad;
    offsetMinutes = (zone === "+" ? 1 : -1) * (offsetHour * 60 + offsetMinute);
    i += 6;
  } else {
    return `needs a timezone (Z or ±hh:mm): ${ISO_FORM}`;
  }
  if (i !== text.length) return bad;
  if (year < 1970) return BEFORE_EPOCH;
  if (month < 1 || month > 12 || day < 1 || day > daysInMonth(year, month) || hour > 23 || minute > 59 || second > 60) {
    return `is not a real date and time: ${ISO_FORM}`;
  }
  const ms = Date.UTC(year, month - 1, day, hour, minute, second, millisecond) - offsetMinutes * 60_000;
  return ms < 0 ? BEFORE_EPOCH : ms;
}

function timestamp(value: number | string): number | string {
  if (typeof value === "string") return isoToMilliseconds(value);
  if (Number.isSafeInteger(value) && value >= 0) return value;
  return "must be epoch milliseconds as a non-negative whole number";
}

// ---- the wire schema ---------------------------------------------------------------------

// Zod checks the structure (known names only, JSON types, integer ranges); addresses,
// counters and times are converted afterwards in one pass. Per-field zod transforms cost
// several times more per record, and ingest parses every record of every batch.

function unsignedInt(max: number, what: string) {
  return z.int({ error: `must be an integer from 0 to ${max} (${what})` }).min(0).max(max).nullish();
}

function addressText(what: string) {
  return z.string({ error: `must be a string holding ${what}` }).nullish();
}

const numberOrText = (what: string) => z.union([z.number(), z.string()], { error: `must be ${what}` }).nullish();

const port = unsignedInt(65535, "a transport port, RFC 7012 unsigned16");
const protocol = unsignedInt(255, "an IP protocol number, RFC 7012 unsigned8");
const interfaceIndex = unsignedInt(UNSIGNED32_MAX, "an interface index, RFC 7012 unsigned32");
const asNumber = unsignedInt(UNSIGNED32_MAX, "a four-octet AS number, RFC 6793");
const countValue = numberOrText("a whole number, or a decimal string for values above 2^53−1");
const timeValue = numberOrText(`epoch milliseconds or ${ISO_FORM}`);

/** One flow record as sent: every accepted name with its JSON type (null counts as absent). */
export const flowRecordWireSchema = z.strictObject({
  sourceIPv4Address: addressText("an IPv4 address such as 192.0.2.1"),
  destinationIPv4Address: addressText("an IPv4 address such as 192.0.2.1"),
  sourceIPv6Address: addressText("an IPv6 address such as 2001:db8::1"),
  destinationIPv6Address: addressText("an IPv6 address such as 2001:db8::1"),
  src: addressText("an IPv4 or IPv6 address"),
  dst: addressText("an IPv4 or IPv6 address"),
  sourceTransportPort: port,
  sport: port,
  destinationTransportPort: port,
  dport: port,
  protocolIdentifier: protocol,
  proto: protocol,
  octetDeltaCount: countValue,
  bytes: countValue,
  packetDeltaCount: countValue,
  packets: countValue,
  flowStartMilliseconds: timeValue,
  start: timeValue,
  flowEndMilliseconds: timeValue,
  end: timeValue,
  ingressInterface: interfaceIndex,
  egressInterface: interfaceIndex,
  bgpSourceAsNumber: asNumber,
  bgpDestinationAsNumber: asNumber,
});

type Wire = z.output<typeof flowRecordWireSchema>;
type WireName = keyof Wire;

const KNOWN_NAMES = Object.keys(flowRecordWireSchema.shape) as WireName[];

// ---- merging names into one record --------------------------------------------------------

type Value = Uint8Array | bigint | number;

function sameValue(a: Value, b: Value): boolean {
  if (a instanceof Uint8Array && b instanceof Uint8Array) {
    for (let i = 0; i < 16; i++) if (a[i] !== b[i]) return false;
    return true;
  }
  return a === b;
}

function show(value: Value): string {
  return value instanceof Uint8Array ? formatAddress(value) : String(value);
}

/** The names one field may be sent under, IPFIX name first, each with its converter. */
type Field = { names: readonly WireName[]; convert: readonly (Convert<Value> | null)[] };

/**
 * The value given for one field under any of its names, converted. A conversion failure is
 * an issue at that name; differing values under two names are an issue naming both,
 * reported at the later name.
 */
function pick(wire: Wire, field: Field, issues: FlowRecordIssue[]): Value | undefined {
  let value: Value | undefined;
  let name: WireName | undefined;
  for (let i = 0; i < field.names.length; i++) {
    const candidate = field.names[i];
    const raw = wire[candidate];
    if (raw === undefined || raw === null) continue;
    const convert = field.convert[i];
    const v = convert === null ? (raw as Value) : convert(raw as never);
    if (typeof v === "string") {
      issues.push({ path: candidate, message: v });
    } else if (value === undefined) {
      value = v;
      name = candidate;
    } else if (!sameValue(value, v)) {
      issues.push({
        path: candidate,
        message: `${name} and ${candidate} name the same field with different values (${show(value)} vs ${show(v)}); send one`,
      });
    }
  }
  return value;
}

/** The first of a field's names that the record used. */
function sentName(wire: Wire, field: Field): WireName {
  return field.names.find((name) => wire[name] !== undefined && wire[name] !== null) ?? field.names[0];
}

/** An issue when no name of the field was sent at all (a value sent but invalid has its own issue). */
function required(wire: Wire, value: Value | undefined, field: Field, issues: FlowRecordIssue[]): void {
  if (value !== undefined) return;
  const names = field.names;
  if (names.some((name) => wire[name] !== undefined && wire[name] !== null)) return;
  const list = names.length === 2 ? `${names[0]} or ${names[1]}` : `${names.slice(0, -1).join(", ")} or ${names.at(-1)}`;
  issues.push({ path: names.at(-1) as string, message: `is required: send it as ${list}` });
}

const anyAddress = address(parseAddress);
const v4Address = address(parseIPv4);
const v6Address = address(parseIPv6);

const SRC: Field = { names: ["sourceIPv4Address", "sourceIPv6Address", "src"], convert: [v4Address, v6Address, anyAddress] };
const DST: Field = {
  names: ["destinationIPv4Address", "destinationIPv6Address", "dst"],
  convert: [v4Address, v6Address, anyAddress],
};
const SPORT: Field = { names: ["sourceTransportPort", "sport"], convert: [null, null] };
const DPORT: Field = { names: ["destinationTransportPort", "dport"], convert: [null, null] };
const PROTO: Field = { names: ["protocolIdentifier", "proto"], convert: [null, null] };
const BYTES: Field = { names: ["octetDeltaCount", "bytes"], convert: [counter, counter] };
const PACKETS: Field = { names: ["packetDeltaCount", "packets"], convert: [counter, counter] };
const START: Field = { names: ["flowStartMilliseconds", "start"], convert: [timestamp, timestamp] };
const END: Field = { names: ["flowEndMilliseconds", "end"], convert: [timestamp, timestamp] };

function toRecord(wire: Wire, issues: FlowRecordIssue[]): FlowRecord | undefined {
  const src = pick(wire, SRC, issues);
  const dst = pick(wire, DST, issues);
  const sport = pick(wire, SPORT, issues);
  const dport = pick(wire, DPORT, issues);
  const proto = pick(wire, PROTO, issues);
  const bytes = pick(wire, BYTES, issues);
  const packets = pick(wire, PACKETS, issues);
  const start = pick(wire, START, issues);
  const end = pick(wire, END, issues);
  required(wire, src, SRC, issues);
  required(wire, dst, DST, issues);
  required(wire, proto, PROTO, issues);
  required(wire, bytes, BYTES, issues);
  required(wire, packets, PACKETS, issues);
  if (start !== undefined && end !== undefined && (end as number) < (start as number)) {
    const endName = sentName(wire, END);
    issues.push({
      path: endName,
      message: `${endName} (${end}) is before ${sentName(wire, START)} (${start}); a flow ends after it starts`,
    });
  }
  if (issues.length > 0) return undefined;
  return {
    src: src as Uint8Array,
    dst: dst as Uint8Array,
    // Ports default to 0: ICMP and other port-less protocols carry none (common practice).
    sport: (sport as number | undefined) ?? 0,
    dport: (dport as number | undefined) ?? 0,
    proto: proto as number,
    bytes: bytes as bigint,
    packets: packets as bigint,
    start: (start as number | undefined) ?? null,
    end: (end as number | undefined) ?? null,
    ingressInterface: wire.ingressInterface ?? null,
    egressInterface: wire.egressInterface ?? null,
    srcAs: wire.bgpSourceAsNumber ?? null,
    dstAs: wire.bgpDestinationAsNumber ?? null,
  };
}

// ---- the fast path --------------------------------------------------------------------

// Ingest validates every record of every batch. This one pass handles the common shape —
// each field under one name, counters and times as JSON numbers — and gives up (undefined)
// on anything else, which then takes the thorough path with its messages. It accepts only
// what the thorough path accepts, with the same result; a property test checks that.
const F_SRC = 1, F_DST = 2, F_SPORT = 4, F_DPORT = 8, F_PROTO = 16, F_BYTES = 32, F_PACKETS = 64, F_START = 128, F_END = 256;
const F_IN = 512, F_OUT = 1024, F_SRC_AS = 2048, F_DST_AS = 4096;
const F_REQUIRED = F_SRC | F_DST | F_PROTO | F_BYTES | F_PACKETS;

function fastAddress(parse: (text: string) => Uint8Array, v: unknown): Uint8Array | undefined {
  if (typeof v !== "string") return undefined;
  try {
    return parse(v);
  } catch {
    return undefined;
  }
}

const isUint = (v: unknown, max: number): v is number => typeof v === "number" && Number.isInteger(v) && v >= 0 && v <= max;
const isCount = (v: unknown): v is number => typeof v === "number" && Number.isSafeInteger(v) && v >= 1;
const isTime = (v: unknown): v is number => typeof v === "number" && Number.isSafeInteger(v) && v >= 0;

function fastRecord(value: unknown): FlowRecord | undefined {
  if (typeof value !== "object" || value === null || Array.isArray(value)) return undefined;
  const o = value as Record<string, unknown>;
  let seen = 0;
  let src: Uint8Array | undefined;
  let dst: Uint8Array | undefined;
  let sport = 0, dport = 0, proto = 0, bytes = 0, packets = 0;
  let start: number | null = null, end: number | null = null;
  let ingress: number | null = null, egress: number | null = null, srcAs: number | null = null, dstAs: number | null = null;
  for (const key in o) {
    const v = o[key];
    if (v === null || v === undefined) continue;
    let bit: number;
    switch (key) {
      case "src": bit = F_SRC; src = fastAddress(parseAddress, v); if (!src) return undefined; break;
      case "sourceIPv4Address": bit = F_SRC; src = fastAddress(parseIPv4, v); if (!src) return undefined; break;
      case "sourceIPv6Address": bit = F_SRC; src = fastAddress(parseIPv6, v); if (!src) return undefined; break;
      case "dst": bit = F_DST; dst = fastAddress(parseAddress, v); if (!dst) return undefined; break;
      case "destinationIPv4Address": bit = F_DST; dst = fastAddress(parseIPv4, v); if (!dst) return undefined; break;
      case "destinationIPv6Address": bit = F_DST; dst = fastAddress(parseIPv6, v); if (!dst) return undefined; break;
      case "sport": case "sourceTransportPort": bit = F_SPORT; if (!isUint(v, 65535)) return undefined; sport = v; break;
      case "dport": case "destinationTransportPort": bit = F_DPORT; if (!isUint(v, 65535)) return undefined; dport = v; break;
      case "proto": case "protocolIdentifier": bit = F_PROTO; if (!isUint(v, 255)) return undefined; proto = v; break;
      case "bytes": case "octetDeltaCount": bit = F_BYTES; if (!isCount(v)) return undefined; bytes = v; break;
      case "packets": case "packetDeltaCount": bit = F_PACKETS; if (!isCount(v)) return undefined; packets = v; break;
      case "start": case "flowStartMilliseconds": bit = F_START; if (!isTime(v)) return undefined; start = v; break;
      case "end": case "flowEndMilliseconds": bit = F_END; if (!isTime(v)) return undefined; end = v; break;
      case "ingressInterface": bit = F_IN; if (!isUint(v, UNSIGNED32_MAX)) return undefined; ingress = v; break;
      case "egressInterface": bit = F_OUT; if (!isUint(v, UNSIGNED32_MAX)) return undefined; egress = v; break;
      case "bgpSourceAsNumber": bit = F_SRC_AS; if (!isUint(v, UNSIGNED32_MAX)) return undefined; srcAs = v; break;
      case "bgpDestinationAsNumber": bit = F_DST_AS; if (!isUint(v, UNSIGNED32_MAX)) return undefined; dstAs = v; break;
      default: return undefined;
    }
    // A field under two names: leave the comparison and its message to the thorough path.
    if (seen & bit) return undefined;
    seen |= bit;
  }
  if ((seen & F_REQUIRED) !== F_REQUIRED) return undefined;
  if (start !== null && end !== null && end < start) return undefined;
  return {
    src: src!,
    dst: dst!,
    sport,
    dport,
    proto,
    bytes: BigInt(bytes),
    packets: BigInt(packets),
    start,
    end,
    ingressInterface: ingress,
    egressInterface: egress,
    srcAs,
    dstAs,
  };
}

// ---- issues --------------------------------------------------------------------------

function editDistance(a: string, b: string): number {
  const row = Array.from({ length: b.length + 1 }, (_, j) => j);
  for (let i = 1; i <= a.length; i++) {
    let diagonal = row[0];
    row[0] = i;
    for (let j = 1; j <= b.length; j++) {
      const above = row[j];
      row[j] = Math.min(row[j] + 1, row[j - 1] + 1, diagonal + (a[i - 1] === b[j - 1] ? 0 : 1));
      diagonal = above;
    }
  }
  return row[b.length];
}

function unknownFieldMessage(key: string): string {
  // A name from the IPFIX registry (the same table the IPFIX decoder reads) is no typo: say
  // that Weir does not keep it rather than suggest a look-alike.
  const element = elementByName(key);
  if (element !== undefined) {
    return element.enterprise === 0
      ? `is an IPFIX element (id ${element.id}) that Weir does not store; leave it out`
      : `is an RFC 5103 reverse element (enterprise ${element.enterprise}, id ${element.id}) that Weir does not store; send the reverse direction as a record of its own`;
  }
  const lower = key.toLowerCase();
  let best: string | undefined;
  let bestDistance = 3; // suggest only near misses
  for (const name of key.length > 40 ? [] : KNOWN_NAMES) {
    const d = name.toLowerCase() === lower ? 0 : editDistance(lower, name.toLowerCase());
    if (d < bestDistance) {
      best = name;
      bestDistance = d;
    }
  }
  const hint = best === undefined ? "" : `; did you mean ${best}?`;
  return `is not a known field (IPFIX element names and Weir aliases only)${hint}`;
}

function zodIssues(error: z.ZodError): FlowRecordIssue[] {
  const out: FlowRecordIssue[] = [];
  for (const issue of error.issues) {
    if (issue.code === "unrecognized_keys") {
      for (const key of issue.keys) {
        const path = key.length > 64 ? `${key.slice(0, 64)}…` : key;
        out.push({ path, message: unknownFieldMessage(key) });
      }
      continue;
    }
    const path = issue.path.map(String).join(".");
    const message = path === "" && issue.code === "invalid_type" ? "a flow record must be a JSON object" : issue.message;
    const last = out[out.length - 1];
    if (last !== undefined && last.path === path && last.message === message) continue; // one failure, one line
    out.push({ path, message });
  }
  return out;
}

// ---- public API ----------------------------------------------------------------------

/**
 * Validates one flow record given under IPFIX names (RFC 7012) or Weir aliases and returns
 * it as a `FlowRecord`, or the issues found, each with the field name as sent.
 *
 * @example parseFlowRecord({ src: "192.0.2.1", dst: "2001:db8::1", proto: 6, bytes: 1500, packets: 1 })
 *   // { ok: true, record: { src: ::ffff:192.0.2.1, dst: 2001:db8::1, sport: 0, dport: 0, proto: 6, bytes: 1500n, packets: 1n, start: null, … } }
 * @example parseFlowRecord({ src: "192.0.2.1", dst: "192.0.2.2", proto: 6, bytes: 0, packets: 1 })
 *   // { ok: false, issues: [{ path: "bytes", message: "must be at least 1: …" }] }
 */
export function parseFlowRecord(value: unknown): FlowRecordResult {
  const fast = fastRecord(value);
  return fast === undefined ? parseFlowRecordThoroughly(value) : { ok: true, record: fast };
}

/**
 * The full path of parseFlowRecord: zod for structure, then conversion, with every issue
 * named. Exported so tests can check that the fast path agrees with it.
 */
export function parseFlowRecordThoroughly(value: unknown): FlowRecordResult {
  const parsed = flowRecordWireSchema.safeParse(value);
  if (!parsed.success) return { ok: false, issues: zodIssues(parsed.error) };
  const wire = parsed.data;
  const issues: FlowRecordIssue[] = [];
  const record = toRecord(wire, issues);
  return record === undefined ? { ok: false, issues } : { ok: true, record };
}

/**
 * Validates a batch of flow records. A batch is atomic (the API rejects it whole when any
 * record is invalid), so this returns either every record or the issues: `invalidCount`
 * counts every invalid record, `details` holds at most `maxBatchErrorDetails` issues, each
 * with the record's index and the field name as sent.
 *
 * @example parseFlowBatch([{ src: "192.0.2.1", dst: "192.0.2.2", proto: 17, bytes: 80, packets: 1 }])
 *   // { ok: true, records: [ … one FlowRecord … ] }
 * @example parseFlowBatch([{ src: "192.0.2.1", dst: "192.0.2.2", proto: 17, bytes: 80, packets: 1, sprot: 53 }])
 *   // { ok: false, invalidCount: 1, details: [{ index: 0, path: "sprot", message: "is not a known field …; did you mean sport?" }] }
 */
export function parseFlowBatch(values: unknown[]): FlowBatchResult {
  const records: FlowRecord[] = [];
  const details: { index: number; path: string; message: string }[] = [];
  let invalidCount = 0;
  for (let index = 0; index < values.length; index++) {
    const result = parseFlowRecord(values[index]);
    if (result.ok) {
      if (invalidCount === 0) records.push(result.record);
      continue;
    }
    invalidCount++;
    for (const issue of result.issues) {
      if (details.length >= maxBatchErrorDetails) break;
      details.push({ index, path: issue.path, message: issue.message });
    }
  }
  return invalidCount === 0 ? { ok: true, records } : { ok: false, invalidCount, details };
}

function counterJson(value: bigint): number | string {
  return value <= BigInt(Number.MAX_SAFE_INTEGER) ? Number(value) : value.toString();
}

/**
 * Turns a FlowRecord back into JSON under Weir's aliases (IPFIX names for the fields without
 * one): addresses as text (`formatAddress`: dotted IPv4, RFC 5952 IPv6), counters as numbers
 * up to 2^53−1 and decimal strings above, null fields left out. `parseFlowRecord` of the
 * result gives back an equal record.
 *
 * @example flowRecordToJson(record) // { src: "192.0.2.1", dst: "2001:db8::1", sport: 0, dport: 0, proto: 6, bytes: 1500, packets: 1 }
 */
export function flowRecordToJson(record: FlowRecord): FlowRecordJson {
  const json: FlowRecordJson = {
    src: formatAddress(record.src),
    dst: formatAddress(record.dst),
    sport: record.sport,
    dport: record.dport,
    proto: record.proto,
    bytes: counterJson(record.bytes),
    packets: counterJson(record.packets),
  };
  if (record.start !== null) json.start = record.start;
  if (record.end !== null) json.end = record.end;
  if (record.ingressInterface !== null) json.ingressInterface = record.ingressInterface;
  if (record.egressInterface !== null) json.egressInterface = record.egressInterface;
  if (record.srcAs !== null) json.bgpSourceAsNumber = record.srcAs;
  if (record.dstAs !== null) json.bgpDestinationAsNumber = record.dstAs;
  return json;
}
