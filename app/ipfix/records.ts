/**
 * Decoding Data Records with a compiled plan (fields.ts) straight into rows (row-writer.ts).
 * This is the hot path: one pass over each record's mapped fields into local variables, then
 * one or two rows written in place; nothing is allocated per record.
 *
 * Encodings: RFC 7011 §6.1 (types), §6.2 (reduced-size unsigned integers), §7 (variable
 * length, 1- and 3-octet length forms), §3.3.1 (set padding); RFC 5103 (biflows); RFC 3954
 * §8 (NetFlow v9 field types, the same numbers as IPFIX for what Weir reads).
 *
 * Pure module: no I/O.
 */
import {
  OP_BYTES, OP_DPORT, OP_DST4, OP_DST6, OP_DST_AS, OP_EGRESS, OP_END, OP_INGRESS, OP_INIT_TIME, OP_PACKET_INTERVAL,
  OP_PACKET_SPACE, OP_PACKETS, OP_PROTO, OP_R_BYTES, OP_R_EGRESS, OP_R_END, OP_R_INGRESS, OP_R_PACKETS, OP_R_START,
  OP_SAMPLING_INTERVAL, OP_SAMPLING_POPULATION, OP_SAMPLING_SIZE, OP_SPORT, OP_SRC4, OP_SRC6, OP_SRC_AS, OP_START,
  type Plan, TIME_DELTA_MICROSECONDS, TIME_MILLISECONDS, TIME_NTP, TIME_SECONDS, TIME_SYS_UP_TIME,
} from "./fields.ts";
import {
  HAS_DST_AS, HAS_EGRESS, HAS_INGRESS, HAS_SRC_AS, ROW_BYTES_AT, ROW_DPORT_AT, ROW_DST_AS_AT, ROW_DST_AT, ROW_EGRESS_AT,
  ROW_END_AT, ROW_FLAGS_AT, ROW_INGRESS_AT, ROW_PACKETS_AT, ROW_PROTO_AT, ROW_SPORT_AT, ROW_SRC_AS_AT, ROW_SRC_AT,
  ROW_START_AT, type RowWriter,
} from "./row-writer.ts";

const ROW = 104;
const TWO32 = 4294967296;
/** Seconds from the NTP epoch (1900-01-01) to the Unix epoch (RFC 5905 §6; RFC 7011 §6.1.9). */
export const NTP_UNIX_OFFSET_SECONDS = 2_208_988_800;

/** What one message's records need to know and what they found; reused, never per record. */
export class RecordContext {
  /** IPFIX Export Time or NetFlow v9 UNIX Secs of the message. */
  exportSeconds = 0;
  /** NetFlow v9: times in SysUpTime form are relative to the header's sysUpTime. */
  v9 = false;
  /** NetFlow v9 header sysUpTime (ms). */
  sysUptime = 0;
  /** IPFIX systemInitTimeMilliseconds known for the domain (NaN when none). */
  initTimeMs = Number.NaN;
  /** Sampling scale numerator / denominator (1/1 when unsampled). */
  scaleNum = 1;
  scaleDen = 1;

  /** Data records seen (options records included): the unit of IPFIX sequence numbers. */
  records = 0;
  rows = 0;
  unusable = 0;
  error: string | null = null;
  /** From options records: the announced sampling scale (NaN when none) and init time. */
  sampledNum = Number.NaN;
  sampledDen = Number.NaN;
  initTimeSeen = Number.NaN;

  reset(): void {
    this.records = 0;
    this.rows = 0;
    this.unusable = 0;
    this.error = null;
    this.sampledNum = Number.NaN;
    this.sampledDen = Number.NaN;
    this.initTimeSeen = Number.NaN;
  }
}

/** Big-endian unsigned integer of any 1–6 octets (reduced-size encoding, RFC 7011 §6.2). */
function readUintSlow(msg: Uint8Array, at: number, len: number): number {
  let v = 0;
  for (let i = 0; i < len; i++) v = v * 256 + msg[at + i];
  return v;
}

