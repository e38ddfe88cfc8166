/**
 * CIDR prefixes over 16-byte addresses.
 *
 * Addresses are 16 bytes with IPv4 stored IPv4-mapped (`address.ts`), so an IPv4 prefix
 * a.b.c.d/n is the 16-byte prefix ::ffff:a.b.c.d/(96+n) and every prefix of either family
 * is one contiguous range of byte strings in memcmp order. That is what lets a query turn
 * "source in 198.51.100.0/24" into `src BETWEEN low AND high` on a BLOB column.
 *
 * Note that `::/0` therefore covers every address, IPv4 included; `0.0.0.0/0` covers IPv4 only.
 * Pure module: no I/O, usable in the browser and on the server.
 */
import { AddressError, formatAddress, isIPv4Mapped, parseAddress } from "./address.ts";

/** A CIDR prefix: its network address (host bits zero) and its length on the 16-byte scale. */
export type Prefix = {
  /** Network address, 16 bytes, host bits zero. */
  bytes: Uint8Array;
  /** Prefix length in bits on the 16-byte scale, 0..128; an IPv4 /n has length 96 + n. */
  length: number;
  /** 4 when the prefix lies inside the IPv4-mapped space ::ffff:0:0/96, else 6. */
  family: 4 | 6;
};

/** Thrown for text that is not a valid prefix, or a length out of range; the message says why. */
export class PrefixError extends Error {
  override name = "PrefixError";
}

/** Length of the IPv4-mapped head ::ffff:0:0/96 in bits (RFC 4291 §2.5.5.2). */
const MAPPED_BITS = 96;

/** Copies `bytes` with every bit after the first `length` bits cleared. */
function masked(bytes: Uint8Array, length: number): Uint8Array {
  const out = new Uint8Array(16);
  const whole = length >> 3;
  for (let i = 0; i < whole; i++) out[i] = bytes[i];
  const rest = length & 7;
  if (rest > 0) out[whole] = bytes[whole] & (0xff << (8 - rest));
  return out;
}

function sameBytes(a: Uint8Array, b: Uint8Array): boolean {
  for (let i = 0; i < 16; i++) if (a[i] !== b[i]) return false;
  return true;
}

function parseLength(text: string, whole: string, max: number): number {
  if (text.length === 0) throw new PrefixError(`invalid prefix ${JSON.stringify(whole)}: the prefix length after "/" is empty`);
  let value = 0;
  for (let i = 0; i < text.length; i++) {
    const c = text.charCodeAt(i);
    if (c < 48 || c > 57 || (i === 0 && c === 48 && text.length > 1) || i >= 3) {
      throw new PrefixError(
        `invalid prefix ${JSON.stringify(whole)}: the prefix length must be a decimal number from 0 to ${max} without leading zeros`,
      );
    }
    value = value * 10 + (c - 48);
  }
  if (value > max) {
    throw new PrefixError(`invalid prefix ${JSON.stringify(whole)}: the prefix length must be from 0 to ${max}`);
  }
  return value;
}

/**
 * Parses CIDR prefix text (RFC 4632 §3.1 for IPv4, RFC 4291 §2.3 for IPv6): `a.b.c.d/n` with
 * n in 0..32 (stored as length 96+n), IPv6 `x::/n` with n in 0..128, or a bare address,
 * which is a /32 or /128. The address must be the network address: text with host bits
 * set is refused with the network address suggested. Throws `PrefixError`.
 *
 * @example parsePrefix("198.51.100.0/24") // { bytes: ::ffff:198.51.100.0, length: 120, family: 4 }
 * @example parsePrefix("2001:db8::/32")    // { bytes: 2001:db8::, length: 32, family: 6 }
 * @example parsePrefix("198.51.100.7/24")  // throws "198.51.100.7/24 has host bits set; did you mean 198.51.100.0/24?"
 */
export function parsePrefix(text: string): Prefix {
  if (typeof text !== "string") throw new PrefixError(`a prefix must be a string, got ${typeof text}`);
  const slash = text.indexOf("/");
  const addressText = slash < 0 ? text : text.slice(0, slash);
  const textIsIPv6 = addressText.indexOf(":") >= 0;
  let address: Uint8Array;
  try {
    address = parseAddress(addressText);
  } catch (error) {
    if (error instanceof AddressError) throw new PrefixError(`invalid prefix ${JSON.stringify(text)}: ${error.message}`);
    throw error;
  }
  // IPv6 text counts bits on the 128-bit scale, even for ::ffff:a.b.c.d (RFC 4291 §2.3);
  // dotted IPv4 counts them on the 32-bit scale (RFC 4632 §3.1).
  const offset = textIsIPv6 ? 0 : MAPPED_BITS;
  const ownLength = slash < 0 ? 128 - offset : parseLength(text.slice(slash + 1), text, 128 - offset);
  const length = ownLength + offset;
  const network = masked(address, length);
  // A prefix inside ::ffff:0:0/96 is IPv4 however it was written, so equal prefixes compare equal.
  const family = length >= MAPPED_BITS && isIPv4Mapped(network) ? 4 : 6;
  const prefix: Prefix = { bytes: network, length, family };
  if (!sameBytes(network, address)) {
    throw new PrefixError(`${text} has host bits set; did you mean ${formatPrefix(prefix)}?`);
  }
  return prefix;
}

