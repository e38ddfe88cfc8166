// Loss from sequence numbers. RFC 7011 §3.1: an IPFIX Sequence Number counts the Data Records
// sent before the message (modulo 2^32); RFC 3954 §5.1: a NetFlow v9 one counts export
// packets. Exporters that count the current message's records too (a deviation seen in
// practice, common practice) must not be reported as losing anything.
import { describe, expect, test } from "vitest";
import { MAX_GAP, SequenceTracker, PACKETS, PREVIOUS_RECORDS } from "~/ipfix/sequence";
import { type Field, ipfixMessage, netflow9Packet, type Value } from "../../scripts/ipfix/encode";
import { harness, source } from "./helpers";

/** Feeds [sequence, records] pairs; returns the loss found at each. */
function run(t: SequenceTracker, messages: [seq: number, count: number, uptime?: number][]): number[] {
  return messages.map(([seq, count, uptime]) => {
    const step = t.observe(seq, count, uptime ?? -1);
    return step.lost - step.recovered;
  });
}

describe("sequence numbers", () => {
  test("RFC 7011 §3.1: consecutive messages are not loss; a missing message of 30 records is 30 lost records", () => {
    const t = new SequenceTracker(PREVIOUS_RECORDS);
    expect(run(t, [[0, 30], [30, 30], [60, 12], [72, 30], [132, 30]])).toEqual([0, 0, 0, 0, 30]);
    expect(t.unit).toBe("records");
  });

  test("an exporter counting the current message's records too is never loss, with varying counts", () => {
    const t = new SequenceTracker(PREVIOUS_RECORDS);
    // seq_k = seq_{k-1} + n_k: 30, then 10 more, 25 more, 7 more, 30 more, 1 more.
    expect(run(t, [[30, 30], [40, 10], [65, 25], [72, 7], [102, 30], [103, 1]])).toEqual([0, 0, 0, 0, 0, 0]);
    // Learnt, it counts loss in its own convention: 40 records (next would be 143) are missing.
    expect(run(t, [[153, 10]])).toEqual([40]);
  });

  test("an IPFIX exporter counting messages (RFC 3954 style) is never loss; a gap is counted in packets", () => {
    const t = new SequenceTracker(PREVIOUS_RECORDS);
    expect(run(t, [[1, 30], [2, 30], [3, 12], [4, 30], [5, 30]])).toEqual([0, 0, 0, 0, 0]);
    expect(run(t, [[8, 30]])).toEqual([2]);
    expect(t.unit).toBe("packets");
  });

  test("RFC 3954 §5.1: NetFlow v9 counts export packets", () => {
    const t = new SequenceTracker(PACKETS);
    expect(run(t, [[10, 24, 1000], [11, 24, 2000], [12, 3, 3000], [15, 24, 4000]])).toEqual([0, 0, 0, 2]);
    expect(t.unit).toBe("packets");
  });

  test("an exporter restart is not loss: the number back near zero, or NetFlow v9 sysUpTime lower than before", () => {
    const ipfix = new SequenceTracker(PREVIOUS_RECORDS);
    expect(run(ipfix, [[5000, 30], [5030, 30], [0, 30], [30, 30], [60, 30]])).toEqual([0, 0, 0, 0, 0]);
    const v9 = new SequenceTracker(PACKETS);
    // A restarted v9 exporter whose count happens to jump forward: the uptime tells.
    expect(run(v9, [[100, 5, 90_000], [101, 5, 95_000], [140, 5, 2_000], [141, 5, 3_000]])).toEqual([0, 0, 0, 0]);
  });

  test("a late (reordered) datagram takes back the loss it was counted as", () => {
    const t = new SequenceTracker(PREVIOUS_RECORDS);
    expect(run(t, [[0, 30], [30, 30], [90, 30], [60, 30], [120, 30]])).toEqual([0, 0, 30, -30, 0]);
  });

  test("wrapping modulo 2^32 is not a restart and not loss", () => {
    const t = new SequenceTracker(PREVIOUS_RECORDS);
    expect(run(t, [[4294967290, 30], [24, 30], [54, 30]])).toEqual([0, 0, 0]);
  });

  test("a jump beyond MAX_GAP is taken as a restart, not billions of lost records", () => {
    const t = new SequenceTracker(PREVIOUS_RECORDS);
    expect(run(t, [[0, 30], [30, 30], [60 + MAX_GAP + 1, 30]])).toEqual([0, 0, 0]);
  });

  test("a message whose record count is unknown resynchronises instead of guessing", () => {
    const t = new SequenceTracker(PREVIOUS_RECORDS);
    expect(run(t, [[0, 30], [30, -1], [75, 30], [105, 30]])).toEqual([0, 0, 0, 0]);
  });
});

describe("sequence numbers through the decoder", () => {
  const fields: Field[] = [{ id: 8, length: 4 }, { id: 12, length: 4 }, { id: 4, length: 1 }, { id: 1, length: 4 }, { id: 2, length: 4 }];
  const records = (n: number): Value[][] => Array.from({ length: n }, () => ["192.0.2.1", "192.0.2.2", 6, 100, 1]);

  test("IPFIX: lost records are counted per domain and shown as records", () => {
    const h = harness();
    const send = (sequence: number, n: number) =>
      h.decode(ipfixMessage({ exportTime: 1714528800, sequence, domain: 4, sets: [{ templates: [{ id: 256, fields }] }, { templateId: 256, fields, records: records(n) }] })).outcome;
    expect([send(0, 30), send(30, 30), send(90, 5)].map((o) => o.status === "decoded" && o.lost)).toEqual([0, 0, 30]);
    expect(h.stats(4)[0]).toMatchObject({ lost: 30, lostUnit: "records" });
  });

  test("IPFIX: a message with a set waiting for its template does not make up loss", () => {
    const h = harness();
    const msg = (sequence: number, sets: Parameters<typeof ipfixMessage>[0]["sets"]) => h.decode(ipfixMessage({ exportTime: 1714528800, sequence, domain: 4, sets })).outcome;
    msg(0, [{ templateId: 256, fields, records: records(10) }]); // 10 records, but the decoder cannot know it
    const next = msg(10, [{ templates: [{ id: 256, fields }] }, { templateId: 256, fields, records: records(3) }]);
    expect(next).toMatchObject({ status: "decoded", lost: 0, replayed: 10 });
    expect(h.stats(4)[0].lost).toBe(0);
  });

  test("NetFlow v9: lost export packets, counted as packets", () => {
    const h = harness();
    const send = (sequence: number, sysUptime: number) =>
      h.decode(netflow9Packet({ sysUptime, unixSecs: 1714528800, sequence, sourceId: 5, flowSets: [{ templates: [{ id: 256, fields }] }, { templateId: 256, fields, records: records(4) }] }), source("netflow9-udp")).outcome;
    expect([send(7, 1000), send(8, 2000), send(12, 3000)].map((o) => o.status === "decoded" && o.lost)).toEqual([0, 0, 3]);
    expect(h.stats(5)[0]).toMatchObject({ lost: 3, lostUnit: "packets" });
  });
});
