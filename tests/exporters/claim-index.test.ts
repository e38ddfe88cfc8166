import fc from "fast-check";
import ipaddr from "ipaddr.js";
import { describe, expect, test } from "vitest";
import { ClaimIndex, claimRange, overlaps, type ClaimRow } from "~/exporters/claim-index.ts";
import { parseAddress } from "~/net/address.ts";
import { PrefixError } from "~/net/prefix.ts";

// Which claim a message from an exporter belongs to. Prefix semantics from RFC 4632 §3.1
// (a /n covers every address whose first n bits equal the prefix's) and §5.1 rule 1
// (longest match); IPv4 as IPv4-mapped IPv6 from RFC 4291 §2.5.5.2. The domain rule (at one
// prefix length, a claim naming the domain beats one for every domain) is Weir's own, from
// issue 9 and the exporter_claims schema comment.

let nextId = 1;
function claim(text: string, domainId: number | null, collectorId: number, tenantId = 1, id = nextId++): ClaimRow {
  const { first, last, prefixLength } = claimRange(text);
  return { id, tenantId, collectorId, first, last, prefixLength, domainId };
}
const at = (index: ClaimIndex, address: string, domain = 0) => index.resolve(parseAddress(address), domain)?.collectorId ?? null;

describe("claimRange: an address or CIDR as an admin types it", () => {
  test("a bare address is a /32 (IPv4) or a /128 (IPv6)", () => {
    // RFC 4632 §3.1: a host is the prefix of full length; RFC 4291 §2.3 for IPv6.
    expect(claimRange("192.0.2.1")).toMatchObject({ cidr: "192.0.2.1/32", prefixLength: 128 });
    expect(claimRange("2001:db8::1")).toMatchObject({ cidr: "2001:db8::1/128", prefixLength: 128 });
  });

  test("an IPv4 /24 is the 16-byte prefix ::ffff:a.b.c.0/120 and spans .0 to .255", () => {
    // RFC 4291 §2.5.5.2: 80 zero bits, 16 one bits, then the IPv4 address.
    const r = claimRange("198.51.100.0/24");
    expect(r.prefixLength).toBe(96 + 24);
    expect([...r.first]).toEqual([0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0xff, 0xff, 198, 51, 100, 0]);
    expect([...r.last]).toEqual([0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0xff, 0xff, 198, 51, 100, 255]);
  });

  test("IPv4-mapped IPv6 text is the same claim as the dotted address", () => {
    // RFC 4291 §2.5.5.2 (::ffff:192.0.2.1 is the IPv4 address 192.0.2.1).
    expect(claimRange("::ffff:192.0.2.1")).toEqual(claimRange("192.0.2.1"));
    expect(claimRange("::ffff:192.0.2.0/120")).toEqual(claimRange("192.0.2.0/24"));
  });

  test("text is normalised: IPv6 as RFC 5952 canonical text, surrounding spaces dropped", () => {
    // RFC 5952 §4.3 (lowercase), §4.2.1 (longest zero run as ::).
    expect(claimRange(" 2001:0DB8:0000:0000::/48 ").cidr).toBe("2001:db8::/48");
  });

  test("host bits set, an empty field and garbage are refused with a message a person can act on", () => {
    // RFC 4632 §3.1: the address of a prefix has its host bits zero.
    expect(() => claimRange("192.0.2.1/24")).toThrow("did you mean 192.0.2.0/24?");
    expect(() => claimRange("")).toThrow("an address or CIDR is required");
    expect(() => claimRange("192.0.2.300")).toThrow(PrefixError);
    expect(() => claimRange("198.51.100.0/33")).toThrow("from 0 to 32");
  });
});

