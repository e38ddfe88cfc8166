import type { FlowRecord } from "~/flow/record";
import { NUMBER_COLUMNS, type NumberColumn } from "./fields.ts";

/**
 * The kept records of one reservoir in columns: compact, and a scan over typed
 * arrays answers a subset query over hundreds of thousands of kept records in
 * milliseconds. Built from a live reservoir or from SQLite rows.
 */
export interface KeptColumns {
  length: number;
  /** Sampling weight w_i (bytes or packets, per the tenant's weight attribute). */
  weight: Float64Array;
  bytes: Float64Array;
  packets: Float64Array;
  /** 16 bytes per record, IPv4 mapped. */
  src: Uint8Array;
  dst: Uint8Array;
  sport: Uint16Array;
  dport: Uint16Array;
  proto: Uint8Array;
  /** Epoch ms; NaN when the record had none. */
  start: Float64Array;
  /** The optional unsigned32 fields of fields.ts's NUMBER_COLUMNS (AS numbers, interfaces); 0 where absent. */
  numbers: Record<NumberColumn, Uint32Array>;
  /** Bit b of a record's byte: it has a value for NUMBER_COLUMNS[b] (`presenceBit`). */
  present: Uint8Array;
}

/** What a column builder needs of each kept record. */
export interface KeptRow {
  weight: number;
  record: Pick<FlowRecord, "src" | "dst" | "sport" | "dport" | "proto" | "bytes" | "packets" | "start"> & Partial<Pick<FlowRecord, NumberColumn>>;
}

// One presence byte per record holds a bit per optional column.
if (NUMBER_COLUMNS.length > 8) throw new Error("columns.ts: more than 8 optional columns need a wider presence column");

/** The presence bit of an optional column. @example presenceBit("dstAs") // 2 */
export function presenceBit(column: NumberColumn): number {
  return 1 << NUMBER_COLUMNS.indexOf(column);
}

/** Zero-filled columns for n kept records. */
export function emptyColumns(n: number): KeptColumns {
  return {
    length: n,
    weight: new Float64Array(n),
    bytes: new Float64Array(n),
    packets: new Float64Array(n),
    src: new Uint8Array(16 * n),
    dst: new Uint8Array(16 * n),
    sport: new Uint16Array(n),
    dport: new Uint16Array(n),
    proto: new Uint8Array(n),
    start: new Float64Array(n),
    numbers: Object.fromEntries(NUMBER_COLUMNS.map((name) => [name, new Uint32Array(n)])) as Record<NumberColumn, Uint32Array>,
    present: new Uint8Array(n),
  };
}

/** Lays kept records out in columns (order preserved). */
export function toColumns(rows: readonly KeptRow[]): KeptColumns {
  const n = rows.length;
  const c = emptyColumns(n);
  const numbers = NUMBER_COLUMNS.map((name, b) => ({ name, bit: 1 << b, column: c.numbers[name] }));
  rows.forEach(({ weight, record: r }, i) => {
    c.weight[i] = weight;
    c.bytes[i] = Number(r.bytes);
    c.packets[i] = Number(r.packets);
    c.src.set(r.src, 16 * i);
    c.dst.set(r.dst, 16 * i);
    c.sport[i] = r.sport;
    c.dport[i] = r.dport;
    c.proto[i] = r.proto;
    c.start[i] = r.start ?? Number.NaN;
    for (const { name, bit, column } of numbers) {
      const value = r[name];
      if (value === null || value === undefined) continue;
      column[i] = value;
      c.present[i] |= bit;
    }
  });
  return c;
}

/** Copies record `from` of `source` to record `to` of `target`, every column but the weight. */
export function copyRecord(source: KeptColumns, from: number, target: KeptColumns, to: number): void {
  target.bytes[to] = source.bytes[from];
  target.packets[to] = source.packets[from];
  target.src.set(source.src.subarray(16 * from, 16 * from + 16), 16 * to);
  target.dst.set(source.dst.subarray(16 * from, 16 * from + 16), 16 * to);
  target.sport[to] = source.sport[from];
  target.dport[to] = source.dport[from];
  target.proto[to] = source.proto[from];
  target.start[to] = source.start[from];
  for (const name of NUMBER_COLUMNS) target.numbers[name][to] = source.numbers[name][from];
  target.present[to] = source.present[from];
}
