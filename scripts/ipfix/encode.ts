// Builds IPFIX messages (RFC 7011) and NetFlow v9 export packets (RFC 3954) from plain
// descriptions, for the tests, the decode benchmark and the replay tool. It shares nothing with
// the decoder (app/ipfix/), so a test that encodes here and decodes there compares two
// implementations of the same RFCs.
//
//   ipfixMessage({ exportTime: 1714528800, sequence: 0, domain: 1, sets: [
//     { templates: [{ id: 256, fields: [{ id: 8, length: 4 }, { id: 1, length: 4 }] }] },
//     { templateId: 256, fields: [{ id: 8, length: 4 }, { id: 1, length: 4 }], records: [["192.0.2.1", 1500]] },
//   ] })

/** Field Length 65535: a variable-length field (RFC 7011 §7). */
export const VARIABLE = 65535;

/** A field specifier; `enterprise` sets the enterprise bit and adds the 4-octet PEN (RFC 7011 §3.2). */
export interface Field {
  id: number;
  length: number;
  enterprise?: number;
}

/**
 * A field value: a number or bigint (unsigned, big-endian, in the field's length), an address as
 * text (IPv4 in a 4-octet field, IPv6 in a 16-octet one), text for a variable-length field
 * (UTF-8), raw octets, or null for zeros (an empty value in a variable-length field).
 */
export type Value = number | bigint | string | Uint8Array | null;

export interface TemplateDesc {
  id: number;
  fields: Field[];
}

export interface OptionsTemplateDesc {
  id: number;
  scope: Field[];
  fields: Field[];
}

export interface DataSetDesc {
  templateId: number;
  fields: Field[];
  records: Value[][];
  /** Zero octets after the records (RFC 7011 §3.3.1; RFC 3954 §5.3). */
  padding?: number;
  /** Write every variable length in the 3-octet form (RFC 7011 §7, Figure S), even below 255. */
  longLengths?: boolean;
}

export type IpfixSetDesc =
  | { templates: TemplateDesc[]; padding?: number }
  | { optionsTemplates: OptionsTemplateDesc[]; padding?: number }
  /** Template Withdrawals (RFC 7011 §8.1): ids to withdraw in a Template Set (2) or Options Template Set (3). */
  | { withdraw: number[]; setId: 2 | 3; padding?: number }
  | DataSetDesc
  /** Any set, as octets after its 4-octet header. */
  | { setId: number; body: Uint8Array };

export interface IpfixMessageDesc {
  /** Seconds since the Unix epoch. */
  exportTime: number;
  sequence: number;
  domain: number;
  sets: IpfixSetDesc[];
}

export type V9FlowSetDesc =
  | { templates: TemplateDesc[] }
  | { optionsTemplates: OptionsTemplateDesc[]; padding?: number }
  | DataSetDesc;

export interface V9PacketDesc {
  /** Milliseconds since the exporter booted. */
  sysUptime: number;
  /** Seconds since the Unix epoch at export. */
  unixSecs: number;
  sequence: number;
  sourceId: number;
  /** The header's Count; by default every template and data record (RFC 3954 §5.1). */
  count?: number;
  flowSets: V9FlowSetDesc[];
}

class Bytes {
  private buf: Uint8Array<ArrayBuffer> = new Uint8Array(256);
  length = 0;
  private room(n: number): void {
    if (this.length + n <= this.buf.length) return;
    const grown = new Uint8Array(Math.max(this.buf.length * 2, this.length + n));
    grown.set(this.buf.subarray(0, this.length));
    this.buf = grown;
  }
  u8(v: number): this {
    this.room(1);
    this.buf[this.length++] = v & 0xff;
    return this;
  }
  u16(v: number): this {
    return this.u8(v >>> 8).u8(v);
  }
  u32(v: number): this {
    return this.u16(Math.floor(v / 65536) % 65536).u16(v % 65536);
  }
  raw(b: Uint8Array | number[]): this {
    this.room(b.length);
    this.buf.set(b, this.length);
    this.length += b.length;
    return this;
  }
  zeros(n: number): this {
    this.room(n);
    this.length += n; // the buffer is zero beyond length
    return this;
  }
  set16(at: number, v: number): void {
    this.buf[at] = (v >>> 8) & 0xff;
    this.buf[at + 1] = v & 0xff;
  }
  bytes(): Uint8Array<ArrayBuffer> {
    return this.buf.slice(0, this.length);
  }
}

