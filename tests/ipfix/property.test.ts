// Property tests (fast-check): no input makes the decoder throw or stall, and every message is
// accounted for — decoded (its rows written contiguously, their number reported) or dropped with
// a reason and nothing written (issue 9 §1). Unmutated messages built by the independent
// encoder decode to exactly the records it encoded.
import fc from "fast-check";
import { describe, expect, test } from "vitest";
import { FlowDecoder, RowWriter } from "~/ipfix/decoder";
import type { MessageOutcome, MessageSource } from "~/ipfix/types";
import { type Field, ipfixMessage, netflow9Packet, VARIABLE, type Value } from "../../scripts/ipfix/encode";
import { T0 } from "./helpers";

const UDP: MessageSource = { session: "udp:192.0.2.10:50000", exporter: "192.0.2.10", transport: "ipfix-udp", receivedAt: T0 };

/** Decodes and checks the accounting of one message; returns its outcome. */
function decodeAccounted(decoder: FlowDecoder, out: RowWriter, message: Uint8Array, src = UDP): MessageOutcome {
  const before = out.count;
  const outcome = decoder.decode(src, message, out);
  if (outcome.status === "decoded") {
    expect(out.count - before).toBe(outcome.records);
    expect(Math.min(outcome.records, outcome.unusable, outcome.waiting, outcome.replayed, outcome.lost)).toBeGreaterThanOrEqual(0);
  } else {
    expect(out.count).toBe(before);
    expect(outcome.reason.length).toBeGreaterThan(0);
  }
  return outcome;
}

// Key fields Weir needs, always present; the extras are fields it skips or reads without
// changing whether a record is usable (times, interfaces, unknown and enterprise elements).
const KEY: Field[] = [{ id: 8, length: 4 }, { id: 12, length: 4 }, { id: 4, length: 1 }];
const extraField: fc.Arbitrary<Field> = fc.oneof(
  fc.record({ id: fc.constantFrom(5, 6, 9, 13, 15, 32, 61, 89, 136, 210, 225, 433), length: fc.integer({ min: 0, max: 12 }) }),
  fc.record({ id: fc.constantFrom(82, 83, 94, 96), length: fc.constant(VARIABLE) }),
  fc.record({ id: fc.constantFrom(10, 14, 16, 17, 7, 11), length: fc.constantFrom(1, 2) }),
  fc.record({ id: fc.constantFrom(152, 153, 154, 155, 156, 157), length: fc.constant(8) }),
  fc.record({ id: fc.constantFrom(150, 151, 158, 159, 21, 22), length: fc.constant(4) }),
  fc.record({ id: fc.integer({ min: 1, max: 0x7fff }), length: fc.oneof(fc.integer({ min: 0, max: 10 }), fc.constant(VARIABLE)), enterprise: fc.constantFrom(32473, 64496) }),
);

const counterLength = fc.integer({ min: 1, max: 8 });

const scenario = fc
  .record({
    extras: fc.array(extraField, { maxLength: 6 }),
    bytesLength: counterLength,
    packetsLength: counterLength,
    records: fc.array(fc.record({ bytes: fc.nat(), packets: fc.nat({ max: 1000 }), seed: fc.nat() }), { maxLength: 40 }),
    padding: fc.integer({ min: 0, max: 3 }),
    longLengths: fc.boolean(),
    v9: fc.boolean(),
  })
  .map((s) => {
    const v9 = s.v9;
    // NetFlow v9 has neither enterprise fields nor variable lengths (RFC 3954 §5.2).
    const extras = v9 ? s.extras.filter((f) => f.enterprise === undefined && f.length !== VARIABLE) : s.extras;
    const fields: Field[] = [...KEY, ...extras, { id: 1, length: s.bytesLength }, { id: 2, length: s.packetsLength }];
    const max = (octets: number) => 2 ** Math.min(8 * octets, 48) - 1;
    const records = s.records.map((r) => {
      const values: Value[] = ["192.0.2.1", "198.51.100.2", 6];
      for (const f of extras) {
        if (f.length === VARIABLE) values.push("x".repeat(r.seed % 300));
        else values.push(new Uint8Array(f.length).map((_, i) => (r.seed >> (i % 4) * 8) & 0xff));
      }
      values.push(r.bytes % (max(s.bytesLength) + 1), r.packets % (max(s.packetsLength) + 1));
      return values;
    });
    const usable = records.filter((r) => (r.at(-2) as number) > 0 && (r.at(-1) as number) > 0).length;
    const message = v9
      ? netflow9Packet({ sysUptime: 5000, unixSecs: 1714528800, sequence: 0, sourceId: 1, flowSets: [{ templates: [{ id: 256, fields }] }, { templateId: 256, fields, records, padding: s.padding }] })
      : ipfixMessage({ exportTime: 1714528800, sequence: 0, domain: 1, sets: [{ templates: [{ id: 256, fields }] }, { templateId: 256, fields, records, padding: s.padding, longLengths: s.longLengths }] });
    return { message, usable, unusable: records.length - usable, v9 };
  })
  // An IPFIX message and a NetFlow v9 FlowSet are at most 65535 octets.
  .filter((s) => s.message.length <= 65535);

