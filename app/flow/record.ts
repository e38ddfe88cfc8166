/**
 * The flow-record schema: what `POST /api/v1/flows` accepts for one record.
 *
 * Canonical JSON names are IPFIX information-element names (RFC 7012, IANA IPFIX registry);
 * Weir's short aliases (`src`, `dst`, `sport`, `dport`, `proto`, `bytes`, `packets`,
 * `start`, `end`) are accepted beside them. Naming one field twice is fine when both names
 * carry the same value and an error naming both when they differ. `null` counts as absent.
 *
 * Every other name of the IANA IPFIX registry (the table app/ipfix/elements.ts, which the
 * IPFIX decoder reads too) is accepted and mapped or ignored:
 * - time forms (RFC 7012 / IANA): flowStart/EndSeconds (dateTimeSeconds), …Milliseconds,
 *   …Microseconds and …Nanoseconds (epoch counts in those units, or RFC 3339 text) become
 *   the record's start and end in milliseconds, truncated; several forms of one time must
 *   agree at the coarser form's precision, and the finest one is kept;
 * - total counts (octetTotalCount 85, packetTotalCount 86): RFC 7012 defines them as the
 *   octets / packets of the flow since the Metering Process (re-)initialisation, the delta
 *   forms (1, 2) as those since the flow's previous report. For a flow reported once they
 *   are the same number, so a total stands in for its delta form when the record has none,
 *   as the IPFIX decoder does; with both, the delta form is used and the total ignored.
 *   (An exporter that reports one long flow several times with totals only would be
 *   counted more than once: common practice is to send deltas, as RFC 7012 recommends.)
 * - every other IANA element (tcpControlBits, vlanId, flowStartDeltaMicroseconds, …) is
 *   ignored, and counted per name so Intake and the ingest answer can show it.
 * RFC 5103 reverse elements are refused: a record carries one direction (send the reverse
 * direction as a record of its own). A name in no registry is an error: a typo must not
 * silently drop data.
 *
 * Each record becomes a weighted item of a priority sample (Duffield, Lund, Thorup,
 * "Priority sampling for estimation of arbitrary subset sums", J. ACM 54(6), 2007), whose
 * weight must be positive; hence bytes and packets of at least 1.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import { z } from "zod";
import { elementByName, elementNames } from "../ipfix/elements.ts";
import { formatAddress, parseAddress, parseIPv4, parseIPv6 } from "../net/address.ts";
import { DEFAULT_TIME_FLOOR_MS, END_OF_TIME_MS, showTime, unitHint } from "../time/flow-time.ts";
import { parseRfc3339, RFC3339_FORM } from "../time/rfc3339.ts";

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
  | { ok: true; records: FlowRecord[]; ignoredFields: Record<string, number> }
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

const TIME_FORM = `epoch milliseconds or ${RFC3339_FORM}`;
const BEFORE_EPOCH = "is before 1970-01-01T00:00:00Z; flow times are non-negative epoch milliseconds";

/** A time from epoch milliseconds, refused at and after END_OF_TIME_MS (with a unit hint when one fits). */
function inTimeRange(ms: number): number | string {
  if (ms < END_OF_TIME_MS) return ms;
  const hint = unitHint(ms, DEFAULT_TIME_FLOOR_MS, END_OF_TIME_MS - 1);
  return `is after 9999-12-31T23:59:59Z, the last time RFC 3339 can write${hint ? `; ${hint}` : ""}`;
}

function fromText(text: string): number | string {
  const ms = parseRfc3339(text);
  if (typeof ms === "string") return ms;
  return ms < 0 ? BEFORE_EPOCH : ms;
}

/** A converter of a time in whole `unit`s since the epoch, or RFC 3339 text, to epoch ms (truncated). */
function timeIn(unit: "seconds" | "milliseconds" | "microseconds" | "nanoseconds"): Convert<number> {
  // Whole units to ms, as the fast path computes them (a division, not a multiplication by 0.001: floor needs the rounded quotient).
  const toMs = unit === "seconds" ? (v: number) => v * 1000 : unit === "milliseconds" ? (v: number) => v : unit === "microseconds" ? (v: number) => Math.floor(v / 1000) : (v: number) => Math.floor(v / 1e6);
  const whole = `must be epoch ${unit} as a non-negative whole number, or ${RFC3339_FORM}`;
  return (value: number | string) => {
    if (typeof value === "string") {
      // Decimal digits: exact where a JSON number would not be (nanoseconds of today exceed 2^53).
      if (unit !== "milliseconds" && /^\d{1,20}$/.test(value)) {
        const ms = unit === "seconds" ? BigInt(value) * 1000n : BigInt(value) / (unit === "microseconds" ? 1000n : 1_000_000n);
        return ms >= BigInt(END_OF_TIME_MS) ? inTimeRange(END_OF_TIME_MS) : Number(ms);
      }
      return fromText(value);
    }
    // Nanoseconds of today lie above 2^53, where JSON numbers are doubles within 256 ns of the
    // value sent: close enough for the milliseconds Weir keeps, so any whole number is taken.
    const exact = unit === "nanoseconds" ? Number.isInteger(value) : Number.isSafeInteger(value);
    if (!exact || value < 0) return whole;
    return inTimeRange(toMs(value));
  };
}

