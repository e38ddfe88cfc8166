// The row writer's rows are kept-codec rows: what the decoder writes must equal, octet for
// octet, what packFlowRecords (app/ingest/kept-codec.ts, the JSON ingest path) makes of the same
// records, so both transports hand the ingest manager identical batches.
import { describe, expect, test } from "vitest";
import { type FlowRecord, parseFlowRecord } from "~/flow/record";
import { KEPT_ROW_BYTES, packFlowRecords } from "~/ingest/kept-codec";
import { RowWriter } from "~/ipfix/row-writer";
import { ipfixMessage } from "../../scripts/ipfix/encode";
import { harness } from "./helpers";

function record(json: Record<string, unknown>): FlowRecord {
  const result = parseFlowRecord(json);
  if (!result.ok) throw new Error(JSON.stringify(result.issues));
  return result.record;
}

describe("RowWriter", () => {
  test("decoded rows equal kept-codec's packing of the same records (JSON ingest)", () => {
    const fields = [
      { id: 8, length: 4 }, { id: 12, length: 4 }, { id: 7, length: 2 }, { id: 11, length: 2 }, { id: 4, length: 1 },
      { id: 1, length: 8 }, { id: 2, length: 8 }, { id: 152, length: 8 }, { id: 153, length: 8 },
      { id: 10, length: 4 }, { id: 14, length: 4 }, { id: 16, length: 4 }, { id: 17, length: 4 },
    ];
    const v6 = [{ id: 27, length: 16 }, { id: 28, length: 16 }, { id: 4, length: 1 }, { id: 1, length: 4 }, { id: 2, length: 4 }];
    const m = ipfixMessage({
      exportTime: 1714528800, sequence: 0, domain: 7, sets: [
        { templates: [{ id: 300, fields }, { id: 301, fields: v6 }] },
        { templateId: 300, fields, records: [["198.51.100.7", "203.0.113.9", 51514, 443, 6, 18446744073709551615n, 12, 1714528800000, 1714528805000, 3, 4, 64496, 64511]] },
        { templateId: 301, fields: v6, records: [["2001:db8::1", "2001:db8::2", 17, 80, 1]] },
      ],
    });
    const h = harness();
    h.decode(m);
    const expected = packFlowRecords([
      record({
        src: "198.51.100.7", dst: "203.0.113.9", sport: 51514, dport: 443, proto: 6, bytes: "18446744073709551615", packets: 12,
        start: 1714528800000, end: 1714528805000, ingressInterface: 3, egressInterface: 4, bgpSourceAsNumber: 64496, bgpDestinationAsNumber: 64511,
      }),
      record({ src: "2001:db8::1", dst: "2001:db8::2", proto: 17, bytes: 80, packets: 1 }),
    ]);
    const taken = h.out.take();
    expect(taken.count).toBe(2);
    expect([...taken.rows]).toEqual([...expected.rows]);
  });

  test("count, truncate, take: an owning copy, then empty; growth keeps earlier rows", () => {
    const w = new RowWriter(1);
    w.reserve(3);
    for (let i = 0; i < 3; i++) w.bytes[i * KEPT_ROW_BYTES + 84] = i + 1; // protocol octet of each row
    w.count = 3;
    w.reserve(100); // grows: the three rows must survive
    expect([0, 1, 2].map((i) => w.bytes[i * KEPT_ROW_BYTES + 84])).toEqual([1, 2, 3]);
    w.truncate(2);
    expect(w.count).toBe(2);
    expect(() => w.truncate(3)).toThrow(RangeError);
    const taken = w.take();
    expect(taken.count).toBe(2);
    expect(taken.rows.byteLength).toBe(2 * KEPT_ROW_BYTES);
    expect(taken.rows.buffer).not.toBe(w.bytes.buffer); // transferable without detaching the writer
    expect(w.count).toBe(0);
    expect(w.take()).toEqual({ rows: new Uint8Array(0), count: 0 });
  });
});
