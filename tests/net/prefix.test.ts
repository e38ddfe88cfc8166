import fc from "fast-check";
import ipaddr from "ipaddr.js";
import { describe, expect, test } from "vitest";
import { formatAddress, isIPv4Mapped, parseAddress } from "~/net/address.ts";
import {
  compareAddresses,
  coveringPrefix,
  formatPrefix,
  parsePrefix,
  PrefixError,
  prefixContains,
  prefixRange,
} from "~/net/prefix.ts";

const contains = (prefix: string, address: string) => prefixContains(parsePrefix(prefix), parseAddress(address));
const range = (prefix: string) => {
  const { low, high } = prefixRange(parsePrefix(prefix));
  return [formatAddress(low), formatAddress(high)];
};

describe("RFC 4291 §2.3 IPv6 prefix text", () => {
  const legal = [
    "2001:0DB8:0000:CD30:0000:0000:0000:0000/60", // RFC 4291 §2.3 legal representation
    "2001:0DB8::CD30:0:0:0:0/60", // RFC 4291 §2.3 legal representation
    "2001:0DB8:0:CD30::/60", // RFC 4291 §2.3 legal representation
  ];

  test.each(legal)("%s is the 60-bit prefix 20010DB80000CD3", (text) => {
    const p = parsePrefix(text);
    expect(p.length).toBe(60);
    expect(p.family).toBe(6);
    expect(p).toEqual(parsePrefix(legal[0]));
    expect(formatPrefix(p)).toBe("2001:db8:0:cd30::/60"); // RFC 5952 §4 text of the same prefix
  });

  test("2001:0DB8:0:CD3/60 is not legal: trailing zeros of a piece cannot be dropped", () => {
    // RFC 4291 §2.3: "may drop leading zeros, but not trailing zeros, within any 16-bit chunk".
    expect(() => parsePrefix("2001:0DB8:0:CD3/60")).toThrow(PrefixError);
    expect(() => parsePrefix("2001:0DB8:0:CD3/60")).toThrow("expected 8 groups");
  });

  test.each([
    ["2001:0DB8::CD30/60"], // RFC 4291 §2.3: expands to 2001:0DB8:0000:0000:0000:0000:0000:CD30
    ["2001:0DB8::CD3/60"], // RFC 4291 §2.3: expands to 2001:0DB8:0000:0000:0000:0000:0000:0CD3
  ])("%s is not legal for that prefix: the address has bits past /60", (text) => {
    expect(() => parsePrefix(text)).toThrow(`${text} has host bits set; did you mean 2001:db8::/60?`);
  });

  test("node address with a prefix length is refused, with its subnet suggested", () => {
    // RFC 4291 §2.3 allows 2001:0DB8:0:CD30:123:4567:89AB:CDEF/60 as shorthand for a node address
    // plus its subnet. Weir takes a prefix as a filter, where set host bits are usually a typo,
    // so it asks for the subnet 2001:0DB8:0:CD30::/60 that the RFC names; coveringPrefix gives it.
    expect(() => parsePrefix("2001:0DB8:0:CD30:123:4567:89AB:CDEF/60")).toThrow(
      "has host bits set; did you mean 2001:db8:0:cd30::/60?",
    );
    expect(formatPrefix(coveringPrefix(parseAddress("2001:0DB8:0:CD30:123:4567:89AB:CDEF"), 60))).toBe(
      "2001:db8:0:cd30::/60",
    );
  });

  test("RFC 3849 documentation prefix 2001:db8::/32", () => {
    // RFC 3849 §2 (recalled from memory for the section): 2001:DB8::/32 is reserved for documentation.
    expect(contains("2001:DB8::/32", "2001:db8::1")).toBe(true);
    expect(contains("2001:db8::/32", "2001:db8:ffff:ffff:ffff:ffff:ffff:ffff")).toBe(true);
    expect(range("2001:db8::/32")).toEqual(["2001:db8::", "2001:db8:ffff:ffff:ffff:ffff:ffff:ffff"]);
    // The edges of a prefix, inside the documentation block: its two /33 halves (common practice: a /33 is half of a /32).
    expect(contains("2001:db8::/33", "2001:db8:7fff:ffff:ffff:ffff:ffff:ffff")).toBe(true);
    expect(contains("2001:db8::/33", "2001:db8:8000::")).toBe(false);
    expect(contains("2001:db8:8000::/33", "2001:db8:8000::")).toBe(true);
    expect(contains("2001:db8:8000::/33", "2001:db8:7fff:ffff:ffff:ffff:ffff:ffff")).toBe(false);
  });
});