const timestamp = timeIn("milliseconds");

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
const timeValue = numberOrText(TIME_FORM);
const timeOf = (unit: string) => numberOrText(`epoch ${unit} as a whole number, or ${RFC3339_FORM}`);

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
  flowStartSeconds: timeOf("seconds"),
  flowStartMicroseconds: timeOf("microseconds"),
  flowStartNanoseconds: timeOf("nanoseconds"),
  flowEndMilliseconds: timeValue,
  end: timeValue,
  flowEndSeconds: timeOf("seconds"),
  flowEndMicroseconds: timeOf("microseconds"),
  flowEndNanoseconds: timeOf("nanoseconds"),
  octetTotalCount: countValue,
  packetTotalCount: countValue,
  ingressInterface: interfaceIndex,
  egressInterface: interfaceIndex,
  bgpSourceAsNumber: asNumber,
  bgpDestinationAsNumber: asNumber,
});

/**
 * IANA element names the schema above does not name: accepted and ignored (counted). Built
 * from the element table on first use; RFC 5103 reverse elements are not among them.
 */
function isIgnoredElement(name: string): boolean {
  const element = elementByName(name);
  return element !== undefined && element.enterprise === 0 && !Object.hasOwn(flowRecordWireSchema.shape, name);
}

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

/**
 * The names one field may be sent under, IPFIX name first, each with its converter; for
 * times, the precision of each name in milliseconds (1000 for seconds), finest first.
 */
type Field = { names: readonly WireName[]; convert: readonly (Convert<Value> | null)[]; precisionMs?: readonly number[] };

/**
 * The value given for one field under any of its names, converted. A conversion failure is
 * an issue at that name; differing values under two names are an issue naming both,
 * reported at the later name.
 */
