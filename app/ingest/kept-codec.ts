import type { FlowRecord } from "~/flow/record";
import { emptyColumns, presenceBit, type KeptColumns } from "~/query/columns";
import { NUMBER_COLUMNS, type NumberColumn } from "~/query/fields";
import { writeFlowKey } from "~/sampling/coordinated";

/**
 * A kept record as one fixed-size binary row (little-endian), the form
 * `kept_records.data` stores. One blob per batch and reservoir is far cheaper
 * to hand to SQLite than seventeen bound values per record, and it keeps the
 * unsigned 64-bit counters exact.
 *
 * Layout (bytes): 0 priority f64 · 8 weight f64 · 16 src[16] · 32 dst[16] ·
 * 48 bytes u64 · 56 packets u64 · 64 start f64 (NaN = none) · 72 end f64 ·
 * 80 sport u16 · 82 dport u16 · 84 proto u8 · 85 presence bits u8 (interfaces,
 * AS numbers) · 88 ingress u32 · 92 egress u32 · 96 src AS u32 · 100 dst AS u32.
 */
export const KEPT_ROW_BYTES = 104;

export interface KeptRowValue {
  priority: number;
  weight: number;
  record: FlowRecord;
}

/**
 * Validated records not yet sampled, as rows with priority and weight zero: the form a
 * body travels in from a parse worker, one transferable buffer instead of thousands of
 * objects to structured-clone.
 */
export interface PackedFlows {
  rows: Uint8Array<ArrayBuffer>;
  count: number;
}

// Where ingest reads a row's counters and start time without decoding the whole row.
export const ROW_BYTES_AT = 48;
export const ROW_PACKETS_AT = 56;
export const ROW_START_AT = 64;

const INGRESS = 1;
const EGRESS = 2;
const SRC_AS = 4;
const DST_AS = 8;

/** Where a row keeps each optional unsigned32 field, and its bit in the presence byte (offset 85). */
const OPTIONAL_AT: Record<NumberColumn, { at: number; bit: number }> = {
  ingressInterface: { at: 88, bit: INGRESS },
  egressInterface: { at: 92, bit: EGRESS },
  srcAs: { at: 96, bit: SRC_AS },
  dstAs: { at: 100, bit: DST_AS },
};

function writeRow(out: Uint8Array, view: DataView, o: number, priority: number, weight: number, r: FlowRecord): void {
  view.setFloat64(o, priority, true);
  view.setFloat64(o + 8, weight, true);
  out.set(r.src, o + 16);
  out.set(r.dst, o + 32);
  view.setBigUint64(o + ROW_BYTES_AT, r.bytes, true);
  view.setBigUint64(o + ROW_PACKETS_AT, r.packets, true);
  view.setFloat64(o + ROW_START_AT, r.start ?? Number.NaN, true);
  view.setFloat64(o + 72, r.end ?? Number.NaN, true);
  view.setUint16(o + 80, r.sport, true);
  view.setUint16(o + 82, r.dport, true);
  out[o + 84] = r.proto;
  out[o + 85] =
    (r.ingressInterface !== null ? INGRESS : 0) | (r.egressInterface !== null ? EGRESS : 0) | (r.srcAs !== null ? SRC_AS : 0) | (r.dstAs !== null ? DST_AS : 0);
  view.setUint32(o + 88, r.ingressInterface ?? 0, true);
  view.setUint32(o + 92, r.egressInterface ?? 0, true);
  view.setUint32(o + 96, r.srcAs ?? 0, true);
  view.setUint32(o + 100, r.dstAs ?? 0, true);
}

/** Writes rows back to back. @example encodeKeptRows([row]).byteLength // 104 */
export function encodeKeptRows(rows: readonly KeptRowValue[]): Uint8Array {
  const out = new Uint8Array(rows.length * KEPT_ROW_BYTES);
  const view = new DataView(out.buffer);
  rows.forEach(({ priority, weight, record }, i) => writeRow(out, view, i * KEPT_ROW_BYTES, priority, weight, record));
  return out;
}

/**
 * Packs validated records for ingest (priority and weight zero until sampled).
 * @example packFlowRecords([record]) // { rows: <104 bytes>, count: 1 }
 */
