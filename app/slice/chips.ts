/**
 * Checks for what a person types into the Slice form's chip inputs, run on every keystroke:
 * the same rules and words as the estimate API (`app/query/request.ts`), so the form and the
 * API never disagree, and a normal form for what is accepted.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import { formatPrefix, parsePrefix } from "../net/prefix.ts";
import { UNSIGNED32_MAX, type ValueKind } from "../query/fields.ts";

export type ChipCheck = { ok: true; value: string } | { ok: false; message: string };

/**
 * A CIDR prefix, IPv4 or IPv6 (RFC 4632 §3.1, RFC 4291 §2.3); a bare address is a /32 or
 * /128. Accepted text comes back in normal form (RFC 5952 for IPv6); refused text gets
 * `parsePrefix`'s reason, which names the network address when host bits are set.
 *
 * @example checkPrefixChip("198.51.100.7")     // { ok: true, value: "198.51.100.7/32" }
 * @example checkPrefixChip("2001:DB8::/32")    // { ok: true, value: "2001:db8::/32" }
 * @example checkPrefixChip("198.51.100.7/24")  // { ok: false, message: "198.51.100.7/24 has host bits set; did you mean 198.51.100.0/24?" }
 */
export function checkPrefixChip(text: string): ChipCheck {
  const trimmed = text.trim();
  if (trimmed === "") return { ok: false, message: "Type a CIDR prefix such as 198.51.100.0/24 or 2001:db8::/32." };
  try {
    return { ok: true, value: formatPrefix(parsePrefix(trimmed)) };
  } catch (error) {
    return { ok: false, message: (error as Error).message };
  }
}

const PORT_FORM = 'A port is 0–65535, or a range such as "1024-65535".';

/**
 * A transport port or an inclusive range of them (RFC 7012: unsigned16).
 *
 * @example checkPortChip("443")         // { ok: true, value: "443" }
 * @example checkPortChip("1024-65535")  // { ok: true, value: "1024-65535" }
 * @example checkPortChip("9000-80")     // { ok: false, message: 'That range ends before it starts; did you mean "80-9000"?' }
 */
export function checkPortChip(text: string): ChipCheck {
  const trimmed = text.trim();
  const m = /^(\d{1,5})(?:\s*-\s*(\d{1,5}))?$/.exec(trimmed);
  if (!m) return { ok: false, message: PORT_FORM };
  const low = Number(m[1]);
  const high = m[2] === undefined ? low : Number(m[2]);
  if (low > 65535 || high > 65535) return { ok: false, message: `${PORT_FORM} Ports stop at 65535 (RFC 7012 unsigned16).` };
  if (low > high) return { ok: false, message: `That range ends before it starts; did you mean "${high}-${low}"?` };
  return { ok: true, value: low === high ? String(low) : `${low}-${high}` };
}

/** A whole number 0–max or an inclusive range of them, in normal form ("64496" or "64496-64511"). */
function numberRangeChip(text: string, form: string, limit: string, max: number): ChipCheck {
  const trimmed = text.trim();
  if (/^-\s*\d/.test(trimmed)) return { ok: false, message: `${form} Negative numbers are not valid.` };
  const m = /^(\d+)(?:\s*-\s*(\d+))?$/.exec(trimmed);
  if (!m) return { ok: false, message: form };
  const low = Number(m[1]);
  const high = m[2] === undefined ? low : Number(m[2]);
  if (low > max || high > max) return { ok: false, message: `${form} ${limit}` };
  if (low > high) return { ok: false, message: `That range ends before it starts; did you mean "${high}-${low}"?` };
  return { ok: true, value: low === high ? String(low) : `${low}-${high}` };
}

/**
 * An AS number or an inclusive range of them: 4-octet AS numbers run to 4294967295 (RFC 6793).
 *
 * @example checkAsChip("64496")        // { ok: true, value: "64496" }
 * @example checkAsChip("65536 - 65551") // { ok: true, value: "65536-65551" }
 * @example checkAsChip("4294967296")   // { ok: false, message: "An AS number is 0–4294967295, or a range such as \"64496-64511\". AS numbers stop at 4294967295 (4-octet AS numbers, RFC 6793)." }
 */
export function checkAsChip(text: string): ChipCheck {
  return numberRangeChip(
    text,
    'An AS number is 0–4294967295, or a range such as "64496-64511".',
    "AS numbers stop at 4294967295 (4-octet AS numbers, RFC 6793).",
    UNSIGNED32_MAX,
  );
}

/**
 * An interface index (ifIndex, RFC 2863, as the exporter numbers its interfaces) or an
 * inclusive range of them; IPFIX carries them as unsigned32 (RFC 7012).
 *
 * @example checkInterfaceChip("1-48") // { ok: true, value: "1-48" }
 * @example checkInterfaceChip("eth0") // { ok: false, message: "An interface index is a number 0–4294967295 (ifIndex), or a range such as \"1-48\"." }
 */
export function checkInterfaceChip(text: string): ChipCheck {
  return numberRangeChip(
    text,
    'An interface index is a number 0–4294967295 (ifIndex), or a range such as "1-48".',
    "Interface indexes stop at 4294967295 (RFC 7012 unsigned32).",
    UNSIGNED32_MAX,
  );
}

/** The IP protocols the form names (IANA Assigned Internet Protocol Numbers). */
export const COMMON_PROTOCOLS = [
  { number: 6, name: "TCP" },
  { number: 17, name: "UDP" },
  { number: 1, name: "ICMP" },
  { number: 58, name: "ICMPv6" },
] as const;

const BY_NAME = new Map<string, number>([...COMMON_PROTOCOLS.map((p) => [p.name.toLowerCase(), p.number] as const), ["ipv6-icmp", 58]]);

/**
 * An IP protocol: a number 0–255, or one of the common names (case does not matter).
 * The value is always the number, as the API takes it.
 *
 * @example checkProtocolChip("tcp") // { ok: true, value: "6" }
 * @example checkProtocolChip("47")  // { ok: true, value: "47" }
 * @example checkProtocolChip("300") // { ok: false, message: "An IP protocol number is 0–255 (IANA registry); 300 is too large." }
 */
export function checkProtocolChip(text: string): ChipCheck {
  const trimmed = text.trim();
  const named = BY_NAME.get(trimmed.toLowerCase());
  if (named !== undefined) return { ok: true, value: String(named) };
  if (/^\d{1,3}$/.test(trimmed)) {
    const n = Number(trimmed);
    if (n <= 255) return { ok: true, value: String(n) };
    return { ok: false, message: `An IP protocol number is 0–255 (IANA registry); ${n} is too large.` };
  }
  return { ok: false, message: "Type a protocol number 0–255, or TCP, UDP, ICMP or ICMPv6." };
}

/**
 * How a protocol chip reads: its common name with the number, or the number alone.
 *
 * @example protocolLabel("6")  // "TCP (6)"
 * @example protocolLabel("47") // "47"
 */
export function protocolLabel(value: string): string {
  const known = COMMON_PROTOCOLS.find((p) => String(p.number) === value);
  return known ? `${known.name} (${known.number})` : value;
}

/**
 * The chip check of each kind of filter item (fields.ts), so a field's input in the form checks
 * what the API takes. Collectors are picked from a list, not typed.
 */
export const CHIP_CHECKS: Record<Exclude<ValueKind, "collector">, (text: string) => ChipCheck> = {
  prefix: checkPrefixChip,
  port: checkPortChip,
  protocol: checkProtocolChip,
  asn: checkAsChip,
  ifIndex: checkInterfaceChip,
};
