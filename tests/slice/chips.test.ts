import fc from "fast-check";
import { describe, expect, test } from "vitest";
import { FILTER_FIELDS } from "~/query/fields";
import { parseEstimateSearchParams } from "~/query/request";
import { CHIP_CHECKS, checkAsChip, checkInterfaceChip, checkPortChip, checkPrefixChip, checkProtocolChip, protocolLabel } from "~/slice/chips";

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

describe("AS number and interface chips (RFC 6793, RFC 2863 / RFC 7012 unsigned32)", () => {
  test("accept numbers and ranges up to 2^32 − 1, in normal form", () => {
    // Documentation AS numbers (RFC 5398), the second block only representable in 4 octets.
    expect(checkAsChip("64496")).toEqual({ ok: true, value: "64496" });
    expect(checkAsChip(" 65536 - 65551 ")).toEqual({ ok: true, value: "65536-65551" });
    expect(checkAsChip("4294967295")).toEqual({ ok: true, value: "4294967295" });
    expect(checkInterfaceChip("1-48")).toEqual({ ok: true, value: "1-48" });
    expect(checkInterfaceChip("007")).toEqual({ ok: true, value: "7" });
  });

  test("refuse 2^32, negatives, backwards ranges and words, with the reason", () => {
    expect(checkAsChip("4294967296")).toEqual({
      ok: false,
      message: 'An AS number is 0–4294967295, or a range such as "64496-64511". AS numbers stop at 4294967295 (4-octet AS numbers, RFC 6793).',
    });
    expect(checkAsChip("-1")).toEqual({ ok: false, message: 'An AS number is 0–4294967295, or a range such as "64496-64511". Negative numbers are not valid.' });
    expect(checkAsChip("64511-64496")).toEqual({ ok: false, message: 'That range ends before it starts; did you mean "64496-64511"?' });
    expect(checkAsChip("AS64496").ok).toBe(false);
    expect(checkInterfaceChip("ge-0/0/1")).toEqual({ ok: false, message: 'An interface index is a number 0–4294967295 (ifIndex), or a range such as "1-48".' });
  });
});

describe("every field's chip agrees with the estimate API (fields.ts)", () => {
  // Text a person might type: numbers, ranges, spaces, signs, words, addresses, huge numbers.
  const typed = fc.oneof(
    fc.integer({ min: -5, max: 70000 }).map(String),
    fc.bigInt({ min: 0n, max: 2n ** 33n }).map(String),
    fc.tuple(fc.integer({ min: 0, max: 70000 }), fc.integer({ min: 0, max: 70000 }), fc.constantFrom("-", " - ")).map(([a, b, dash]) => `${a}${dash}${b}`),
    fc.constantFrom("tcp", "AS64496", "198.51.100.0/24", "2001:db8::/32", "198.51.100.7/24", "", "1-", "-", "eth0", "4294967295", "4294967296", "65535", "65536"),
    fc.string({ maxLength: 8 }),
  );

  test("what a chip accepts the API accepts, and reads as the typed text (fast-check)", () => {
    for (const field of FILTER_FIELDS) {
      if (field.value === "collector") continue;
      const check = CHIP_CHECKS[field.value];
      fc.assert(
        fc.property(typed, (text) => {
          const chip = check(text);
          if (!chip.ok) return;
          // As the page sends it: the query string of GET /api/v1/estimate.
          const ask = (value: string) => parseEstimateSearchParams(new URLSearchParams({ from: "0", to: "1", [field.name]: value }));
          const parsed = ask(chip.value);
          if (!parsed.ok) throw new Error(`${field.name}: chip ${JSON.stringify(text)} → ${chip.value}, API: ${parsed.message}`);
          // The chip's value asks what the text asked, where the API takes the text as typed (it takes no protocol names).
          const direct = ask(text.trim());
          if (direct.ok && field.value !== "protocol") expect(direct.query.where).toEqual(parsed.query.where);
        }),
        { numRuns: 300 },
      );
    }
  });
});
