import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { decodeKeptRow, encodeKeptRows, KEPT_ROW_BYTES, keptRowsToColumns, keptRowsToColumnsPortable, packFlowRecords } from "~/ingest/kept-codec";
import type { FlowRecord } from "~/flow/record";
import { toColumns } from "~/query/columns";

// The stored row layout must give back every field exactly, counters up to
// 2^64 − 1 (RFC 7012 unsigned64) and absent optional fields included.
const address = fc.uint8Array({ minLength: 16, maxLength: 16 });
const optional32 = fc.option(fc.integer({ min: 0, max: 4_294_967_295 }), { nil: null });
const time = fc.option(fc.integer({ min: 0, max: 2 ** 47 }), { nil: null });
const record: fc.Arbitrary<FlowRecord> = fc.record({
  src: address,
  dst: address,
  sport: fc.integer({ min: 0, max: 65535 }),
  dport: fc.integer({ min: 0, max: 65535 }),
  proto: fc.integer({ min: 0, max: 255 }),
  bytes: fc.bigInt({ min: 1n, max: 2n ** 64n - 1n }),
  packets: fc.bigInt({ min: 1n, max: 2n ** 64n - 1n }),
  start: time,
  end: time,
  ingressInterface: optional32,
  egressInterface: optional32,
  srcAs: optional32,
  dstAs: optional32,
});
const row = fc.record({ priority: fc.double({ min: 1, max: 1e300, noNaN: true }), weight: fc.double({ min: 1, max: 1e19, noNaN: true }), record });

describe("kept-record rows", () => {
  it("round-trip every field exactly", () => {
    fc.assert(
      fc.property(fc.array(row, { maxLength: 20 }), (rows) => {
        const data = encodeKeptRows(rows);
        expect(data.byteLength).toBe(rows.length * KEPT_ROW_BYTES);
        rows.forEach((r, i) => expect(decodeKeptRow(data, i * KEPT_ROW_BYTES)).toEqual(r));
      }),
    );
  });

  it("lay out in query columns the same values", () => {
    fc.assert(
      fc.property(fc.array(row, { minLength: 1, maxLength: 20 }), (rows) => {
        const c = keptRowsToColumns(encodeKeptRows(rows));
        expect(c.length).toBe(rows.length);
        rows.forEach((r, i) => {
          expect(c.weight[i]).toBe(r.weight);
          expect(c.bytes[i]).toBe(Number(r.record.bytes));
          expect([...c.src.subarray(16 * i, 16 * i + 16)]).toEqual([...r.record.src]);
          expect(c.dport[i]).toBe(r.record.dport);
          expect(Number.isNaN(c.start[i]) ? null : c.start[i]).toBe(r.record.start);
        });
        // Every column, the optional AS numbers and interfaces with their presence bits included, as
        // a live reservoir lays the same records out (the two paths a query reads).
        expect(c).toEqual(toColumns(rows));
        // The same from rows that do not start on an 8-byte boundary (a slice of a larger buffer),
        // and from the DataView reading that any byte order takes.
        const data = encodeKeptRows(rows);
        const shifted = new Uint8Array(data.byteLength + 4);
        shifted.set(data, 4);
        expect(keptRowsToColumns(shifted.subarray(4))).toEqual(c);
        expect(keptRowsToColumnsPortable(data)).toEqual(c);
      }),
    );
  });

  it("pack validated records as rows of priority and weight zero", () => {
    fc.assert(
      fc.property(fc.array(record, { maxLength: 20 }), (records) => {
        const { rows, count } = packFlowRecords(records);
        expect(count).toBe(records.length);
        expect(rows.byteLength).toBe(records.length * KEPT_ROW_BYTES);
        expect(rows).toEqual(encodeKeptRows(records.map((r) => ({ priority: 0, weight: 0, record: r }))));
        records.forEach((r, i) => expect(decodeKeptRow(rows, i * KEPT_ROW_BYTES)).toEqual({ priority: 0, weight: 0, record: r }));
      }),
    );
  });

  it("refuses a truncated row", () => {
    expect(() => decodeKeptRow(new Uint8Array(KEPT_ROW_BYTES - 1))).toThrow(RangeError);
    expect(() => keptRowsToColumns(new Uint8Array(KEPT_ROW_BYTES + 3))).toThrow(RangeError);
  });
});