function pick(wire: Wire, field: Field, issues: FlowRecordIssue[]): Value | undefined {
  let value: Value | undefined;
  let name: WireName | undefined;
  let precision = 1;
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
      precision = field.precisionMs?.[i] ?? 1;
    } else if (field.precisionMs !== undefined) {
      // A time under two forms (RFC 7012 flowStartSeconds and flowStartMilliseconds, say):
      // they agree when equal at the coarser one's precision; the finer one (first) is kept.
      const coarse = Math.max(precision, field.precisionMs[i]);
      if (Math.floor((value as number) / coarse) !== Math.floor((v as number) / coarse)) {
        issues.push({
          path: candidate,
          message: `${name} and ${candidate} name the same time with different values (${showTime(value as number)} vs ${showTime(v as number)}); send one`,
        });
      }
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
const BYTES_TOTAL: Field = { names: ["octetTotalCount"], convert: [counter] };
const PACKETS_TOTAL: Field = { names: ["packetTotalCount"], convert: [counter] };
const seconds = timeIn("seconds"), microseconds = timeIn("microseconds"), nanoseconds = timeIn("nanoseconds");
const START: Field = {
  names: ["flowStartNanoseconds", "flowStartMicroseconds", "flowStartMilliseconds", "start", "flowStartSeconds"],
  convert: [nanoseconds, microseconds, timestamp, timestamp, seconds],
  precisionMs: [1, 1, 1, 1, 1000],
};
const END: Field = {
  names: ["flowEndNanoseconds", "flowEndMicroseconds", "flowEndMilliseconds", "end", "flowEndSeconds"],
  convert: [nanoseconds, microseconds, timestamp, timestamp, seconds],
  precisionMs: [1, 1, 1, 1, 1000],
};

/** A delta count, or the total count standing in for it (see the module comment); the total is noted as ignored when both came. */
function counterOf(wire: Wire, delta: Field, total: Field, issues: FlowRecordIssue[], ignored: string[]): Value | undefined {
  const value = pick(wire, delta, issues);
  const name = total.names[0];
  if (wire[name] === undefined || wire[name] === null) return value;
  const standIn = pick(wire, total, issues);
  if (value === undefined && !delta.names.some((n) => wire[n] !== undefined && wire[n] !== null)) return standIn;
  ignored.push(name);
  return value;
}

function toRecord(wire: Wire, issues: FlowRecordIssue[], ignored: string[]): FlowRecord | undefined {
  const src = pick(wire, SRC, issues);
  const dst = pick(wire, DST, issues);
  const sport = pick(wire, SPORT, issues);
  const dport = pick(wire, DPORT, issues);
  const proto = pick(wire, PROTO, issues);
  const bytes = counterOf(wire, BYTES, BYTES_TOTAL, issues, ignored);
  const packets = counterOf(wire, PACKETS, PACKETS_TOTAL, issues, ignored);
  const start = pick(wire, START, issues);
  const end = pick(wire, END, issues);
  required(wire, src, SRC, issues);
  required(wire, dst, DST, issues);
  required(wire, proto, PROTO, issues);
  if (wire.octetTotalCount == null) required(wire, bytes, BYTES, issues);
  if (wire.packetTotalCount == null) required(wire, packets, PACKETS, issues);
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
// each field under one name, counters and times as JSON numbers, other IANA elements
// ignored — and gives up (undefined) on anything else, which then takes the thorough path
// with its messages. It accepts only what the thorough path accepts, with the same result
// and the same ignored names; a property test checks that.
const F_SRC = 1, F_DST = 2, F_SPORT = 4, F_DPORT = 8, F_PROTO = 16, F_BYTES = 32, F_PACKETS = 64, F_START = 128, F_END = 256;
const F_IN = 512, F_OUT = 1024, F_SRC_AS = 2048, F_DST_AS = 4096, F_BYTES_TOTAL = 8192, F_PACKETS_TOTAL = 16384;
const F_REQUIRED = F_SRC | F_DST | F_PROTO;

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
const isTime = (v: unknown): v is number => typeof v === "number" && Number.isSafeInteger(v) && v >= 0 && v < END_OF_TIME_MS;
// Epoch seconds, microseconds, nanoseconds as JSON numbers, to ms (NaN when the thorough path must decide).
const fastSeconds = (v: unknown) => (typeof v === "number" && Number.isSafeInteger(v) && v >= 0 && v * 1000 < END_OF_TIME_MS ? v * 1000 : NaN);
const fastMicros = (v: unknown) => (typeof v === "number" && Number.isSafeInteger(v) && v >= 0 && v / 1000 < END_OF_TIME_MS ? Math.floor(v / 1000) : NaN);
const fastNanos = (v: unknown) => (typeof v === "number" && Number.isInteger(v) && v >= 0 && v / 1e6 < END_OF_TIME_MS ? Math.floor(v / 1e6) : NaN);

function fastRecord(value: unknown, ignored: Map<string, number> | undefined): FlowRecord | undefined {
  if (typeof value !== "object" || value === null || Array.isArray(value)) return undefined;
  const o = value as Record<string, unknown>;
  let seen = 0;
  let src: Uint8Array | undefined;
  let dst: Uint8Array | undefined;
  let sport = 0, dport = 0, proto = 0, bytes = 0, packets = 0, bytesTotal = 0, packetsTotal = 0;
  let start: number | null = null, end: number | null = null;
  let ingress: number | null = null, egress: number | null = null, srcAs: number | null = null, dstAs: number | null = null;
  // Names to count as ignored, noted only once the record is known to be valid.
  let skipped: string[] | undefined;
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
      case "octetTotalCount": bit = F_BYTES_TOTAL; if (!isCount(v)) return undefined; bytesTotal = v; break;
      case "packetTotalCount": bit = F_PACKETS_TOTAL; if (!isCount(v)) return undefined; packetsTotal = v; break;
      case "start": case "flowStartMilliseconds": bit = F_START; if (!isTime(v)) return undefined; start = v; break;
      case "end": case "flowEndMilliseconds": bit = F_END; if (!isTime(v)) return undefined; end = v; break;
      case "flowStartSeconds": bit = F_START; start = fastSeconds(v); if (Number.isNaN(start)) return undefined; break;
      case "flowEndSeconds": bit = F_END; end = fastSeconds(v); if (Number.isNaN(end)) return undefined; break;
      case "flowStartMicroseconds": bit = F_START; start = fastMicros(v); if (Number.isNaN(start)) return undefined; break;
      case "flowEndMicroseconds": bit = F_END; end = fastMicros(v); if (Number.isNaN(end)) return undefined; break;
      case "flowStartNanoseconds": bit = F_START; start = fastNanos(v); if (Number.isNaN(start)) return undefined; break;
      case "flowEndNanoseconds": bit = F_END; end = fastNanos(v); if (Number.isNaN(end)) return undefined; break;
      case "ingressInterface": bit = F_IN; if (!isUint(v, UNSIGNED32_MAX)) return undefined; ingress = v; break;
      case "egressInterface": bit = F_OUT; if (!isUint(v, UNSIGNED32_MAX)) return undefined; egress = v; break;
      case "bgpSourceAsNumber": bit = F_SRC_AS; if (!isUint(v, UNSIGNED32_MAX)) return undefined; srcAs = v; break;
      case "bgpDestinationAsNumber": bit = F_DST_AS; if (!isUint(v, UNSIGNED32_MAX)) return undefined; dstAs = v; break;
      default:
        if (!isIgnoredElement(key)) return undefined;
        (skipped ??= []).push(key);
        continue;
    }
    // A field under two names: leave the comparison and its message to the thorough path.
    if (seen & bit) return undefined;
    seen |= bit;
  }
  if ((seen & F_REQUIRED) !== F_REQUIRED) return undefined;
  if (!(seen & F_BYTES)) {
    if (!(seen & F_BYTES_TOTAL)) return undefined;
    bytes = bytesTotal;
  } else if (seen & F_BYTES_TOTAL) (skipped ??= []).push("octetTotalCount");
  if (!(seen & F_PACKETS)) {
    if (!(seen & F_PACKETS_TOTAL)) return undefined;
    packets = packetsTotal;
  } else if (seen & F_PACKETS_TOTAL) (skipped ??= []).push("packetTotalCount");
  if (start !== null && end !== null && end < start) return undefined;
  if (skipped !== undefined && ignored !== undefined) for (const name of skipped) ignored.set(name, (ignored.get(name) ?? 0) + 1);
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

/** Levenshtein distance, or `limit` as soon as it is sure to be at least that (a typo is a near miss). */
function editDistance(a: string, b: string, limit: number): number {
  if (Math.abs(a.length - b.length) >= limit) return limit;
  const row = Array.from({ length: b.length + 1 }, (_, j) => j);
  for (let i = 1; i <= a.length; i++) {
    let diagonal = row[0];
    row[0] = i;
    let best = row[0];
    for (let j = 1; j <= b.length; j++) {
      const above = row[j];
      row[j] = Math.min(row[j] + 1, row[j - 1] + 1, diagonal + (a[i - 1] === b[j - 1] ? 0 : 1));
      diagonal = above;
      if (row[j] < best) best = row[j];
    }
    if (best >= limit) return limit;
  }
  return Math.min(row[b.length], limit);
}

/** Every name a record may carry: Weir's fields and aliases, then the IANA element names (for suggestions). */
let suggestionNames: string[] | undefined;

function nearestName(key: string): string | undefined {
  if (key.length > 40) return undefined;
  suggestionNames ??= [...KNOWN_NAMES, ...elementNames()];
  const lower = key.toLowerCase();
  let best: string | undefined;
  let bestDistance = 3; // suggest only near misses
  for (const name of suggestionNames) {
    const d = name.toLowerCase() === lower ? 0 : editDistance(lower, name.toLowerCase(), bestDistance);
    if (d < bestDistance) {
      best = name;
      bestDistance = d;
    }
  }
  return best;
}

function unknownFieldMessage(key: string, suggest: boolean): string {
  const element = elementByName(key);
  if (element !== undefined && element.enterprise !== 0) {
    return `is an RFC 5103 reverse element (enterprise ${element.enterprise}, id ${element.id}): a Weir record carries one direction; send the reverse direction as a record of its own`;
  }
  const best = suggest ? nearestName(key) : undefined;
  const hint = best === undefined ? "" : `; did you mean ${best}?`;
  return `is neither a Weir field nor an IPFIX information element name (IANA registry)${hint}`;
}

function zodIssues(error: z.ZodError, suggest: boolean): FlowRecordIssue[] {
  const out: FlowRecordIssue[] = [];
  for (const issue of error.issues) {
    if (issue.code === "unrecognized_keys") {
      for (const key of issue.keys) {
        const path = key.length > 64 ? `${key.slice(0, 64)}…` : key;
        out.push({ path, message: unknownFieldMessage(key, suggest) });
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
 * it as a `FlowRecord`, or the issues found, each with the field name as sent. IANA elements
 * Weir does not store are ignored; when `ignored` is given, each one of a valid record adds
 * 1 to its name's count there.
 *
 * @example parseFlowRecord({ src: "192.0.2.1", dst: "2001:db8::1", proto: 6, bytes: 1500, packets: 1 })
 *   // { ok: true, record: { src: ::ffff:192.0.2.1, dst: 2001:db8::1, sport: 0, dport: 0, proto: 6, bytes: 1500n, packets: 1n, start: null, … } }
 * @example parseFlowRecord({ src: "192.0.2.1", dst: "192.0.2.2", proto: 6, bytes: 0, packets: 1 })
 *   // { ok: false, issues: [{ path: "bytes", message: "must be at least 1: …" }] }
 */
export function parseFlowRecord(value: unknown, ignored?: Map<string, number>): FlowRecordResult {
  const fast = fastRecord(value, ignored);
  return fast === undefined ? parseFlowRecordThoroughly(value, ignored) : { ok: true, record: fast };
}

/**
 * The full path of parseFlowRecord: zod for structure, then conversion, with every issue
 * named. Exported so tests can check that the fast path agrees with it. `suggest: false`
 * leaves out the did-you-mean search (a batch stops listing details after 100).
 */
export function parseFlowRecordThoroughly(value: unknown, ignored?: Map<string, number>, suggest = true): FlowRecordResult {
  let input = value;
  let skipped: string[] = [];
  if (typeof value === "object" && value !== null && !Array.isArray(value)) {
    for (const key of Object.keys(value)) {
      if (isIgnoredElement(key)) skipped.push(key);
    }
    if (skipped.length > 0) {
      const copy: Record<string, unknown> = { ...(value as Record<string, unknown>) };
      for (const key of skipped) delete copy[key];
      input = copy;
      skipped = skipped.filter((key) => (value as Record<string, unknown>)[key] !== null && (value as Record<string, unknown>)[key] !== undefined);
    }
  }
  const parsed = flowRecordWireSchema.safeParse(input);
  if (!parsed.success) return { ok: false, issues: zodIssues(parsed.error, suggest) };
  const wire = parsed.data;
  const issues: FlowRecordIssue[] = [];
  const record = toRecord(wire, issues, skipped);
  if (record === undefined) return { ok: false, issues };
  if (ignored !== undefined) for (const name of skipped) ignored.set(name, (ignored.get(name) ?? 0) + 1);
  return { ok: true, record };
}

/**
 * Validates a batch of flow records. A batch is atomic (the API rejects it whole when any
 * record is invalid), so this returns either every record or the issues: `invalidCount`
 * counts every invalid record, `details` holds at most `maxBatchErrorDetails` issues, each
 * with the record's index and the field name as sent. `ignoredFields` counts, per IANA
 * element name, the records that carried it and Weir ignored (at most one entry per
 * element of the registry, so it stays small).
 *
 * @example parseFlowBatch([{ src: "192.0.2.1", dst: "192.0.2.2", proto: 17, bytes: 80, packets: 1, vlanId: 10 }])
 *   // { ok: true, records: [ … one FlowRecord … ], ignoredFields: { vlanId: 1 } }
 * @example parseFlowBatch([{ src: "192.0.2.1", dst: "192.0.2.2", proto: 17, bytes: 80, packets: 1, sprot: 53 }])
 *   // { ok: false, invalidCount: 1, details: [{ index: 0, path: "sprot", message: "is neither a Weir field nor … ; did you mean sport?" }] }
 */
export function parseFlowBatch(values: unknown[]): FlowBatchResult {
  const records: FlowRecord[] = [];
  const details: { index: number; path: string; message: string }[] = [];
  const ignored = new Map<string, number>();
  let invalidCount = 0;
  for (let index = 0; index < values.length; index++) {
    const value = values[index];
    const result = fastRecord(value, ignored);
    const parsed: FlowRecordResult =
      result !== undefined ? { ok: true, record: result } : parseFlowRecordThoroughly(value, ignored, details.length < maxBatchErrorDetails);
    if (parsed.ok) {
      if (invalidCount === 0) records.push(parsed.record);
      continue;
    }
    invalidCount++;
    for (const issue of parsed.issues) {
      if (details.length >= maxBatchErrorDetails) break;
      details.push({ index, path: issue.path, message: issue.message });
    }
  }
  return invalidCount === 0 ? { ok: true, records, ignoredFields: Object.fromEntries(ignored) } : { ok: false, invalidCount, details };
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