describe("ClaimIndex.resolve", () => {
  test("a /24 covers its first and last address and nothing of the blocks beside it", () => {
    // RFC 4632 §3.1: 198.51.100.0/24 is 198.51.100.0 through 198.51.100.255. Outside it, the other
    // documentation blocks (RFC 5737), below and above it in address order.
    const index = new ClaimIndex([claim("198.51.100.0/24", null, 7)]);
    expect(at(index, "198.51.100.0")).toBe(7);
    expect(at(index, "198.51.100.255")).toBe(7);
    expect(at(index, "192.0.2.255")).toBeNull();
    expect(at(index, "203.0.113.0")).toBeNull();
  });

  test("a /25 covers its first and last address and nothing either side", () => {
    // RFC 4632 §3.1: 198.51.100.128/25 is .128 through .255; its neighbours inside the documentation block.
    const index = new ClaimIndex([claim("198.51.100.0/26", null, 5), claim("198.51.100.128/25", null, 7)]);
    expect([at(index, "198.51.100.127"), at(index, "198.51.100.128"), at(index, "198.51.100.255")]).toEqual([null, 7, 7]);
    expect([at(index, "198.51.100.63"), at(index, "198.51.100.64")]).toEqual([5, null]);
  });

  test("a prefix not on an octet boundary: 203.0.113.64/26 is .64 to .127", () => {
    // RFC 4632 §3.1: the first 26 bits decide; 64 = 0b01000000, 127 = 0b01111111.
    const index = new ClaimIndex([claim("203.0.113.64/26", null, 3)]);
    expect([at(index, "203.0.113.63"), at(index, "203.0.113.64"), at(index, "203.0.113.127"), at(index, "203.0.113.128")]).toEqual([null, 3, 3, null]);
  });

  test("an IPv6 /33, not on a 16-bit group boundary", () => {
    // RFC 4291 §2.3: 2001:db8::/33 holds 2001:db8:: to 2001:db8:7fff:ffff:…; 2001:db8:8000:: differs in bit 33 (inside RFC 3849's 2001:db8::/32).
    const index = new ClaimIndex([claim("2001:db8::/33", null, 4)]);
    expect(at(index, "2001:db8:7fff:ffff::1")).toBe(4);
    expect(at(index, "2001:db8:8000::")).toBeNull();
  });

  test("an IPv4 claim never matches an IPv6 address with the same low 32 bits", () => {
    // RFC 4291 §2.5.5.2: IPv4 lives in ::ffff:0:0/96 only; §2.5.5.1's deprecated
    // IPv4-compatible ::192.0.2.1 is another address.
    const index = new ClaimIndex([claim("192.0.2.0/24", null, 1)]);
    expect(at(index, "::ffff:192.0.2.9")).toBe(1);
    expect(at(index, "::192.0.2.9")).toBeNull();
    expect(at(index, "2001:db8::c000:209")).toBeNull();
  });

  test("::/0 covers IPv4 too (its range includes ::ffff:0:0/96); 0.0.0.0/0 covers IPv4 only", () => {
    // RFC 4291 §2.5.5.2 places IPv4 inside the 128-bit space; prefix.ts documents the same.
    const everything = new ClaimIndex([claim("::/0", null, 9)]);
    expect(at(everything, "192.0.2.1")).toBe(9);
    const ipv4 = new ClaimIndex([claim("0.0.0.0/0", null, 8)]);
    expect(at(ipv4, "203.0.113.5")).toBe(8);
    expect(at(ipv4, "2001:db8::5")).toBeNull();
  });

  test("the longest matching prefix wins, whatever order the claims were made in", () => {
    // RFC 4632 §5.1 rule 1: forwarding is on a longest-match basis; claims follow the same rule.
    const rows = [claim("198.51.100.0/24", null, 24), claim("198.51.100.16/28", null, 28), claim("198.51.100.17", null, 32)];
    for (const order of [rows, [...rows].reverse()]) {
      const index = new ClaimIndex(order);
      expect(at(index, "198.51.100.17")).toBe(32);
      expect(at(index, "198.51.100.18")).toBe(28);
      expect(at(index, "198.51.100.200")).toBe(24);
    }
  });

  test("at one prefix length a claim naming the domain beats one for every domain; a longer prefix beats both", () => {
    // Weir's rule (issue 9): longest prefix first, then a claim with a domain over one without.
    const index = new ClaimIndex([claim("192.0.2.0/24", null, 100), claim("192.0.2.0/24", 7, 107), claim("192.0.2.9", null, 109)]);
    expect(at(index, "192.0.2.1", 7)).toBe(107);
    expect(at(index, "192.0.2.1", 8)).toBe(100);
    expect(at(index, "192.0.2.9", 7)).toBe(109);
  });

  test("a claim for one domain ignores the others; a message without a domain (-1) matches only claims of every domain", () => {
    // RFC 7011 §3.1: the Observation Domain ID is an unsigned 32-bit field, so 4294967295 is a domain like any other.
    const index = new ClaimIndex([claim("203.0.113.1", 4_294_967_295, 1), claim("203.0.113.2", null, 2)]);
    expect(at(index, "203.0.113.1", 4_294_967_295)).toBe(1);
    expect(at(index, "203.0.113.1", 0)).toBeNull();
    expect(at(index, "203.0.113.1", -1)).toBeNull();
    expect(at(index, "203.0.113.2", -1)).toBe(2);
  });

  test("answers carry the claim and its tenant; the same claim is the same object (cached)", () => {
    const index = new ClaimIndex([claim("198.51.100.0/24", null, 5, 42, 900)]);
    const first = index.resolve(parseAddress("198.51.100.1"), 3);
    expect(first).toEqual({ claimId: 900, tenantId: 42, collectorId: 5 });
    expect(index.resolve(parseAddress("198.51.100.1"), 3)).toBe(first);
    expect(index.size).toBe(1);
  });

  test("answers stay right after the cache has been filled and started over", () => {
    // 70 000 distinct (address, domain) pairs pass the cache limit of 65 536 at least once.
    const index = new ClaimIndex([claim("198.51.100.0/24", null, 1), claim("203.0.113.0/24", 5, 2)]);
    const bytes = parseAddress("198.51.100.0");
    let wrong = 0;
    for (let i = 0; i < 70_000; i++) {
      bytes[15] = i & 0xff;
      if (index.resolve(bytes, i >> 8)?.collectorId !== 1) wrong++;
    }
    expect(wrong).toBe(0);
    expect(at(index, "203.0.113.9", 5)).toBe(2);
    expect(at(index, "203.0.113.9", 6)).toBeNull();
    expect(at(index, "192.0.2.1", 5)).toBeNull();
  });

  test("a short address or an index without claims answers null instead of throwing", () => {
    expect(new ClaimIndex([]).resolve(parseAddress("192.0.2.1"), 0)).toBeNull();
    expect(new ClaimIndex([claim("::/0", null, 1)]).resolve(new Uint8Array(4), 0)).toBeNull();
  });

  test("agrees with ipaddr.js's CIDR match and the rule above on random claims and addresses", () => {
    // Reference: ipaddr.js (a published npm package) decides containment, RFC 4632 §3.1;
    // the choice among matches is longest prefix, then a named domain, then the oldest claim.
    const v4 = fc.tuple(fc.constantFrom("192.0.2", "198.51.100", "203.0.113"), fc.nat(255)).map(([net, host]) => `${net}.${host}`);
    const v6 = fc.tuple(fc.nat(0xffff), fc.nat(0xffff)).map(([a, b]) => `2001:db8:${a.toString(16)}::${b.toString(16)}`);
    const claimText = fc.oneof(
      fc.tuple(v4, fc.integer({ min: 8, max: 32 })).map(([a, n]) => ({ address: a, length: n })),
      fc.tuple(v6, fc.integer({ min: 16, max: 128 })).map(([a, n]) => ({ address: a, length: n })),
    );
    const domain = fc.option(fc.integer({ min: 0, max: 3 }), { nil: null });
    fc.assert(
      fc.property(fc.array(fc.tuple(claimText, domain), { maxLength: 12 }), fc.array(fc.tuple(fc.oneof(v4, v6), fc.integer({ min: -1, max: 3 })), { minLength: 1, maxLength: 20 }), (specs, probes) => {
        const rows = specs.map(([{ address, length }, d], i) => {
          const network = ipaddr.IPv4.isValid(address) ? ipaddr.IPv4.networkAddressFromCIDR(`${address}/${length}`) : ipaddr.IPv6.networkAddressFromCIDR(`${address}/${length}`);
          return { text: `${network.toString()}/${length}`, row: claim(`${network.toString()}/${length}`, d, i + 1, 1, i + 1) };
        });
        const index = new ClaimIndex(rows.map((r) => r.row));
        for (const [address, d] of probes) {
          const parsed = ipaddr.parse(address);
          const matches = rows.filter(({ text, row }) => {
            const [net, bits] = ipaddr.parseCIDR(text);
            return net.kind() === parsed.kind() && parsed.match([net, bits] as never) && (row.domainId === null || row.domainId === d);
          });
          matches.sort((a, b) => b.row.prefixLength - a.row.prefixLength || Number(b.row.domainId !== null) - Number(a.row.domainId !== null) || a.row.id - b.row.id);
          expect(index.resolve(parseAddress(address), d)?.claimId ?? null).toBe(matches[0]?.row.id ?? null);
        }
      }),
      { seed: 20_070_601, numRuns: 300 },
    );
  });
});

