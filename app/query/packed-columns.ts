import type { KeptColumns } from "./columns";
import { NUMBER_COLUMNS } from "./fields";

/**
 * A reservoir's kept records as stored in `packed_columns.data`: the query columns of
 * columns.ts back to back, so a reader lays typed arrays over the blob instead of decoding
 * a row per record. An 8-byte header ("WPC", the format byte, then the record count n as a
 * little-endian u32), then each column in SECTIONS order, widest elements first so every
 * section starts aligned to its element size. 86 bytes per record with four optional
 * number columns.
 *
 * The columns are written in the platform's byte order, which is little-endian on every
 * platform Node.js ships on but s390x; `PACKING_SUPPORTED` is false there, and readers
 * then use `kept_records` alone. Changing SECTIONS or NUMBER_COLUMNS changes the layout:
 * bump PACKED_FORMAT, and have the migration that ships it empty `packed_columns`.
 */
export const PACKED_FORMAT = 1;
const HEADER_BYTES = 8;
const MAGIC = [0x57, 0x50, 0x43]; // "WPC"

type Column = Float64Array | Uint32Array | Uint16Array | Uint8Array;

interface Section {
  /** Elements per record (16 for an address). */
  perRecord: number;
  /** The column's element type. */
  type: Float64ArrayConstructor | Uint32ArrayConstructor | Uint16ArrayConstructor | Uint8ArrayConstructor;
  get(c: KeptColumns): Column;
}

const SECTIONS: Section[] = [
  { perRecord: 1, type: Float64Array, get: (c) => c.weight },
  { perRecord: 1, type: Float64Array, get: (c) => c.bytes },
  { perRecord: 1, type: Float64Array, get: (c) => c.packets },
  { perRecord: 1, type: Float64Array, get: (c) => c.start },
  ...NUMBER_COLUMNS.map((name): Section => ({ perRecord: 1, type: Uint32Array, get: (c) => c.numbers[name] })),
  { perRecord: 1, type: Uint16Array, get: (c) => c.sport },
  { perRecord: 1, type: Uint16Array, get: (c) => c.dport },
  { perRecord: 16, type: Uint8Array, get: (c) => c.src },
  { perRecord: 16, type: Uint8Array, get: (c) => c.dst },
  { perRecord: 1, type: Uint8Array, get: (c) => c.proto },
  { perRecord: 1, type: Uint8Array, get: (c) => c.present },
];

/** Bytes per record in the packed form. @example PACKED_BYTES_PER_RECORD // 86 */
export const PACKED_BYTES_PER_RECORD = SECTIONS.reduce((sum, s) => sum + s.perRecord * s.type.BYTES_PER_ELEMENT, 0);

/** False on a big-endian platform: nothing is packed there, nor read packed. */
export const PACKING_SUPPORTED = new Uint8Array(new Uint16Array([1]).buffer)[0] === 1;

/** The packed form of `columns`: 8 + 86 n bytes. */
export function packColumns(columns: KeptColumns): Uint8Array<ArrayBuffer> {
  if (!PACKING_SUPPORTED) throw new Error("packed columns are written little-endian only; this platform is big-endian");
  const n = columns.length;
  const out = new Uint8Array(HEADER_BYTES + n * PACKED_BYTES_PER_RECORD);
  out.set(MAGIC, 0);
  out[3] = PACKED_FORMAT;
  new DataView(out.buffer).setUint32(4, n, true);
  let at = HEADER_BYTES;
  for (const section of SECTIONS) {
    const column = section.get(columns);
    const size = n * section.perRecord * section.type.BYTES_PER_ELEMENT;
    out.set(new Uint8Array(column.buffer, column.byteOffset, size), at);
    at += size;
  }
  return out;
}

/**
 * Columns over a packed blob, without copying it (unless its start is not 8-byte aligned,
 * which a driver's own buffer always is). Throws a RangeError naming what is wrong when
 * the blob is not in this format.
 */
export function unpackColumns(data: Uint8Array): KeptColumns {
  if (!PACKING_SUPPORTED) throw new Error("packed columns are read little-endian only; this platform is big-endian");
  if (data.byteLength < HEADER_BYTES || MAGIC.some((b, i) => data[i] !== b)) throw new RangeError("packed columns: no WPC header");
  if (data[3] !== PACKED_FORMAT) throw new RangeError(`packed columns: format ${data[3]}, this version reads ${PACKED_FORMAT}`);
  const blob = data.byteOffset % 8 === 0 ? data : data.slice();
  const n = new DataView(blob.buffer, blob.byteOffset, HEADER_BYTES).getUint32(4, true);
  const expected = HEADER_BYTES + n * PACKED_BYTES_PER_RECORD;
  if (blob.byteLength !== expected) throw new RangeError(`packed columns: ${n} records need ${expected} bytes, found ${blob.byteLength}`);
  // A driver's blob and a slice both own an ArrayBuffer (never a SharedArrayBuffer).
  const buffer = blob.buffer as ArrayBuffer;
  const views: Column[] = [];
  let at = blob.byteOffset + HEADER_BYTES;
  for (const section of SECTIONS) {
    views.push(new section.type(buffer, at, n * section.perRecord));
    at += n * section.perRecord * section.type.BYTES_PER_ELEMENT;
  }
  const [weight, bytes, packets, start, ...rest] = views;
  const numbers = Object.fromEntries(NUMBER_COLUMNS.map((name, i) => [name, rest[i]])) as KeptColumns["numbers"];
  const [sport, dport, src, dst, proto, present] = rest.slice(NUMBER_COLUMNS.length);
  return {
    length: n,
    weight: weight as Float64Array,
    bytes: bytes as Float64Array,
    packets: packets as Float64Array,
    start: start as Float64Array,
    numbers,
    sport: sport as Uint16Array,
    dport: dport as Uint16Array,
    src: src as Uint8Array,
    dst: dst as Uint8Array,
    proto: proto as Uint8Array,
    present: present as Uint8Array,
  };
}
