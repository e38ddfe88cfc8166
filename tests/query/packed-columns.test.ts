// The packed form of kept columns (app/query/packed-columns.ts): what a closed reservoir's
// kept records look like in `packed_columns.data`. The expected columns come from the records
// themselves through toColumns (the builder the live reservoirs use), not from the packer.
import { describe, expect, it } from "vitest";
import type { FlowRecord } from "~/flow/record";
import { encodeKeptRows, keptRowsToColumns } from "~/ingest/kept-codec";
import { parseAddress } from "~/net/address";
import { toColumns, type KeptColumns } from "~/query/columns";
import { NUMBER_COLUMNS } from "~/query/fields";
import { packColumns, PACKED_BYTES_PER_RECORD, PACKED_FORMAT, unpackColumns } from "~/query/packed-columns";

/** A seeded linear congruential generator (Numerical Recipes' constants), so failures repeat. */
function lcg(seed: number): () => number {
  let s = seed >>> 0;
  return () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0;
    return s / 2 ** 32;
  };
}

// Documentation space only: RFC 5737 (IPv4) and RFC 3849 (IPv6); AS numbers of RFC 5398.
const ADDRESSES = ["192.0.2.1", "198.51.100.200", "203.0.113.77", "2001:db8::1", "2001:db8:ffff::42"].map(parseAddress);

function randomRecords(n: number, seed: number): { weight: number; record: FlowRecord }[] {
  const u = lcg(seed);
  const pick = <T>(xs: readonly T[]) => xs[Math.floor(u() * xs.length)];
  return Array.from({ length: n }, () => {
    const bytes = BigInt(Math.floor(u() * 2 ** 40)) * 4096n + BigInt(Math.floor(u() * 4096));
    const record: FlowRecord = {
      src: pick(ADDRESSES),
      dst: pick(ADDRESSES),
      sport: Math.floor(u() * 65536),
      dport: pick([53, 443, 65535]),
      proto: pick([6, 17, 58]),
      bytes,
      packets: BigInt(1 + Math.floor(u() * 1e6)),
      start: u() < 0.2 ? null : 1_700_000_000_000 + Math.floor(u() * 86_400_000),
      end: null,
      ingressInterface: u() < 0.5 ? null : Math.floor(u() * 2 ** 32),
      egressInterface: u() < 0.5 ? null : 0,
      srcAs: u() < 0.5 ? null : pick([64496, 64511, 65536, 65551]),
      dstAs: u() < 0.5 ? null : 4294967295,
    };
    return { weight: Number(bytes) / (0.5 + u()), record };
  });
}

function plain(c: KeptColumns) {
  return {
    length: c.length,
    weight: [...c.weight],
    bytes: [...c.bytes],
    packets: [...c.packets],
    src: [...c.src],
    dst: [...c.dst],
    sport: [...c.sport],
    dport: [...c.dport],
    proto: [...c.proto],
    start: [...c.start],
    numbers: Object.fromEntries(NUMBER_COLUMNS.map((name) => [name, [...c.numbers[name]]])),
    present: [...c.present],
  };
}

describe("packed kept columns", () => {
  it("give back every column of the records they were packed from, IPv4 and IPv6, optional fields and missing times included", () => {
    for (const n of [0, 1, 7, 1024]) {
      const rows = randomRecords(n, n + 1);
      const expected = toColumns(rows);
      const packed = packColumns(expected);
      // 8-byte header plus the columns' element sizes (computed in the test from columns.ts:
      // 4 × f64, 4 × u32 optional numbers, 2 × u16 ports, 2 × 16-byte addresses, proto and presence bytes).
      expect(PACKED_BYTES_PER_RECORD).toBe(4 * 8 + NUMBER_COLUMNS.length * 4 + 2 * 2 + 2 * 16 + 2);
      expect(packed.byteLength).toBe(8 + n * PACKED_BYTES_PER_RECORD);
      expect(plain(unpackColumns(packed))).toEqual(plain(expected));
    }
  });

  it("equal the columns decoded from the same records' stored rows (kept_records), the path a query takes when nothing is packed", () => {
    const rows = randomRecords(300, 99);
    const fromRows = keptRowsToColumns(encodeKeptRows(rows.map(({ weight, record }) => ({ priority: weight * 2, weight, record }))));
    expect(plain(unpackColumns(packColumns(fromRows)))).toEqual(plain(toColumns(rows)));
  });

  it("are read where a blob starts at an offset that is not 8-byte aligned (copied first)", () => {
    const expected = toColumns(randomRecords(5, 3));
    const packed = packColumns(expected);
    const shifted = new Uint8Array(packed.byteLength + 3);
    shifted.set(packed, 3);
    expect(plain(unpackColumns(shifted.subarray(3)))).toEqual(plain(expected));
  });

  it("refuse a blob in another format, of the wrong length, or without the header, naming what is wrong", () => {
    const packed = packColumns(toColumns(randomRecords(4, 5)));
    expect(() => unpackColumns(packed.subarray(0, packed.byteLength - 1))).toThrow(/4 records need 352 bytes, found 351/);
    const other = packed.slice();
    other[3] = PACKED_FORMAT + 1;
    expect(() => unpackColumns(other)).toThrow(new RegExp(`format ${PACKED_FORMAT + 1}, this version reads ${PACKED_FORMAT}`));
    expect(() => unpackColumns(encodeKeptRows(randomRecords(1, 1).map((r) => ({ priority: 1, ...r }))))).toThrow(/no WPC header/);
  });
});