function ipv4(text: string): number[] {
  const parts = text.split(".").map(Number);
  if (parts.length !== 4 || parts.some((p) => !Number.isInteger(p) || p < 0 || p > 255)) throw new Error(`not an IPv4 address: ${text}`);
  return parts;
}

function ipv6(text: string): number[] {
  const [head, tail] = text.includes("::") ? text.split("::") : [text, null];
  const groups = (s: string) => (s === "" ? [] : s.split(":").map((g) => parseInt(g, 16)));
  const left = groups(head);
  const right = tail === null ? [] : groups(tail);
  const all = tail === null ? left : [...left, ...new Array(8 - left.length - right.length).fill(0), ...right];
  if (all.length !== 8 || all.some((g) => !(g >= 0 && g <= 0xffff))) throw new Error(`not an IPv6 address: ${text}`);
  return all.flatMap((g) => [g >> 8, g & 0xff]);
}

function unsigned(value: number | bigint, length: number): number[] {
  if (typeof value === "number" && Number.isSafeInteger(value) && value >= 0 && (length >= 7 || value < 2 ** (8 * length))) {
    const out = new Array<number>(length).fill(0);
    for (let i = length - 1, v = value; i >= 0 && v > 0; i--, v = Math.floor(v / 256)) out[i] = v % 256;
    return out;
  }
  let v = BigInt(value);
  if (v < 0n || v >= 1n << BigInt(8 * length)) throw new Error(`${value} does not fit in ${length} octets`);
  const out = new Array<number>(length);
  for (let i = length - 1; i >= 0; i--) {
    out[i] = Number(v & 0xffn);
    v >>= 8n;
  }
  return out;
}

function fieldValue(field: Field, value: Value, longLengths: boolean): number[] {
  if (field.length === VARIABLE) {
    let content: number[];
    if (value === null) content = [];
    else if (typeof value === "string") content = [...new TextEncoder().encode(value)];
    else if (value instanceof Uint8Array) content = [...value];
    else throw new Error("a variable-length field takes text or octets");
    const prefix = content.length < 255 && !longLengths ? [content.length] : [255, content.length >> 8, content.length & 0xff];
    return [...prefix, ...content];
  }
  if (value === null) return new Array(field.length).fill(0);
  if (typeof value === "string") {
    if (field.length === 4) return ipv4(value);
    if (field.length === 16) return ipv6(value);
    throw new Error(`an address needs a 4- or 16-octet field, not ${field.length}`);
  }
  if (value instanceof Uint8Array) {
    if (value.length !== field.length) throw new Error(`${value.length} octets given for a ${field.length}-octet field`);
    return [...value];
  }
  return unsigned(value, field.length);
}

function fieldSpecifiers(b: Bytes, fields: Field[]): void {
  for (const f of fields) {
    if (f.enterprise !== undefined) b.u16(f.id | 0x8000).u16(f.length).u32(f.enterprise);
    else b.u16(f.id).u16(f.length);
  }
}

function dataBody(b: Bytes, set: DataSetDesc): void {
  for (const record of set.records) {
    if (record.length !== set.fields.length) throw new Error(`a record of template ${set.templateId} has ${record.length} values for ${set.fields.length} fields`);
    record.forEach((value, i) => b.raw(fieldValue(set.fields[i], value, set.longLengths ?? false)));
  }
  b.zeros(set.padding ?? 0);
}

function withHeader(setId: number, fill: (b: Bytes) => void): Uint8Array {
  const b = new Bytes();
  b.u16(setId).u16(0);
  fill(b);
  if (b.length > 65535) throw new Error("a set is at most 65535 octets");
  b.set16(2, b.length);
  return b.bytes();
}

