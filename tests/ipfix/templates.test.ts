// Template management: withdrawal and all-templates withdrawal (RFC 7011 §8.1), withdrawals over
// UDP (§8.4), redefinition (RFC 3954 §7), expiry over UDP (RFC 7011 §8.4), and data sets that
// arrive before their template (§8: "MAY buffer Data Records for which it has no Templates").
import { describe, expect, test } from "vitest";
import { type Field, ipfixMessage, type IpfixSetDesc, type Value } from "../../scripts/ipfix/encode";
import { harness, source, T0 } from "./helpers";

const EXPORT = 1714528800;
const FIELDS: Field[] = [{ id: 8, length: 4 }, { id: 12, length: 4 }, { id: 4, length: 1 }, { id: 1, length: 4 }, { id: 2, length: 4 }];
const OPTIONS = { id: 400, scope: [{ id: 149, length: 4 }], fields: [{ id: 34, length: 4 }] };
const OPTION_FIELDS = [...OPTIONS.scope, ...OPTIONS.fields];
const tcp = (at = T0) => source("ipfix-tcp", at, "tcp:192.0.2.10:40000");
const udp = (at = T0) => source("ipfix-udp", at);

function message(sets: IpfixSetDesc[], sequence = 0): Uint8Array {
  return ipfixMessage({ exportTime: EXPORT, sequence, domain: 1, sets });
}
const define = (id = 256, fields = FIELDS): IpfixSetDesc => ({ templates: [{ id, fields }] });
const data = (bytes: number, id = 256, fields = FIELDS): IpfixSetDesc => ({ templateId: id, fields, records: [["192.0.2.1", "192.0.2.2", 6, bytes, 1] as Value[]] });
const bytesOf = (rows: { bytes: bigint }[]) => rows.map((r) => Number(r.bytes));

describe("withdrawal (RFC 7011 §8.1)", () => {
  test("a withdrawn template no longer decodes data sets; they wait for a new definition", () => {
    const h = harness();
    expect(bytesOf(h.decode(message([define(), data(100)]), tcp()).rows)).toEqual([100]);
    const after = h.decode(message([{ withdraw: [256], setId: 2 }, data(200)], 1), tcp());
    expect(after.outcome).toMatchObject({ status: "decoded", records: 0, waiting: 1 });
    expect(h.stats(1)[0].templates).toEqual([]);
  });

  test("withdrawals take effect in set order: data before the withdrawal in the same message still decodes", () => {
    const h = harness();
    h.decode(message([define()]), tcp());
    const { outcome, rows } = h.decode(message([data(100), { withdraw: [256], setId: 2 }, data(200)], 0), tcp());
    expect(bytesOf(rows)).toEqual([100]);
    expect(outcome).toMatchObject({ waiting: 1 });
  });

  test("all-templates withdrawal (Template ID 2 in set 2) leaves options templates; all-options (3 in set 3) removes those", () => {
    const h = harness();
    h.decode(message([define(256), define(257), { optionsTemplates: [OPTIONS] }]), tcp());
    h.decode(message([{ withdraw: [2], setId: 2 }]), tcp());
    expect(h.stats(1)[0].templates.map((t) => t.id)).toEqual([400]);
    h.decode(message([define(256), { withdraw: [3], setId: 3 }]), tcp());
    expect(h.stats(1)[0].templates.map((t) => t.id)).toEqual([256]);
  });

  test("withdrawing a template that is not defined is ignored and noted (RFC 7011 §8.1)", () => {
    const h = harness();
    const { outcome } = h.decode(message([define(), { withdraw: [999], setId: 2 }, data(100)]), tcp());
    expect(outcome).toMatchObject({ status: "decoded", records: 1 });
    expect(h.stats(1)[0].lastError).toBe("withdrawal of template 999, which is not defined, was ignored (RFC 7011 §8.1)");
  });

  test("over UDP withdrawals are ignored (RFC 7011 §8.4: they MUST be ignored by collectors over UDP)", () => {
    const h = harness();
    h.decode(message([define()]), udp());
    const { rows } = h.decode(message([{ withdraw: [256], setId: 2 }, { withdraw: [2], setId: 2 }, data(300)]), udp());
    expect(bytesOf(rows)).toEqual([300]);
    expect(h.stats(1)[0].lastError).toMatch(/withdrawal over UDP was ignored/);
  });

  test("the end of a TCP session withdraws its templates (RFC 7011 §8.1) and drops, counting, what waits", () => {
    const h = harness();
    h.decode(message([define()]), tcp());
    h.decode(message([data(1, 300, FIELDS), data(2, 301, FIELDS)]), tcp());
    expect(h.stats(1)[0].waiting).toBe(2);
    h.decoder.endSession("tcp:192.0.2.10:40000");
    const [stats] = h.stats(1);
    expect([stats.templates, stats.waiting, stats.droppedWaiting]).toEqual([[], 0, 2]);
  });
});