export function packFlowRecords(records: readonly FlowRecord[]): PackedFlows {
  const rows = new Uint8Array(records.length * KEPT_ROW_BYTES);
  const view = new DataView(rows.buffer);
  for (let i = 0; i < records.length; i++) writeRow(rows, view, i * KEPT_ROW_BYTES, 0, 0, records[i]);
  return { rows, count: records.length };
}

// A module-level function rather than a closure per call: ingest decodes every record that
// enters a reservoir on the main thread, and a closure per call made a decode three times slower.
function timeAt(view: DataView, at: number): number | null {
  const t = view.getFloat64(at, true);
  return Number.isNaN(t) ? null : t;
}

/** Reads the row at `offset` (a multiple of KEPT_ROW_BYTES) of `data`. */
export function decodeKeptRow(data: Uint8Array, offset = 0): KeptRowValue {
  const record = decodeRowRecord(data, offset);
  const view = new DataView(data.buffer, data.byteOffset + offset, KEPT_ROW_BYTES);
  return { priority: view.getFloat64(0, true), weight: view.getFloat64(8, true), record };
}

/**
 * The record of the row at `offset`: what ingest needs of a packed row that enters a
 * reservoir (its priority and weight are still zero there). Kept apart from decodeKeptRow
 * so that ingest builds no wrapper whose zero (small-integer) priorities would make V8
 * deoptimize the decoding of stored rows, whose priorities are doubles.
 */
export function decodeRowRecord(data: Uint8Array, offset = 0): FlowRecord {
  if (data.byteLength < offset + KEPT_ROW_BYTES) throw new RangeError(`a kept row needs ${KEPT_ROW_BYTES} bytes, found ${data.byteLength - offset}`);
  const view = new DataView(data.buffer, data.byteOffset + offset, KEPT_ROW_BYTES);
  const flags = view.getUint8(85);
  return {
    src: data.slice(offset + 16, offset + 32),
    dst: data.slice(offset + 32, offset + 48),
    bytes: view.getBigUint64(ROW_BYTES_AT, true),
    packets: view.getBigUint64(ROW_PACKETS_AT, true),
    start: timeAt(view, ROW_START_AT),
    end: timeAt(view, 72),
    sport: view.getUint16(80, true),
    dport: view.getUint16(82, true),
    proto: view.getUint8(84),
    ingressInterface: flags & INGRESS ? view.getUint32(88, true) : null,
    egressInterface: flags & EGRESS ? view.getUint32(92, true) : null,
    srcAs: flags & SRC_AS ? view.getUint32(96, true) : null,
    dstAs: flags & DST_AS ? view.getUint32(100, true) : null,
  };
}

/**
 * Lays rows stored back to back (as group_concat of `kept_records.data` returns
 * them) out in query columns, without building a record object per row. Reads the
 * rows through typed-array views (the layout is little-endian, as is every platform
 * Node.js ships on but s390x, which takes the DataView loop below): a cold query of a
 * day decodes some 300 000 rows, and the views measured about half the time of
 * DataView calls and BigInt counters.
 */