function ipfixSet(set: IpfixSetDesc): Uint8Array {
  if ("templates" in set) {
    return withHeader(2, (b) => {
      for (const t of set.templates) {
        b.u16(t.id).u16(t.fields.length);
        fieldSpecifiers(b, t.fields);
      }
      b.zeros(set.padding ?? 0);
    });
  }
  if ("optionsTemplates" in set) {
    return withHeader(3, (b) => {
      for (const t of set.optionsTemplates) {
        b.u16(t.id).u16(t.scope.length + t.fields.length).u16(t.scope.length);
        fieldSpecifiers(b, [...t.scope, ...t.fields]);
      }
      b.zeros(set.padding ?? 0);
    });
  }
  if ("withdraw" in set) {
    return withHeader(set.setId, (b) => {
      for (const id of set.withdraw) b.u16(id).u16(0);
      b.zeros(set.padding ?? 0);
    });
  }
  if ("body" in set) return withHeader(set.setId, (b) => b.raw(set.body));
  return withHeader(set.templateId, (b) => dataBody(b, set));
}

/** One IPFIX message: the 16-octet header (RFC 7011 §3.1) and its sets. */
export function ipfixMessage(desc: IpfixMessageDesc): Uint8Array<ArrayBuffer> {
  const sets = desc.sets.map(ipfixSet);
  const length = 16 + sets.reduce((n, set) => n + set.length, 0);
  const b = new Bytes();
  b.u16(10).u16(length).u32(desc.exportTime).u32(desc.sequence).u32(desc.domain);
  for (const set of sets) b.raw(set);
  if (b.length > 65535) throw new Error("an IPFIX message is at most 65535 octets");
  return b.bytes();
}

function v9FlowSet(set: V9FlowSetDesc): { octets: Uint8Array; records: number } {
  if ("templates" in set) {
    const octets = withHeader(0, (b) => {
      for (const t of set.templates) {
        b.u16(t.id).u16(t.fields.length);
        fieldSpecifiers(b, t.fields);
      }
    });
    return { octets, records: set.templates.length };
  }
  if ("optionsTemplates" in set) {
    const octets = withHeader(1, (b) => {
      for (const t of set.optionsTemplates) {
        b.u16(t.id).u16(4 * t.scope.length).u16(4 * t.fields.length);
        fieldSpecifiers(b, [...t.scope, ...t.fields]);
      }
      b.zeros(set.padding ?? 0);
    });
    return { octets, records: set.optionsTemplates.length };
  }
  return { octets: withHeader(set.templateId, (b) => dataBody(b, set)), records: set.records.length };
}

/** One NetFlow v9 export packet: the 20-octet header (RFC 3954 §5.1) and its FlowSets. */
export function netflow9Packet(desc: V9PacketDesc): Uint8Array<ArrayBuffer> {
  const sets = desc.flowSets.map(v9FlowSet);
  const b = new Bytes();
  const count = desc.count ?? sets.reduce((sum, s) => sum + s.records, 0);
  b.u16(9).u16(count).u32(desc.sysUptime).u32(desc.unixSecs).u32(desc.sequence).u32(desc.sourceId);
  for (const s of sets) b.raw(s.octets);
  return b.bytes();
}

// ---- time values -------------------------------------------------------------------------

/** Seconds from 1900-01-01 (NTP epoch) to 1970-01-01 (RFC 5905 §6). */
const NTP_OFFSET = 2_208_988_800n;

/**
 * A dateTimeMicroseconds / dateTimeNanoseconds value (RFC 7011 §6.1.9–10: NTP seconds since
 * 1900 and a 2^-32 fraction) for an instant in epoch nanoseconds.
 */
export function ntpTimestamp(epochNanoseconds: bigint): bigint {
  const seconds = epochNanoseconds / 1_000_000_000n;
  const nanos = epochNanoseconds % 1_000_000_000n;
  const fraction = (nanos << 32n) / 1_000_000_000n;
  return ((seconds + NTP_OFFSET) << 32n) | fraction;
}