describe("RFC 4632 §3.1 IPv4 prefix notation", () => {
  test("172.16.0.0/16: mask of 16 one bits, then 16 zero bits", () => {
    // RFC 4632 §3.1 example: legacy "Class B" 172.16.0.0, implied mask 255.255.0.0, is the prefix 172.16.0.0/16
    // (the RFC's own example, quoted: not documentation space; the range follows from the quoted mask).
    const p = parsePrefix("172.16.0.0/16");
    expect(p.family).toBe(4);
    expect(p.length).toBe(96 + 16);
    expect(range("172.16.0.0/16")).toEqual(["172.16.0.0", "172.16.255.255"]);
  });

  test("192.168.99.0/24: 24 one bits, 8 zero bits", () => {
    // RFC 4632 §3.1 example: legacy "Class C" 192.168.99.0 is the prefix 192.168.99.0/24 (quoted from the RFC).
    expect(range("192.168.99.0/24")).toEqual(["192.168.99.0", "192.168.99.255"]);
    expect(formatPrefix(parsePrefix("192.168.99.0/24"))).toBe("192.168.99.0/24");
  });

  test.each([
    ["10.0.0.0/8", "10.0.0.0", "10.255.255.255"], // RFC 1918 §3: 10.0.0.0 - 10.255.255.255 (10/8 prefix)
    ["172.16.0.0/12", "172.16.0.0", "172.31.255.255"], // RFC 1918 §3: 172.16.0.0 - 172.31.255.255 (172.16/12 prefix)
    ["192.168.0.0/16", "192.168.0.0", "192.168.255.255"], // RFC 1918 §3: 192.168.0.0 - 192.168.255.255
  ])("%s spans %s to %s (the RFC 1918 blocks as the RFC writes them, quoted)", (prefix, low, high) => {
    expect(range(prefix)).toEqual([low, high]);
    expect(contains(prefix, low)).toBe(true);
    expect(contains(prefix, high)).toBe(true);
  });

  test.each([
    // RFC 5737 §3 TEST-NET-1, -2, -3; outside each, an address of another of them.
    ["192.0.2.0/24", "192.0.2.255", "198.51.100.0"],
    ["198.51.100.0/24", "198.51.100.0", "203.0.113.255"],
    ["203.0.113.0/24", "203.0.113.128", "192.0.2.0"],
    // The edges of a prefix on either side, inside documentation space (common practice: a /25 is half of a /24, a /26 a quarter).
    ["198.51.100.0/25", "198.51.100.127", "198.51.100.128"],
    ["198.51.100.128/25", "198.51.100.128", "198.51.100.127"],
    ["203.0.113.64/26", "203.0.113.64", "203.0.113.63"],
    ["203.0.113.64/26", "203.0.113.127", "203.0.113.128"],
  ])("%s contains %s, not %s", (prefix, inside, outside) => {
    expect(contains(prefix, inside)).toBe(true);
    expect(contains(prefix, outside)).toBe(false);
  });

  test("host bits set: the error suggests the network address", () => {
    // Weir's rule from its design brief; the network address is the address with host bits cleared (RFC 4632 §3.1).
    expect(() => parsePrefix("198.51.100.7/24")).toThrow("198.51.100.7/24 has host bits set; did you mean 198.51.100.0/24?");
    expect(() => parsePrefix("192.0.2.1/31")).toThrow("did you mean 192.0.2.0/31?");
  });
});