/** Big-endian unsigned integer; small enough for V8 to inline at every use. */
function readUint(mv: DataView, msg: Uint8Array, at: number, len: number): number {
  return len === 4 ? mv.getUint32(at) : len === 2 ? mv.getUint16(at) : len === 1 ? msg[at] : readUintSlow(msg, at, len);
}

/** An absolute time field in epoch milliseconds (floor), by its encoding. */
function absoluteTime(kind: number, mv: DataView, msg: Uint8Array, at: number, len: number, exportMs: number): number {
  switch (kind) {
    case TIME_MILLISECONDS: return mv.getUint32(at) * TWO32 + mv.getUint32(at + 4);
    case TIME_SECONDS: return mv.getUint32(at) * 1000;
    case TIME_NTP: // seconds since 1900 and a binary fraction of a second (RFC 7011 §6.1.9–6.1.10)
      return (mv.getUint32(at) - NTP_UNIX_OFFSET_SECONDS) * 1000 + Math.floor((mv.getUint32(at + 4) * 1000) / TWO32);
    case TIME_DELTA_MICROSECONDS: // microseconds before the message's Export Time (IANA flowStartDeltaMicroseconds)
      return Math.floor(exportMs - readUint(mv, msg, at, len) / 1000);
    default: return Number.NaN;
  }
}

/**
 * Where the current record ends, for templates with variable-length fields; fills
 * plan.fieldOffsets. Returns -1 when a length runs past `end` (RFC 7011 §7).
 */
function walkVariable(plan: Plan, msg: Uint8Array, p: number, end: number): number {
  const lengths = plan.fieldLengths;
  const offsets = plan.fieldOffsets;
  let at = p;
  for (let i = 0; i < lengths.length; i++) {
    let len = lengths[i];
    if (len < 0) {
      if (at >= end) return -1;
      len = msg[at++];
      if (len === 255) {
        if (at + 2 > end) return -1;
        len = (msg[at] << 8) | msg[at + 1];
        at += 2;
      }
    }
    offsets[i] = at;
    at += len;
    if (at > end) return -1;
  }
  return at;
}

function isZero4(msg: Uint8Array, at: number): boolean {
  return (msg[at] | msg[at + 1] | msg[at + 2] | msg[at + 3]) === 0;
}

function writeAddress(rows: Uint8Array, view: DataView, o: number, msg: Uint8Array, at: number, v6: boolean): void {
  if (v6) {
    for (let i = 0; i < 16; i++) rows[o + i] = msg[at + i];
  } else {
    // IPv4-mapped IPv6 (RFC 4291 §2.5.5.2), as app/net/address.ts stores IPv4.
    view.setUint32(o, 0);
    view.setUint32(o + 4, 0);
    view.setUint16(o + 8, 0);
    rows[o + 10] = 0xff;
    rows[o + 11] = 0xff;
    rows[o + 12] = msg[at];
    rows[o + 13] = msg[at + 1];
    rows[o + 14] = msg[at + 2];
    rows[o + 15] = msg[at + 3];
  }
}

/** Zeroes what a row's fields do not overwrite: priority and weight (zero until sampled) and the 2 spare octets. */
function zeroRow(view: DataView, o: number): void {
  view.setFloat64(o, 0, true);
  view.setFloat64(o + 8, 0, true);
  view.setUint16(o + ROW_FLAGS_AT + 1, 0);
}