describe("redefinition", () => {
  test("a new definition for an id replaces the old one (RFC 3954 §7: the collector MUST use the new one)", () => {
    const swapped: Field[] = [{ id: 8, length: 4 }, { id: 12, length: 4 }, { id: 4, length: 1 }, { id: 2, length: 4 }, { id: 1, length: 4 }];
    const h = harness();
    h.decode(message([define(256, FIELDS)]), udp());
    const { rows } = h.decode(message([define(256, swapped), { templateId: 256, fields: swapped, records: [["192.0.2.1", "192.0.2.2", 6, 7, 7000]] }]), udp());
    expect(rows.map((r) => [r.bytes, r.packets])).toEqual([[7000n, 7n]]);
    expect(h.stats(1)[0].templates[0].fields).toEqual(["sourceIPv4Address", "destinationIPv4Address", "protocolIdentifier", "packetDeltaCount", "octetDeltaCount"]);
  });

  test("a template defined as options and redefined as a flow template is a flow template", () => {
    const h = harness();
    h.decode(message([{ optionsTemplates: [{ ...OPTIONS, id: 256 }] }]), udp());
    expect(bytesOf(h.decode(message([define(256), data(5)]), udp()).rows)).toEqual([5]);
  });
});

describe("expiry over UDP (RFC 7011 §8.4)", () => {
  test("a template not refreshed within templateLifetimeMs is forgotten; a refresh keeps it", () => {
    const h = harness({ templateLifetimeMs: 30_000 });
    h.decode(message([define()]), udp(T0));
    expect(bytesOf(h.decode(message([data(1)]), udp(T0 + 29_000)).rows)).toEqual([1]);
    h.decode(message([define()]), udp(T0 + 29_000)); // refreshed
    expect(bytesOf(h.decode(message([data(2)]), udp(T0 + 58_000)).rows)).toEqual([2]);
    expect(h.decode(message([data(3)]), udp(T0 + 89_001)).outcome).toMatchObject({ records: 0, waiting: 1 });
  });

  test("over TCP templates do not expire: they last for the session (RFC 7011 §8)", () => {
    const h = harness({ templateLifetimeMs: 30_000 });
    h.decode(message([define()]), tcp(T0));
    expect(bytesOf(h.decode(message([data(4)]), tcp(T0 + 3_600_000)).rows)).toEqual([4]);
  });
});

describe("data sets waiting for their template", () => {
  test("held, then replayed in arrival order when the template arrives; counted as replayed", () => {
    const h = harness();
    const first = h.decode(message([data(1), data(2)]), udp());
    expect(first.outcome).toMatchObject({ status: "decoded", records: 0, waiting: 2 });
    expect(h.stats(1)[0].waiting).toBe(2);
    const second = h.decode(message([define(), data(3)]), udp(T0 + 1000));
    expect(second.outcome).toMatchObject({ status: "decoded", records: 3, waiting: 0, replayed: 2 });
    expect(bytesOf(second.rows)).toEqual([3, 1, 2]); // this message's rows, then the replayed ones in arrival order
    expect(h.stats(1)[0]).toMatchObject({ waiting: 0, droppedWaiting: 0, records: 3 });
  });

  test("options records wait too, and their announcement applies once replayed", () => {
    const h = harness();
    h.decode(message([{ templateId: 400, fields: OPTION_FIELDS, records: [[1, 10]] }]), udp());
    h.decode(message([{ optionsTemplates: [OPTIONS] }, define()]), udp());
    expect(h.stats(1)[0].samplingInterval).toBe(10);
    expect(bytesOf(h.decode(message([data(7)]), udp()).rows)).toEqual([70]);
  });

  test("beyond maxWaitingSets the oldest is dropped and counted", () => {
    const h = harness({ maxWaitingSets: 2 });
    h.decode(message([data(1), data(2), data(3)]), udp());
    expect(h.stats(1)[0]).toMatchObject({ waiting: 2, droppedWaiting: 1 });
    expect(bytesOf(h.decode(message([define()]), udp()).rows)).toEqual([2, 3]);
  });

  test("beyond maxWaitingBytes the oldest is dropped and counted; a set larger than the bound never waits", () => {
    const h = harness({ maxWaitingBytes: 40 }); // each data set body here is 17 octets
    h.decode(message([data(1), data(2), data(3)]), udp());
    expect(h.stats(1)[0]).toMatchObject({ waiting: 2, droppedWaiting: 1 });
    const big = { templateId: 256, fields: FIELDS, records: Array.from({ length: 3 }, () => ["192.0.2.1", "192.0.2.2", 6, 9, 1] as Value[]) };
    h.decode(message([big]), udp());
    expect(h.stats(1)[0]).toMatchObject({ waiting: 2, droppedWaiting: 2 });
  });

  test("a set older than waitingLifetimeMs is dropped and counted at the domain's next message", () => {
    const h = harness({ waitingLifetimeMs: 5_000 });
    h.decode(message([data(1)]), udp(T0));
    h.decode(message([data(2)]), udp(T0 + 4_000));
    h.decode(message([]), udp(T0 + 5_500));
    expect(h.stats(1)[0]).toMatchObject({ waiting: 1, droppedWaiting: 1 });
    expect(bytesOf(h.decode(message([define()]), udp(T0 + 6_000)).rows)).toEqual([2]);
  });

  test("a replayed set that does not fit its template is dropped and counted; the message replaying it is not", () => {
    const varlen: Field[] = [{ id: 82, length: 65535 }, ...FIELDS];
    const h = harness();
    // 18 octets, the shortest record of the template below, whose variable length says 200.
    h.decode(message([{ setId: 256, body: Uint8Array.from([200, ...new Array(17).fill(1)]) }]), udp());
    const { outcome } = h.decode(message([define(256, varlen)]), udp());
    expect(outcome).toMatchObject({ status: "decoded", records: 0, replayed: 0 });
    expect(h.stats(1)[0]).toMatchObject({ waiting: 0, droppedWaiting: 1, malformed: 0 });
  });
});