describe("parsePrefix details", () => {
  test("a bare address is a /32 or a /128", () => {
    // Common practice: a host route is a full-length prefix.
    expect(parsePrefix("192.0.2.1")).toEqual({ bytes: parseAddress("192.0.2.1"), length: 128, family: 4 });
    expect(formatPrefix(parsePrefix("192.0.2.1"))).toBe("192.0.2.1/32");
    expect(parsePrefix("2001:db8::1")).toEqual({ bytes: parseAddress("2001:db8::1"), length: 128, family: 6 });
    expect(formatPrefix(parsePrefix("2001:db8::1"))).toBe("2001:db8::1/128");
  });

  test("IPv6 text counts bits on the 128-bit scale, also for the IPv4-mapped space", () => {
    // RFC 4291 §2.3 (length in bits of the 128-bit address) and §2.5.5.2 (::ffff:0:0/96 holds IPv4).
    expect(parsePrefix("::ffff:192.0.2.0/120")).toEqual(parsePrefix("192.0.2.0/24"));
    expect(formatPrefix(parsePrefix("::ffff:192.0.2.0/120"))).toBe("192.0.2.0/24");
    expect(parsePrefix("::ffff:0:0/96")).toEqual(parsePrefix("0.0.0.0/0"));
  });

  test("0.0.0.0/0 covers IPv4 only; ::/0 covers everything, IPv4-mapped included", () => {
    // RFC 4291 §2.5.5.2: IPv4 is stored inside ::ffff:0:0/96, which ::/0 spans.
    expect(contains("0.0.0.0/0", "203.0.113.9")).toBe(true);
    expect(contains("0.0.0.0/0", "2001:db8::1")).toBe(false);
    expect(contains("::/0", "2001:db8::1")).toBe(true);
    expect(contains("::/0", "203.0.113.9")).toBe(true);
    expect(range("::/0")).toEqual(["::", "ffff:ffff:ffff:ffff:ffff:ffff:ffff:ffff"]);
    expect(range("0.0.0.0/0")).toEqual(["0.0.0.0", "255.255.255.255"]);
  });

  test.each([
    ["192.0.2.0/33", "from 0 to 32"], // RFC 4632 §3.1: an IPv4 prefix length is 0–32
    ["2001:db8::/129", "from 0 to 128"], // RFC 4291 §2.3: at most 128 bits
    ["192.0.2.0/", "empty"], // common practice
    ["192.0.2.0/024", "leading zeros"], // common practice, as for octets
    ["192.0.2.0/-1", "decimal number"], // RFC 4291 §2.3: prefix-length is a decimal value
    ["192.0.2.0/24/1", "decimal number"], // common practice: one slash only
    ["192.0.2.0 /24", "whitespace"], // common practice: no trimming
    ["/24", "empty"], // common practice: an address is required
    ["192.0.2/24", "four octets"], // common practice: no short forms such as 10/8
    ["2001:db8::%eth0/64", "zone"], // RFC 4007 zone ids are not part of a prefix (recalled from memory)
  ])("rejects %j (%s)", (text, reason) => {
    expect(() => parsePrefix(text)).toThrow(PrefixError);
    expect(() => parsePrefix(text)).toThrow(reason);
  });

  test("coveringPrefix checks the length against the address family", () => {
    // RFC 4632 §3.1 (0–32 for IPv4) and RFC 4291 §2.3 (0–128 for IPv6).
    expect(() => coveringPrefix(parseAddress("192.0.2.1"), 33)).toThrow("from 0 to 32");
    expect(() => coveringPrefix(parseAddress("2001:db8::1"), 129)).toThrow("from 0 to 128");
    expect(() => coveringPrefix(parseAddress("2001:db8::1"), -1)).toThrow(PrefixError);
    expect(() => coveringPrefix(parseAddress("2001:db8::1"), 1.5)).toThrow(PrefixError);
    expect(formatPrefix(coveringPrefix(parseAddress("198.51.100.77"), 24))).toBe("198.51.100.0/24");
    expect(formatPrefix(coveringPrefix(parseAddress("198.51.100.77"), 0))).toBe("0.0.0.0/0");
    expect(formatPrefix(coveringPrefix(parseAddress("2001:db8:1:2::5"), 48))).toBe("2001:db8:1::/48");
    expect(formatPrefix(coveringPrefix(parseAddress("2001:db8:1:2::5"), 0))).toBe("::/0");
  });

  test("compareAddresses is memcmp order: IPv4 sorts inside ::ffff:0:0/96", () => {
    // RFC 4291 §2.5.5.2 layout; memcmp order is what SQLite uses for BLOBs (recalled from memory).
    // The format's own ends (::, 0.0.0.0, 255.255.255.255, ::1) and documentation addresses (RFC 5737, RFC 3849) between them.
    const sorted = ["::", "::1", "0.0.0.0", "192.0.2.1", "192.0.2.2", "255.255.255.255", "2001:db8::", "2001:db8:ffff:ffff:ffff:ffff:ffff:ffff"];
    const shuffled = [...sorted].reverse().map(parseAddress);
    shuffled.sort(compareAddresses);
    expect(shuffled.map(formatAddress)).toEqual(sorted);
    expect(compareAddresses(parseAddress("192.0.2.1"), parseAddress("192.0.2.1"))).toBe(0);
    expect(compareAddresses(Uint8Array.of(1, 2), Uint8Array.of(1, 2, 0))).toBeLessThan(0);
  });
});

// ---- properties, cross-checked with ipaddr.js 2.5.0 ----------------------------------------

const ipv4 = fc.tuple(fc.nat(255), fc.nat(255), fc.nat(255), fc.nat(255)).map((o) => o.join("."));
const ipv6Bytes = fc
  .uint8Array({ minLength: 16, maxLength: 16 })
  .filter((b) => !isIPv4Mapped(b)); // IPv4-mapped values are IPv4 in Weir; the IPv4 generator covers them
const ipv6 = ipv6Bytes.map((b) => (ipaddr.fromByteArray([...b]) as ipaddr.IPv6).toRFC5952String());

/** An address that shares the first `keep` bits of `base` and is random after them. */
function near(base: Uint8Array, keep: number, noise: Uint8Array): Uint8Array {
  const out = base.slice();
  for (let bit = keep; bit < 128; bit++) {
    const i = bit >> 3;
    const m = 0x80 >> (bit & 7);
    out[i] = (out[i] & ~m) | (noise[i] & m);
  }
  return out;
}