/** Writes an unsigned64 counter, multiplied by num/den and rounded when the exporter samples. */
function writeCounter(view: DataView, o: number, hi: number, lo: number, num: number, den: number): boolean {
  if (num === den) {
    view.setUint32(o, lo, true);
    view.setUint32(o + 4, hi, true);
    return true;
  }
  const value = hi * TWO32 + lo;
  const scaled = (value * num) / den;
  if (scaled < Number.MAX_SAFE_INTEGER && value < Number.MAX_SAFE_INTEGER) {
    const rounded = Math.round(scaled);
    view.setUint32(o, rounded % TWO32, true);
    view.setUint32(o + 4, Math.floor(rounded / TWO32), true);
    return rounded > 0;
  }
  // Beyond 2^53 double arithmetic is inexact: the same rounding in integers, capped at 2^64−1.
  const big = (BigInt(hi) * 4294967296n + BigInt(lo)) * BigInt(num);
  let rounded = (big + BigInt(den) / 2n) / BigInt(den);
  if (rounded > 0xffffffffffffffffn) rounded = 0xffffffffffffffffn;
  view.setBigUint64(o, rounded, true);
  return rounded > 0n;
}

/**
 * Decodes the Data Records of one Data Set (`msg[start..end)`, after the set header) with a
 * flow template's plan, appending a row per usable record (two for a biflow with a reverse
 * direction) to `out`. Counts go to `ctx`. Returns false, with `ctx.error` set, when a
 * variable-length field runs past the set (the caller then drops the whole message).
 */