/**
 * Formats a prefix as CIDR text: IPv4 prefixes as `a.b.c.d/n` with n on the 32-bit scale
 * (RFC 4632 §3.1), IPv6 prefixes as RFC 5952 canonical text with n on the 128-bit scale
 * (RFC 4291 §2.3).
 *
 * @example formatPrefix(parsePrefix("198.51.100.0/24"))                        // "198.51.100.0/24"
 * @example formatPrefix(parsePrefix("2001:0DB8:0000:CD30:0000:0000:0000:0000/60")) // "2001:db8:0:cd30::/60"
 */
export function formatPrefix(p: Prefix): string {
  if (p.family === 4) {
    if (p.length < MAPPED_BITS) throw new PrefixError(`an IPv4 prefix has length 96..128 on the 16-byte scale, got ${p.length}`);
    return `${formatAddress(p.bytes)}/${p.length - MAPPED_BITS}`;
  }
  return `${formatAddress(p.bytes)}/${p.length}`;
}

/**
 * True when the first `p.length` bits of `address` (16 bytes) equal those of the prefix
 * (RFC 4632 §3.1 prefix match). IPv4 addresses are IPv4-mapped, so an IPv4 prefix never
 * contains an IPv6 address and vice versa, except that short IPv6 prefixes such as `::/0`
 * also span the mapped space.
 *
 * @example prefixContains(parsePrefix("198.51.100.0/24"), parseAddress("198.51.100.7")) // true
 * @example prefixContains(parsePrefix("198.51.100.0/24"), parseAddress("203.0.113.7"))  // false
 */
export function prefixContains(p: Prefix, address: Uint8Array): boolean {
  const whole = p.length >> 3;
  for (let i = 0; i < whole; i++) if (address[i] !== p.bytes[i]) return false;
  const rest = p.length & 7;
  if (rest === 0) return true;
  const mask = 0xff & (0xff << (8 - rest));
  return (address[whole] & mask) === p.bytes[whole];
}

/**
 * The inclusive range of 16-byte addresses a prefix covers: `low` is the network address
 * (host bits 0), `high` has every host bit 1 (RFC 4632 §3.1). In memcmp order an address is
 * in the prefix exactly when low ≤ address ≤ high, which suits BLOB range queries in SQL.
 *
 * @example prefixRange(parsePrefix("203.0.113.0/24")) // { low: ::ffff:203.0.113.0, high: ::ffff:203.0.113.255 }
 */
export function prefixRange(p: Prefix): { low: Uint8Array; high: Uint8Array } {
  const low = p.bytes.slice();
  const high = p.bytes.slice();
  const whole = p.length >> 3;
  const rest = p.length & 7;
  let i = whole;
  if (rest > 0) {
    high[i] |= 0xff >> rest;
    i++;
  }
  for (; i < 16; i++) high[i] = 0xff;
  return { low, high };
}

/**
 * The prefix of the given length that contains `address`: host bits cleared (RFC 4632 §3.1).
 * `length` is on the address's own scale: 0..32 for an IPv4-mapped address, 0..128 otherwise.
 * Used to group flows by source /24, /48 and the like. Throws `PrefixError` for a length
 * out of range.
 *
 * @example formatPrefix(coveringPrefix(parseAddress("198.51.100.77"), 24))  // "198.51.100.0/24"
 * @example formatPrefix(coveringPrefix(parseAddress("2001:db8:1:2::5"), 48)) // "2001:db8:1::/48"
 */
export function coveringPrefix(address: Uint8Array, length: number): Prefix {
  if (!(address instanceof Uint8Array) || address.length !== 16) {
    throw new PrefixError("an address is 16 bytes (IPv4 stored IPv4-mapped)");
  }
  const ipv4 = isIPv4Mapped(address);
  const max = ipv4 ? 32 : 128;
  if (!Number.isInteger(length) || length < 0 || length > max) {
    throw new PrefixError(`a prefix length for an ${ipv4 ? "IPv4" : "IPv6"} address is an integer from 0 to ${max}, got ${length}`);
  }
  const full = ipv4 ? length + MAPPED_BITS : length;
  const bytes = masked(address, full);
  // Masking keeps the first 12 bytes when full ≥ 96, so a non-mapped address stays family 6.
  return { bytes, length: full, family: ipv4 ? 4 : 6 };
}

/**
 * Compares two addresses byte by byte, like C `memcmp` (and SQLite BLOB ordering): negative
 * when a sorts first, 0 when equal, positive when b sorts first. With IPv4 stored mapped,
 * this orders every IPv4 address inside ::ffff:0:0/96 and numerically within it.
 *
 * @example compareAddresses(parseAddress("192.0.2.1"), parseAddress("192.0.2.2")) // negative
 * @example compareAddresses(parseAddress("2001:db8::"), parseAddress("192.0.2.1")) // positive
 */
export function compareAddresses(a: Uint8Array, b: Uint8Array): number {
  const n = Math.min(a.length, b.length);
  for (let i = 0; i < n; i++) {
    const d = a[i] - b[i];
    if (d !== 0) return d;
  }
  return a.length - b.length;
}
