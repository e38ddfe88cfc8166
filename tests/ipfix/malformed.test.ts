// Messages that lie about their lengths are dropped whole and counted with a reason in words
// (issue 9 §1), by the rules of RFC 7011 §3 (message, set and template formats) and RFC 3954 §5.
// A dropped message leaves no rows and no state behind.
import { describe, expect, test } from "vitest";
import { frameIpfixMessage } from "~/ipfix/framing";
import { type Field, ipfixMessage, type IpfixSetDesc, type Value } from "../../scripts/ipfix/encode";
import { concat, harness, hex, source } from "./helpers";

const FIELDS: Field[] = [{ id: 8, length: 4 }, { id: 12, length: 4 }, { id: 4, length: 1 }, { id: 1, length: 4 }, { id: 2, length: 4 }];
const RECORD: Value[] = ["192.0.2.1", "192.0.2.2", 6, 100, 1];

function message(sets: IpfixSetDesc[]): Uint8Array {
  return ipfixMessage({ exportTime: 1714528800, sequence: 0, domain: 1, sets });
}
const good = () => message([{ templates: [{ id: 256, fields: FIELDS }] }, { templateId: 256, fields: FIELDS, records: [RECORD, RECORD] }]);

/** The message with the 16-bit value at `at` replaced. */
function with16(m: Uint8Array, at: number, value: number): Uint8Array {
  const copy = m.slice();
  new DataView(copy.buffer).setUint16(at, value);
  return copy;
}

function reasonOf(m: Uint8Array, src = source()) {
  const h = harness();
  const before = h.out.count;
  const { outcome } = h.decode(m, src);
  expect(h.out.count).toBe(before); // nothing written
  if (outcome.status !== "dropped") throw new Error(`expected a drop, got ${JSON.stringify(outcome)}`);
  return { reason: outcome.reason, outcome, stats: h.stats() };
}