export function decodeFlowRecords(plan: Plan, msg: Uint8Array, start: number, end: number, ctx: RecordContext, out: RowWriter): boolean {
  const minLength = plan.minLength;
  const fixed = plan.fixedLength;
  const ops = plan.ops;
  const kinds = plan.timeKinds;
  const nOps = kinds.length;
  const offsets = plan.fieldOffsets;
  const reverse = plan.reverse;
  const exportMs = ctx.exportSeconds * 1000;
  const v9 = ctx.v9;
  const sysUptime = ctx.sysUptime;
  const num = ctx.scaleNum;
  const den = ctx.scaleDen;
  const mv = new DataView(msg.buffer, msg.byteOffset, msg.byteLength);
  const maxRecords = Math.floor((end - start) / minLength);
  out.reserve(reverse ? 2 * maxRecords : maxRecords);
  const rows = out.bytes;
  const view = out.view;
  let o = out.count * ROW;
  let written = 0;
  let unusable = 0;
  let records = 0;
  let p = start;
  // Padding (RFC 7011 §3.3.1) is shorter than the shortest record, so it ends the loop.
  while (end - p >= minLength) {
    let next: number;
    if (fixed >= 0) {
      next = p + fixed;
    } else {
      next = walkVariable(plan, msg, p, end);
      if (next < 0) {
        ctx.error = `a variable-length field of data record ${records + 1} runs past the end of its set (RFC 7011 §7)`;
        return false;
      }
    }
    records++;
    let src4 = -1, dst4 = -1, src6 = -1, dst6 = -1, sport = 0, dport = 0, proto = -1;
    let bytesHi = 0, bytesLo = 0, packetsHi = 0, packetsLo = 0, hasBytes = false, hasPackets = false;
    let flags = 0, ingress = 0, egress = 0, srcAs = 0, dstAs = 0;
    let startMs = Number.NaN, endMs = Number.NaN, startUp = -1, endUp = -1, init = ctx.initTimeMs;
    let rBytesHi = 0, rBytesLo = 0, rPacketsHi = 0, rPacketsLo = 0, hasRBytes = false, hasRPackets = false;
    let rStartMs = Number.NaN, rEndMs = Number.NaN, rStartUp = -1, rEndUp = -1, rIngress = -1, rEgress = -1;
    for (let k = 0; k < nOps; k++) {
      const q = 4 * k;
      const at = fixed >= 0 ? p + ops[q + 2] : offsets[ops[q + 1]];
      const len = ops[q + 3];
      switch (ops[q]) {
        case OP_SRC4: src4 = at; break;
        case OP_DST4: dst4 = at; break;
        case OP_SRC6: src6 = at; break;
        case OP_DST6: dst6 = at; break;
        case OP_SPORT: sport = readUint(mv, msg, at, len); break;
        case OP_DPORT: dport = readUint(mv, msg, at, len); break;
        case OP_PROTO: proto = msg[at]; break;
        case OP_BYTES:
          hasBytes = true;
          if (len <= 4) bytesLo = readUint(mv, msg, at, len);
          else { bytesHi = readUint(mv, msg, at, len - 4); bytesLo = readUint(mv, msg, at + len - 4, 4); }
          break;
        case OP_PACKETS:
          hasPackets = true;
          if (len <= 4) packetsLo = readUint(mv, msg, at, len);
          else { packetsHi = readUint(mv, msg, at, len - 4); packetsLo = readUint(mv, msg, at + len - 4, 4); }
          break;
        case OP_INGRESS: ingress = readUint(mv, msg, at, len); flags |= HAS_INGRESS; break;
        case OP_EGRESS: egress = readUint(mv, msg, at, len); flags |= HAS_EGRESS; break;
        case OP_SRC_AS: srcAs = readUint(mv, msg, at, len); flags |= HAS_SRC_AS; break;
        case OP_DST_AS: dstAs = readUint(mv, msg, at, len); flags |= HAS_DST_AS; break;
        case OP_START:
          if (kinds[k] === TIME_MILLISECONDS) startMs = mv.getUint32(at) * TWO32 + mv.getUint32(at + 4);
          else if (kinds[k] === TIME_SYS_UP_TIME) startUp = readUint(mv, msg, at, len);
          else startMs = absoluteTime(kinds[k], mv, msg, at, len, exportMs);
          break;
        case OP_END:
          if (kinds[k] === TIME_MILLISECONDS) endMs = mv.getUint32(at) * TWO32 + mv.getUint32(at + 4);
          else if (kinds[k] === TIME_SYS_UP_TIME) endUp = readUint(mv, msg, at, len);
          else endMs = absoluteTime(kinds[k], mv, msg, at, len, exportMs);
          break;
        case OP_INIT_TIME: init = absoluteTime(TIME_MILLISECONDS, mv, msg, at, 8, exportMs); break;
        case OP_R_BYTES:
          hasRBytes = true;
          if (len <= 4) rBytesLo = readUint(mv, msg, at, len);
          else { rBytesHi = readUint(mv, msg, at, len - 4); rBytesLo = readUint(mv, msg, at + len - 4, 4); }
          break;
        case OP_R_PACKETS:
          hasRPackets = true;
          if (len <= 4) rPacketsLo = readUint(mv, msg, at, len);
          else { rPacketsHi = readUint(mv, msg, at, len - 4); rPacketsLo = readUint(mv, msg, at + len - 4, 4); }
          break;
        case OP_R_START:
          if (kinds[k] === TIME_SYS_UP_TIME) rStartUp = readUint(mv, msg, at, len);
          else rStartMs = absoluteTime(kinds[k], mv, msg, at, len, exportMs);
          break;
        case OP_R_END:
          if (kinds[k] === TIME_SYS_UP_TIME) rEndUp = readUint(mv, msg, at, len);
          else rEndMs = absoluteTime(kinds[k], mv, msg, at, len, exportMs);
          break;
        case OP_R_INGRESS: rIngress = readUint(mv, msg, at, len); break;
        case OP_R_EGRESS: rEgress = readUint(mv, msg, at, len); break;
      }
    }
    // SysUpTime forms: NetFlow v9 against the header (boot = UNIX Secs − sysUpTime, RFC 3954
    // §5.1; the signed 32-bit difference survives the uptime counter wrapping), IPFIX against
    // systemInitTimeMilliseconds (IANA flowStartSysUpTime), unknown without it.
    if (startUp >= 0) startMs = v9 ? exportMs - ((sysUptime - startUp) | 0) : init + startUp;
    if (endUp >= 0) endMs = v9 ? exportMs - ((sysUptime - endUp) | 0) : init + endUp;
    p = next;

    // Addresses: a template may carry both families (one left zero); IPv4 when it is set.
    let srcAt = -1, srcV6 = false, dstAt = -1, dstV6 = false;
    if (src4 >= 0 && (src6 < 0 || !isZero4(msg, src4))) srcAt = src4;
    else if (src6 >= 0) { srcAt = src6; srcV6 = true; }
    if (dst4 >= 0 && (dst6 < 0 || !isZero4(msg, dst4))) dstAt = dst4;
    else if (dst6 >= 0) { dstAt = dst6; dstV6 = true; }
    const keyed = srcAt >= 0 && dstAt >= 0 && proto >= 0;

    if (keyed && hasBytes && hasPackets && (bytesHi | bytesLo) !== 0 && (packetsHi | packetsLo) !== 0) {
      zeroRow(view, o);
      writeAddress(rows, view, o + ROW_SRC_AT, msg, srcAt, srcV6);
      writeAddress(rows, view, o + ROW_DST_AT, msg, dstAt, dstV6);
      const b = writeCounter(view, o + ROW_BYTES_AT, bytesHi, bytesLo, num, den);
      const k = writeCounter(view, o + ROW_PACKETS_AT, packetsHi, packetsLo, num, den);
      view.setFloat64(o + ROW_START_AT, startMs, true);
      view.setFloat64(o + ROW_END_AT, endMs, true);
      view.setUint16(o + ROW_SPORT_AT, sport, true);
      view.setUint16(o + ROW_DPORT_AT, dport, true);
      rows[o + ROW_PROTO_AT] = proto;
      rows[o + ROW_FLAGS_AT] = flags;
      view.setUint32(o + ROW_INGRESS_AT, ingress, true);
      view.setUint32(o + ROW_EGRESS_AT, egress, true);
      view.setUint32(o + ROW_SRC_AS_AT, srcAs, true);
      view.setUint32(o + ROW_DST_AS_AT, dstAs, true);
      if (b && k) {
        o += ROW;
        written++;
      } else {
        unusable++; // scaled to zero: cannot happen with a scale ≥ 1, kept for safety
      }
    } else {
      unusable++;
    }

    // RFC 5103: the reverse direction is a flow of its own, addresses and ports swapped; one
    // without packets did not happen and is left out.
    if (reverse && hasRPackets && (rPacketsHi | rPacketsLo) !== 0) {
      if (keyed && hasRBytes && (rBytesHi | rBytesLo) !== 0) {
        if (rStartUp >= 0) rStartMs = v9 ? exportMs - ((sysUptime - rStartUp) | 0) : init + rStartUp;
        if (rEndUp >= 0) rEndMs = v9 ? exportMs - ((sysUptime - rEndUp) | 0) : init + rEndUp;
        // Reverse packets enter where the forward ones left (common practice) unless the
        // template says otherwise with reverseIngressInterface / reverseEgressInterface.
        let rFlags = flags & (HAS_SRC_AS | HAS_DST_AS) ? ((flags & HAS_SRC_AS ? HAS_DST_AS : 0) | (flags & HAS_DST_AS ? HAS_SRC_AS : 0)) : 0;
        let inIf = 0, outIf = 0;
        if (rIngress >= 0) { inIf = rIngress; rFlags |= HAS_INGRESS; } else if (flags & HAS_EGRESS) { inIf = egress; rFlags |= HAS_INGRESS; }
        if (rEgress >= 0) { outIf = rEgress; rFlags |= HAS_EGRESS; } else if (flags & HAS_INGRESS) { outIf = ingress; rFlags |= HAS_EGRESS; }
        zeroRow(view, o);
        writeAddress(rows, view, o + ROW_SRC_AT, msg, dstAt, dstV6);
        writeAddress(rows, view, o + ROW_DST_AT, msg, srcAt, srcV6);
        const b = writeCounter(view, o + ROW_BYTES_AT, rBytesHi, rBytesLo, num, den);
        const k = writeCounter(view, o + ROW_PACKETS_AT, rPacketsHi, rPacketsLo, num, den);
        view.setFloat64(o + ROW_START_AT, Number.isNaN(rStartMs) ? startMs : rStartMs, true);
        view.setFloat64(o + ROW_END_AT, Number.isNaN(rEndMs) ? endMs : rEndMs, true);
        view.setUint16(o + ROW_SPORT_AT, dport, true);
        view.setUint16(o + ROW_DPORT_AT, sport, true);
        rows[o + ROW_PROTO_AT] = proto;
        rows[o + ROW_FLAGS_AT] = rFlags;
        view.setUint32(o + ROW_INGRESS_AT, inIf, true);
        view.setUint32(o + ROW_EGRESS_AT, outIf, true);
        view.setUint32(o + ROW_SRC_AS_AT, dstAs, true);
        view.setUint32(o + ROW_DST_AS_AT, srcAs, true);
        if (b && k) {
          o += ROW;
          written++;
        } else {
          unusable++;
        }
      } else {
        unusable++;
      }
    }
  }
  out.count += written;
  ctx.rows += written;
  ctx.unusable += unusable;
  ctx.records += records;
  return true;
}