describe("overlaps: could one message match both claims?", () => {
  const scope = (text: string, domainId: number | null) => ({ ...claimRange(text), domainId });

  test("nested prefixes overlap; the two halves of a /24 do not", () => {
    // RFC 4632 §3.1: prefixes either nest or are disjoint; 192.0.2.0/25 ends at .127, /25 at .128 starts.
    expect(overlaps(scope("192.0.2.0/24", null), scope("192.0.2.77", null))).toBe(true);
    expect(overlaps(scope("192.0.2.77", null), scope("192.0.2.0/24", null))).toBe(true);
    expect(overlaps(scope("192.0.2.0/25", null), scope("192.0.2.128/25", null))).toBe(false);
    expect(overlaps(scope("192.0.2.0/24", null), scope("192.0.2.0/24", null))).toBe(true);
  });

  test("two domains of one range do not overlap; a claim of every domain overlaps each", () => {
    expect(overlaps(scope("192.0.2.0/24", 1), scope("192.0.2.0/24", 2))).toBe(false);
    expect(overlaps(scope("192.0.2.0/24", 1), scope("192.0.2.5", 1))).toBe(true);
    expect(overlaps(scope("192.0.2.0/24", null), scope("192.0.2.5", 2))).toBe(true);
  });

  test("an IPv6 /0 overlaps every IPv4 claim; 2001:db8::/32 overlaps no IPv4 claim", () => {
    // RFC 4291 §2.5.5.2: IPv4 addresses lie in ::ffff:0:0/96.
    expect(overlaps(scope("::/0", null), scope("203.0.113.0/24", null))).toBe(true);
    expect(overlaps(scope("2001:db8::/32", null), scope("0.0.0.0/0", null))).toBe(false);
  });
});
