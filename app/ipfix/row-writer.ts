/**
 * Where decoded flow records go: rows in the exact binary layout of `app/ingest/kept-codec.ts`
 * (104 bytes a row, little-endian), priority and weight zero until the reservoir samples them,
 * appended to one growable buffer. The IPFIX decoder writes straight into `bytes` / `view`
 * (no object per record); a caller notes `count` before and after a decode to find that
 * message's rows, which are always contiguous.
 *
 * Pure module: no I/O.
 */
import { KEPT_ROW_BYTES, type PackedFlows } from "../ingest/kept-codec.ts";

// Offsets within a row (see kept-codec.ts for the layout).
export const ROW_SRC_AT = 16;
export const ROW_DST_AT = 32;
export const ROW_BYTES_AT = 48;
export const ROW_PACKETS_AT = 56;
export const ROW_START_AT = 64;
export const ROW_END_AT = 72;
export const ROW_SPORT_AT = 80;
export const ROW_DPORT_AT = 82;
export const ROW_PROTO_AT = 84;
export const ROW_FLAGS_AT = 85;
export const ROW_INGRESS_AT = 88;
export const ROW_EGRESS_AT = 92;
export const ROW_SRC_AS_AT = 96;
export const ROW_DST_AS_AT = 100;

// Presence bits at ROW_FLAGS_AT, as kept-codec.ts reads them.
export const HAS_INGRESS = 1;
export const HAS_EGRESS = 2;
export const HAS_SRC_AS = 4;
export const HAS_DST_AS = 8;

export class RowWriter {
  /** The rows so far start at byte 0; only the first `count * 104` bytes are rows. */
  bytes: Uint8Array<ArrayBuffer>;
  view: DataView;
  /** Rows written since the last `take()`. */
  count = 0;

  constructor(initialRows = 256) {
    this.bytes = new Uint8Array(Math.max(1, initialRows) * KEPT_ROW_BYTES);
    this.view = new DataView(this.bytes.buffer);
  }

  /** Makes room for `rows` more rows (the buffer doubles as needed). */
  reserve(rows: number): void {
    const needed = (this.count + rows) * KEPT_ROW_BYTES;
    if (needed <= this.bytes.byteLength) return;
    let size = this.bytes.byteLength * 2;
    while (size < needed) size *= 2;
    const grown = new Uint8Array(size);
    grown.set(this.bytes.subarray(0, this.count * KEPT_ROW_BYTES));
    this.bytes = grown;
    this.view = new DataView(grown.buffer);
  }

  /** Forgets the rows after the first `count` (a message dropped after some rows were written). */
  truncate(count: number): void {
    if (count < 0 || count > this.count) throw new RangeError(`cannot truncate ${this.count} rows to ${count}`);
    this.count = count;
  }

  /**
   * The rows written so far as an owning copy (transferable to another thread), and an empty
   * writer again. @example writer.take() // { rows: <count × 104 bytes>, count }
   */
  take(): PackedFlows {
    const rows = this.bytes.slice(0, this.count * KEPT_ROW_BYTES);
    const count = this.count;
    this.count = 0;
    return { rows, count };
  }
}