const mutation: fc.Arbitrary<Mutation> = fc.oneof(
  fc.record({ kind: fc.constant("byte" as const), at: fc.nat(), value: fc.integer({ min: 0, max: 255 }) }),
  fc.record({ kind: fc.constant("u16" as const), at: fc.nat(), value: fc.constantFrom(0, 1, 2, 3, 4, 255, 256, 65535) }),
  fc.record({ kind: fc.constant("cut" as const), at: fc.nat() }),
  fc.record({ kind: fc.constant("insert" as const), at: fc.nat(), bytes: fc.uint8Array({ maxLength: 8 }) }),
);

type Mutation = { kind: "byte" | "u16"; at: number; value: number } | { kind: "cut"; at: number } | { kind: "insert"; at: number; bytes: Uint8Array };

function mutate(message: Uint8Array, mutations: Mutation[]): Uint8Array {
  let m = message.slice();
  for (const mu of mutations) {
    const at = m.length === 0 ? 0 : mu.at % m.length;
    if (mu.kind === "byte" && m.length > 0) m[at] = mu.value;
    else if (mu.kind === "u16" && at + 1 < m.length) new DataView(m.buffer, m.byteOffset).setUint16(at, mu.value);
    else if (mu.kind === "cut") m = m.slice(0, at);
    else if (mu.kind === "insert") m = new Uint8Array([...m.subarray(0, at), ...mu.bytes, ...m.subarray(at)]);
  }
  return m;
}

describe("decoder properties", () => {
  test("arbitrary bytes never throw; every message is decoded or dropped with a reason", () => {
    const headers = fc.constantFrom(new Uint8Array(0), Uint8Array.from([0, 10]), Uint8Array.from([0, 9]));
    fc.assert(
      fc.property(headers, fc.uint8Array({ maxLength: 600 }), (head, tail) => {
        const decoder = new FlowDecoder({ templateLifetimeMs: 60_000 });
        decodeAccounted(decoder, new RowWriter(1), new Uint8Array([...head, ...tail]));
      }),
      { numRuns: 2000 },
    );
  });

  test("unmutated messages decode to exactly the records encoded (usable written, the rest counted unusable)", () => {
    fc.assert(
      fc.property(scenario, (s) => {
        const decoder = new FlowDecoder({ templateLifetimeMs: null });
        const outcome = decodeAccounted(decoder, new RowWriter(1), s.message, s.v9 ? { ...UDP, transport: "netflow9-udp" } : UDP);
        expect(outcome).toMatchObject({ status: "decoded", records: s.usable, unusable: s.unusable, waiting: 0 });
      }),
      { numRuns: 300 },
    );
  });

  test("mutated messages, one after another into one decoder, never throw and are all accounted for in the statistics", () => {
    const seen = { decoded: 0, dropped: 0, rows: 0, waiting: 0 };
    fc.assert(
      fc.property(fc.array(fc.tuple(scenario, fc.array(mutation, { maxLength: 4 })), { minLength: 1, maxLength: 6 }), (messages) => {
        const decoder = new FlowDecoder({ templateLifetimeMs: 60_000, maxWaitingSets: 4 });
        const out = new RowWriter(1);
        let decodedRecords = 0;
        let dropped = 0;
        for (const [s, mutations] of messages) {
          const outcome = decodeAccounted(decoder, out, mutate(s.message, mutations), s.v9 ? { ...UDP, transport: "netflow9-udp" } : UDP);
          if (outcome.status === "decoded") {
            decodedRecords += outcome.records;
            seen.decoded++;
            seen.waiting += outcome.waiting;
          } else {
            dropped++;
            seen.dropped++;
          }
        }
        const stats = decoder.exporterStats();
        expect(stats.reduce((n, e) => n + e.messages, 0)).toBe(messages.length);
        expect(stats.reduce((n, e) => n + e.malformed, 0)).toBe(dropped);
        expect(stats.reduce((n, e) => n + e.records, 0)).toBe(decodedRecords);
        expect(out.count).toBe(decodedRecords);
        seen.rows += decodedRecords;
      }),
      { numRuns: 300 },
    );
    // The mutations reach both outcomes and the waiting buffer, so the property is not vacuous.
    expect(Math.min(seen.decoded, seen.dropped, seen.rows, seen.waiting)).toBeGreaterThan(0);
  });
});