const noise = fc.uint8Array({ minLength: 16, maxLength: 16 });

describe("properties against ipaddr.js", () => {
  test("IPv4: containment matches ipaddr.js match(), range bounds match iff contained", () => {
    fc.assert(
      fc.property(ipv4, fc.nat(32), fc.nat(32), noise, (baseText, n, keep, bits) => {
        const p = coveringPrefix(parseAddress(baseText), n);
        // Addresses near the prefix, so both answers occur often.
        const address = near(p.bytes, 96 + Math.min(32, keep), bits);
        const text = formatAddress(address);
        const network = formatAddress(p.bytes);
        // Reference library: ipaddr.js IPv4#match(network, bits) (RFC 4632 §3.1 prefix match).
        const expected = ipaddr.IPv4.parse(text).match(ipaddr.IPv4.parse(network), n);
        expect(prefixContains(p, address)).toBe(expected);
        const { low, high } = prefixRange(p);
        const inRange = compareAddresses(low, address) <= 0 && compareAddresses(address, high) <= 0;
        expect(inRange).toBe(expected);
        // Reference library: ipaddr.js IPv4.broadcastAddressFromCIDR for the top of the range.
        expect(formatAddress(high)).toBe(ipaddr.IPv4.broadcastAddressFromCIDR(`${network}/${n}`).toString());
      }),
      { numRuns: 3000 },
    );
  });

  test("IPv6: containment matches ipaddr.js match(), range bounds match iff contained", () => {
    fc.assert(
      fc.property(ipv6Bytes, fc.nat(128), fc.nat(128), noise, (base, n, keep, bits) => {
        const p = coveringPrefix(base, n);
        const address = near(p.bytes, keep, bits);
        const reference = ipaddr.fromByteArray([...address]) as ipaddr.IPv6;
        const network = ipaddr.fromByteArray([...p.bytes]) as ipaddr.IPv6;
        // Reference library: ipaddr.js IPv6#match(network, bits) (RFC 4291 §2.3 prefix).
        const expected = reference.match(network, n);
        expect(prefixContains(p, address)).toBe(expected);
        const { low, high } = prefixRange(p);
        const inRange = compareAddresses(low, address) <= 0 && compareAddresses(address, high) <= 0;
        expect(inRange).toBe(expected);
        expect([...high]).toEqual(ipaddr.IPv6.broadcastAddressFromCIDR(`${network.toRFC5952String()}/${n}`).toByteArray());
      }),
      { numRuns: 3000 },
    );
  });

  test("coveringPrefix contains its address and equals ipaddr.js networkAddressFromCIDR", () => {
    fc.assert(
      fc.property(ipv4, fc.nat(32), (text, n) => {
        const p = coveringPrefix(parseAddress(text), n);
        expect(prefixContains(p, parseAddress(text))).toBe(true); // RFC 4632 §3.1: an address is in its own prefix
        expect(formatPrefix(p)).toBe(`${ipaddr.IPv4.networkAddressFromCIDR(`${text}/${n}`).toString()}/${n}`);
      }),
      { numRuns: 2000 },
    );
    fc.assert(
      fc.property(ipv6, fc.nat(128), (text, n) => {
        const p = coveringPrefix(parseAddress(text), n);
        expect(prefixContains(p, parseAddress(text))).toBe(true); // RFC 4291 §2.3
        const network = ipaddr.IPv6.networkAddressFromCIDR(`${text}/${n}`);
        expect([...p.bytes]).toEqual(network.toByteArray());
      }),
      { numRuns: 2000 },
    );
  });

  test("parsePrefix(formatPrefix(p)) === p", () => {
    const anyAddress = fc.oneof(ipv4, ipv6);
    fc.assert(
      fc.property(anyAddress, fc.nat(128), (text, n) => {
        const bytes = parseAddress(text);
        const p = coveringPrefix(bytes, isIPv4Mapped(bytes) ? n % 33 : n);
        expect(parsePrefix(formatPrefix(p))).toEqual(p); // round trip of RFC 4632 / RFC 4291 §2.3 text
      }),
      { numRuns: 3000 },
    );
  });

  test("ipaddr.js parseCIDR agrees on every prefix Weir prints", () => {
    fc.assert(
      fc.property(ipv6, fc.nat(128), (text, n) => {
        const printed = formatPrefix(coveringPrefix(parseAddress(text), n));
        // Reference library: ipaddr.js IPv6.parseCIDR reads back the same network and length.
        const [address, bits] = ipaddr.IPv6.parseCIDR(printed);
        expect(bits).toBe(n);
        expect(address.toByteArray()).toEqual([...parsePrefix(printed).bytes]);
      }),
      { numRuns: 2000 },
    );
  });
});