/**
 * Reads the Data Records of an options Data Set: packet-sampling announcements
 * (samplingInterval 34 / samplerRandomInterval 50, and NetFlow v9's SAMPLING_INTERVAL /
 * FLOW_SAMPLER_RANDOM_INTERVAL with the same numbers; samplingPacketInterval 305 with
 * samplingPacketSpace 306; samplingSize 309 with samplingPopulation 310, defined by RFC 5477) and
 * systemInitTimeMilliseconds 160. The last announcement wins. Returns false on a
 * variable-length field past the set end.
 */
export function decodeOptionsRecords(plan: Plan, msg: Uint8Array, start: number, end: number, ctx: RecordContext): boolean {
  const ops = plan.ops;
  const nOps = plan.timeKinds.length;
  const mv = new DataView(msg.buffer, msg.byteOffset, msg.byteLength);
  let p = start;
  while (end - p >= plan.minLength) {
    let next: number;
    if (plan.fixedLength >= 0) next = p + plan.fixedLength;
    else {
      next = walkVariable(plan, msg, p, end);
      if (next < 0) {
        ctx.error = `a variable-length field of options record ${ctx.records + 1} runs past the end of its set (RFC 7011 §7)`;
        return false;
      }
    }
    ctx.records++;
    let interval = 0, packetInterval = 0, packetSpace = 0, size = 0, population = 0;
    for (let k = 0; k < nOps; k++) {
      const q = 4 * k;
      const at = plan.fixedLength >= 0 ? p + ops[q + 2] : plan.fieldOffsets[ops[q + 1]];
      const len = ops[q + 3];
      switch (ops[q]) {
        case OP_SAMPLING_INTERVAL: interval = readUint(mv, msg, at, len); break;
        case OP_PACKET_INTERVAL: packetInterval = readUint(mv, msg, at, len); break;
        case OP_PACKET_SPACE: packetSpace = readUint(mv, msg, at, len); break;
        case OP_SAMPLING_SIZE: size = readUint(mv, msg, at, len); break;
        case OP_SAMPLING_POPULATION: population = readUint(mv, msg, at, len); break;
        case OP_INIT_TIME: ctx.initTimeSeen = absoluteTime(TIME_MILLISECONDS, mv, msg, at, 8, 0); break;
      }
    }
    // A scale below 1 (or a zero interval) announces no sampling Weir can undo; ignore it.
    if (packetInterval > 0) {
      ctx.sampledNum = packetInterval + packetSpace; // RFC 5477 samplingPacketInterval / samplingPacketSpace: select `interval` packets, skip `space`
      ctx.sampledDen = packetInterval;
    } else if (size > 0 && population >= size) {
      ctx.sampledNum = population; // RFC 5477 samplingSize / samplingPopulation: `size` packets out of every `population`
      ctx.sampledDen = size;
    } else if (interval >= 1) {
      ctx.sampledNum = interval; // one packet in `interval`
      ctx.sampledDen = 1;
    }
    p = next;
  }
  return true;
}
