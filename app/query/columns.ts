import type { FlowRecord } from "~/flow/record";

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
}

/** What a column builder needs of each kept record. */
export interface KeptRow {
  weight: number;
  record: Pick<FlowRecord, "src" | "dst" | "sport" | "dport" | "proto" | "bytes" | "packets" | "start">;
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
  };
}

/** Lays kept records out in columns (order preserved). */
export function toColumns(rows: readonly KeptRow[]): KeptColumns {
  const n = rows.length;
  const c = emptyColumns(n);
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
  });
  return c;
}