export function keptRowsToColumns(data: Uint8Array): KeptColumns {
  if (data.byteLength % KEPT_ROW_BYTES !== 0) throw new RangeError(`kept rows: ${data.byteLength} bytes is not a multiple of ${KEPT_ROW_BYTES}`);
  if (!LITTLE_ENDIAN) return keptRowsToColumnsPortable(data);
  const n = data.byteLength / KEPT_ROW_BYTES;
  // Float64Array views need an 8-byte aligned start; a driver's blob starts its own buffer, a slice may not.
  const rows = data.byteOffset % 8 === 0 ? data : data.slice();
  const f64 = new Float64Array(rows.buffer, rows.byteOffset, n * (KEPT_ROW_BYTES / 8));
  const u32 = new Uint32Array(rows.buffer, rows.byteOffset, n * (KEPT_ROW_BYTES / 4));
  const u16 = new Uint16Array(rows.buffer, rows.byteOffset, n * (KEPT_ROW_BYTES / 2));
  const c = emptyColumns(n);
  const src = new Uint32Array(c.src.buffer, c.src.byteOffset, 4 * n);
  const dst = new Uint32Array(c.dst.buffer, c.dst.byteOffset, 4 * n);
  const optional = NUMBER_COLUMNS.map((name) => ({ word: OPTIONAL_AT[name].at / 4, rowBit: OPTIONAL_AT[name].bit, bit: presenceBit(name), column: c.numbers[name] }));
  for (let i = 0; i < n; i++) {
    const f = i * (KEPT_ROW_BYTES / 8);
    const w = i * (KEPT_ROW_BYTES / 4);
    const h = i * (KEPT_ROW_BYTES / 2);
    c.weight[i] = f64[f + 1];
    for (let j = 0; j < 4; j++) {
      src[4 * i + j] = u32[w + 4 + j];
      dst[4 * i + j] = u32[w + 8 + j];
    }
    // Low word plus high word × 2^32: one rounding, as Number(BigInt) rounds (to nearest).
    c.bytes[i] = u32[w + 12] + u32[w + 13] * 4294967296;
    c.packets[i] = u32[w + 14] + u32[w + 15] * 4294967296;
    c.start[i] = f64[f + 8];
    c.sport[i] = u16[h + 40];
    c.dport[i] = u16[h + 41];
    c.proto[i] = rows[i * KEPT_ROW_BYTES + 84];
    const flags = rows[i * KEPT_ROW_BYTES + 85];
    if (flags === 0) continue;
    for (let j = 0; j < optional.length; j++) {
      const o = optional[j];
      if ((flags & o.rowBit) === 0) continue;
      o.column[i] = u32[w + o.word];
      c.present[i] |= o.bit;
    }
  }
  return c;
}

const LITTLE_ENDIAN = new Uint8Array(new Uint16Array([1]).buffer)[0] === 1;

/** keptRowsToColumns through a DataView, on any byte order. */
export function keptRowsToColumnsPortable(data: Uint8Array): KeptColumns {
  if (data.byteLength % KEPT_ROW_BYTES !== 0) throw new RangeError(`kept rows: ${data.byteLength} bytes is not a multiple of ${KEPT_ROW_BYTES}`);
  const n = data.byteLength / KEPT_ROW_BYTES;
  const view = new DataView(data.buffer, data.byteOffset, data.byteLength);
  const c = emptyColumns(n);
  const optional = NUMBER_COLUMNS.map((name) => ({ at: OPTIONAL_AT[name].at, rowBit: OPTIONAL_AT[name].bit, bit: presenceBit(name), column: c.numbers[name] }));
  for (let i = 0; i < n; i++) {
    const o = i * KEPT_ROW_BYTES;
    c.weight[i] = view.getFloat64(o + 8, true);
    c.src.set(data.subarray(o + 16, o + 32), 16 * i);
    c.dst.set(data.subarray(o + 32, o + 48), 16 * i);
    c.bytes[i] = Number(view.getBigUint64(o + 48, true));
    c.packets[i] = Number(view.getBigUint64(o + 56, true));
    c.start[i] = view.getFloat64(o + 64, true);
    c.sport[i] = view.getUint16(o + 80, true);
    c.dport[i] = view.getUint16(o + 82, true);
    c.proto[i] = data[o + 84];
    const flags = data[o + 85];
    if (flags === 0) continue;
    for (const { at, rowBit, bit, column } of optional) {
      if ((flags & rowBit) === 0) continue;
      column[i] = view.getUint32(o + at, true);
      c.present[i] |= bit;
    }
  }
  return c;
}

/**
 * Writes the flow key of the row at `offset` into `out` (45 bytes), exactly as
 * `flowKeyBytes(decodeRowRecord(data, offset))` would, without building the record.
 */
export function flowKeyOfRow(data: Uint8Array, offset: number, out: Uint8Array): void {
  const view = new DataView(data.buffer, data.byteOffset + offset, KEPT_ROW_BYTES);
  const start = view.getFloat64(ROW_START_AT, true);
  writeFlowKey(
    out,
    data.subarray(offset + 16, offset + 32),
    data.subarray(offset + 32, offset + 48),
    view.getUint16(80, true),
    view.getUint16(82, true),
    data[offset + 84],
    Number.isNaN(start) ? null : start,
  );
}
