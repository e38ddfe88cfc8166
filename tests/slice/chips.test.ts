import { describe, expect, test } from "vitest";
import { checkPortChip, checkPrefixChip, checkProtocolChip, protocolLabel } from "~/slice/chips";

describe("CIDR chips, checked as typed (RFC 4632 §3.1, RFC 4291 §2.3)", () => {
  test("accepts IPv4 and IPv6 prefixes and writes them in normal form", () => {
    expect(checkPrefixChip("198.51.100.0/24")).toEqual({ ok: true, value: "198.51.100.0/24" });
    expect(checkPrefixChip(" 198.51.100.7 ")).toEqual({ ok: true, value: "198.51.100.7/32" }); // a bare address is a host route
    expect(checkPrefixChip("2001:DB8:0:0::/32")).toEqual({ ok: true, value: "2001:db8::/32" }); // RFC 5952 §4.3 lower case, §4.2 "::"
    expect(checkPrefixChip("2001:db8::1")).toEqual({ ok: true, value: "2001:db8::1/128" });
  });

  test("suggests the network address when host bits are set", () => {
    expect(checkPrefixChip("198.51.100.7/24")).toEqual({ ok: false, message: "198.51.100.7/24 has host bits set; did you mean 198.51.100.0/24?" });
    expect(checkPrefixChip("2001:db8::1/32")).toEqual({ ok: false, message: "2001:db8::1/32 has host bits set; did you mean 2001:db8::/32?" });
  });

  test("says what is wrong with a length or an address", () => {
    const long = checkPrefixChip("198.51.100.0/33");
    expect(long.ok).toBe(false);
    if (!long.ok) expect(long.message).toMatch(/prefix length must be from 0 to 32/);
    const v6 = checkPrefixChip("2001:db8::/129");
    if (!v6.ok) expect(v6.message).toMatch(/from 0 to 128/);
    expect(v6.ok).toBe(false);
    const partial = checkPrefixChip("198.51.100");
    expect(partial.ok).toBe(false);
    if (!partial.ok) expect(partial.message).toMatch(/^invalid prefix "198\.51\.100"/);
    expect(checkPrefixChip("")).toEqual({ ok: false, message: "Type a CIDR prefix such as 198.51.100.0/24 or 2001:db8::/32." });
  });
});

describe("port chips (RFC 7012 unsigned16)", () => {
  test("accepts ports and ranges, normal form without leading zeros", () => {
    expect(checkPortChip("443")).toEqual({ ok: true, value: "443" });
    expect(checkPortChip("1024-65535")).toEqual({ ok: true, value: "1024-65535" });
    expect(checkPortChip("0080 - 0080")).toEqual({ ok: true, value: "80" });
  });

  test("refuses ports past 65535, backwards ranges and words, with the fix", () => {
    expect(checkPortChip("70000")).toEqual({ ok: false, message: 'A port is 0–65535, or a range such as "1024-65535". Ports stop at 65535 (RFC 7012 unsigned16).' });
    expect(checkPortChip("9000-80")).toEqual({ ok: false, message: 'That range ends before it starts; did you mean "80-9000"?' });
    expect(checkPortChip("https")).toEqual({ ok: false, message: 'A port is 0–65535, or a range such as "1024-65535".' });
  });
});

describe("protocol chips (IANA Assigned Internet Protocol Numbers)", () => {
  test("takes the common names and any number 0–255, and keeps the number", () => {
    expect(checkProtocolChip("TCP")).toEqual({ ok: true, value: "6" });
    expect(checkProtocolChip("udp")).toEqual({ ok: true, value: "17" });
    expect(checkProtocolChip("icmp")).toEqual({ ok: true, value: "1" });
    expect(checkProtocolChip("ICMPv6")).toEqual({ ok: true, value: "58" });
    expect(checkProtocolChip("47")).toEqual({ ok: true, value: "47" });
    expect(protocolLabel("58")).toBe("ICMPv6 (58)");
    expect(protocolLabel("47")).toBe("47");
  });

  test("refuses numbers past 255 and unknown names", () => {
    expect(checkProtocolChip("256")).toEqual({ ok: false, message: "An IP protocol number is 0–255 (IANA registry); 256 is too large." });
    expect(checkProtocolChip("sctp")).toEqual({ ok: false, message: "Type a protocol number 0–255, or TCP, UDP, ICMP or ICMPv6." });
  });
});