describe("malformed messages are dropped whole, with a reason", () => {
  // Offsets in good(): header 0–15, template set 16–43 (Set ID, Length at 18, Template ID 20, Field Count 22), data set 44–.
  test.each([
    ["too short for any header", hex("000a00"), /^3 octets are too few for a message header$/],
    ["an unknown version", hex("0005 0010 00000000 00000000 00000000"), /^version 5 is neither IPFIX \(10\) nor NetFlow v9 \(9\)$/],
    ["an IPFIX header cut short", hex("000a 0010 0000 0000"), /^an IPFIX message header is 16 octets; only 8 arrived$/],
    ["a NetFlow v9 header cut short", hex("0009 0001 00000000 00000000"), /^a NetFlow v9 packet header is 20 octets; only 12 arrived$/],
  ])("%s", (_, m, reason) => {
    const { reason: got, outcome } = reasonOf(m);
    expect(got).toMatch(reason);
    expect(outcome.domain).toBeNull();
  });

  test("the message length field differs from the octets that arrived (RFC 7011 §3.1)", () => {
    const m = good();
    expect(reasonOf(with16(m, 2, m.length + 4)).reason).toBe(`the message header says ${m.length + 4} octets but ${m.length} arrived (RFC 7011 §3.1)`);
    expect(reasonOf(concat(m, hex("00000000"))).reason).toBe(`the message header says ${m.length} octets but ${m.length + 4} arrived (RFC 7011 §3.1)`);
  });

  test("a set length below 4 (a loop that would never advance)", () => {
    expect(reasonOf(with16(good(), 18, 3)).reason).toBe("set 1 (id 2) has length 3; a set header alone is 4 octets");
    expect(reasonOf(with16(good(), 18, 0)).reason).toBe("set 1 (id 2) has length 0; a set header alone is 4 octets");
  });

  test("a set running past the message end", () => {
    const m = good();
    expect(reasonOf(with16(m, 46, m.length)).reason).toMatch(/^set 2 \(id 256\) of length \d+ runs past the message end \(\d+ octets left\)$/);
  });

  test("octets after the last set that cannot be a set", () => {
    const m = concat(good(), hex("0000"));
    expect(reasonOf(with16(m, 2, m.length)).reason).toBe("2 octets after the last set are too few for a set");
  });

  test("a template whose field count runs past its set", () => {
    expect(reasonOf(with16(good(), 22, 9)).reason).toBe("template 256: field 6 of 9 runs past the set end");
  });

  test("a template id below 256 (RFC 7011 §3.4.1)", () => {
    expect(reasonOf(with16(good(), 20, 255)).reason).toBe("template id 255 is below 256, the first id a template may have (RFC 7011 §3.4.1)");
  });

  test("an options template with Scope Field Count 0 (RFC 7011 §3.4.2.2) or above its Field Count", () => {
    const options = message([{ optionsTemplates: [{ id: 400, scope: [{ id: 149, length: 4 }], fields: [{ id: 34, length: 4 }] }] }]);
    expect(reasonOf(with16(options, 24, 0)).reason).toBe("options template 400: Scope Field Count is 0; it must be at least 1 (RFC 7011 §3.4.2.2)");
    expect(reasonOf(with16(options, 24, 3)).reason).toBe("options template 400: Scope Field Count 3 exceeds its Field Count 2");
  });

  test("a zero-length field Weir reads, and records that would have no octets", () => {
    const zero = message([{ templates: [{ id: 256, fields: [{ id: 8, length: 0 }, ...FIELDS.slice(1)] }] }]);
    expect(reasonOf(zero).reason).toBe("template 256: sourceIPv4Address (8) has length 0");
    const empty = message([{ templates: [{ id: 256, fields: [{ id: 210, length: 0 }, { id: 210, length: 0 }] }] }]);
    expect(reasonOf(empty).reason).toBe("template 256: every field has length 0, so its records would have no octets");
  });

  test("an address of the wrong length (ipv4Address is 4 octets; no reduced size, RFC 7011 §6.2)", () => {
    const m = message([{ templates: [{ id: 256, fields: [{ id: 8, length: 3 }, ...FIELDS.slice(1)] }] }]);
    expect(reasonOf(m).reason).toBe("template 256: sourceIPv4Address (8) has length 3; its type takes exactly 4 octets (RFC 7011 §6.1, reduced size not allowed, §6.2)");
  });

  test("rows of earlier sets are taken back and templates of the message are not kept", () => {
    const h = harness();
    const bad = concat(
      good().subarray(0, 16),
      good().subarray(16), // template 256 and two good records
      hex("0003 0008 0190 0000"), // an options template withdrawal (ignored over UDP, RFC 7011 §8.4)
      hex("0002 0008 0010 0001"), // and a template set whose template id 16 is below 256
    );
    const m = with16(bad, 2, bad.length);
    const { outcome, rows } = h.decode(m);
    expect(outcome).toMatchObject({ status: "dropped", version: 10, domain: 1, reason: "template id 16 is below 256, the first id a template may have (RFC 7011 §3.4.1)" });
    expect(rows).toEqual([]);
    expect(h.out.count).toBe(0);
    expect(h.stats(1)[0]).toMatchObject({ templates: [], malformed: 1, messages: 1, records: 0 });
    // The template was not kept: a data set for it waits.
    expect(h.decode(message([{ templateId: 256, fields: FIELDS, records: [RECORD] }])).outcome).toMatchObject({ waiting: 1 });
  });

  test("a dropped message after good ones leaves the earlier rows alone", () => {
    const h = harness();
    h.decode(good());
    expect(h.out.count).toBe(2);
    h.decode(with16(good(), 18, 3));
    expect(h.out.count).toBe(2);
  });

  test("messages too short for a domain are counted under domain -1 of their session", () => {
    const h = harness();
    h.decode(hex("0009"), source());
    expect(h.stats()).toMatchObject([{ domain: -1, messages: 1, malformed: 1, lastError: "2 octets are too few for a message header" }]);
  });
});

describe("framing a TCP stream or an IPFIX file (RFC 7011 §10.4; RFC 5655)", () => {
  test("the length of the next message, or how much more is needed", () => {
    const a = good();
    const b = message([{ templates: [{ id: 257, fields: FIELDS }] }]);
    const stream = concat(a, b);
    expect(frameIpfixMessage(stream)).toEqual({ status: "message", length: a.length });
    expect(frameIpfixMessage(stream, a.length)).toEqual({ status: "message", length: b.length });
    expect(frameIpfixMessage(stream, a.length + b.length)).toEqual({ status: "incomplete", needed: 4 });
    expect(frameIpfixMessage(stream.subarray(0, 3))).toEqual({ status: "incomplete", needed: 4 });
    expect(frameIpfixMessage(stream.subarray(0, a.length - 1))).toEqual({ status: "incomplete", needed: a.length });
  });

  test("a stream that cannot be IPFIX says why", () => {
    expect(frameIpfixMessage(hex("0009 0001"))).toMatchObject({ status: "malformed", reason: expect.stringMatching(/^version 9 is not IPFIX \(10\)/) });
    expect(frameIpfixMessage(hex("000a 000f"))).toEqual({ status: "malformed", reason: "message length 15 is shorter than the 16-octet message header (RFC 7011 §3.1)" });
  });
});
