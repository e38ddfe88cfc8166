/**
 * IP addresses as 16-byte values.
 *
 * Every address, IPv4 or IPv6, is held as a `Uint8Array` of 16 bytes in network order.
 * IPv4 is stored IPv4-mapped, `::ffff:a.b.c.d` (RFC 4291 §2.5.5.2), so that one byte
 * order covers both families and a CIDR prefix of either family is one contiguous byte
 * range (see `prefix.ts`).
 *
 * Parsing is a hand-written character loop: ingest parses every address of every flow
 * record, and a loop without regular expressions or intermediate strings keeps that cheap.
 * Pure module: no I/O, usable in the browser and on the server.
 */

/** Thrown for text that is not an address of the expected family; the message says why. */
export class AddressError extends Error {
  override name = "AddressError";
}

const CHAR_0 = 48;
const CHAR_9 = 57;
const CHAR_DOT = 46;
const CHAR_COLON = 58;

// Reasons are string constants so the failure path builds one message and the success
// path allocates nothing but the result.
type Reason = string | null;

// Scratch space for the eight 16-bit groups of an IPv6 address. Parsing is synchronous,
// so one module-level buffer is never shared by two calls at once.
const groups = new Uint16Array(8);

/**
 * Reads a strict dotted-quad IPv4 address from `text[start..end)` into `out[offset..offset+4)`.
 * Four decimal octets 0–255; leading zeros are refused, as common practice, because some
 * parsers read `010` as octal 8.
 */
function readIPv4(text: string, start: number, end: number, out: Uint8Array, offset: number): Reason {
  let octet = 0;
  let value = 0;
  let digits = 0;
  let leadingZero = false;
  for (let i = start; i <= end; i++) {
    const c = i < end ? text.charCodeAt(i) : CHAR_DOT; // a virtual dot closes the last octet
    if (c >= CHAR_0 && c <= CHAR_9) {
      if (digits === 0) leadingZero = c === CHAR_0;
      else if (leadingZero) return "leading zeros are not allowed in an IPv4 octet (they read as octal in some tools)";
      value = value * 10 + (c - CHAR_0);
      digits++;
      if (value > 255) return "an IPv4 octet is over 255";
    } else if (c === CHAR_DOT) {
      if (octet === 4) return "an IPv4 address has exactly four octets";
      if (digits === 0) return "an IPv4 octet is empty";
      out[offset + octet] = value;
      octet++;
      value = 0;
      digits = 0;
    } else {
      return describeCharacter(c);
    }
  }
  return octet === 4 ? null : "an IPv4 address has exactly four octets";
}

function hexValue(c: number): number {
  if (c >= CHAR_0 && c <= CHAR_9) return c - CHAR_0;
  const lower = c | 0x20; // ASCII letters: fold case
  if (lower >= 97 && lower <= 102) return lower - 87;
  return -1;
}

function describeCharacter(c: number): string {
  if (c === 37) return "zone identifiers (%...) are not accepted";
  if (c === 91 || c === 93) return "brackets are not part of an address; send the address alone";
  if (c === 47) return "a prefix length is not part of an address";
  if (c === 32 || c === 9 || c === 10 || c === 13) return "whitespace is not allowed";
  return `unexpected character ${JSON.stringify(String.fromCharCode(c))}`;
}

/**
 * Reads any RFC 4291 §2.2 text form of an IPv6 address into 16 bytes: the full form, `::`
 * compression, and a trailing dotted IPv4 address, hex digits in either case.
 */
function readIPv6(text: string, out: Uint8Array): Reason {
  const n = text.length;
  if (n === 0) return "the text is empty";
  let i = 0;
  let count = 0; // groups read so far
  let gapAt = -1; // group index where "::" stands, or -1
  if (text.charCodeAt(0) === CHAR_COLON) {
    if (n < 2 || text.charCodeAt(1) !== CHAR_COLON) return "an address cannot start with a single colon";
    gapAt = 0;
    i = 2;
  }
  while (i < n) {
    const start = i;
    let value = 0;
    let h = 0;
    while (i < n && (h = hexValue(text.charCodeAt(i))) >= 0) {
      value = value * 16 + h;
      i++;
    }
    const digits = i - start;
    if (i < n && text.charCodeAt(i) === CHAR_DOT) {
      // Trailing dotted IPv4 (RFC 4291 §2.2 form 3): it fills the last two groups.
      if (count > 6) return "too many groups before the dotted IPv4 part";
      const reason = readIPv4(text, start, n, out, 12);
      if (reason !== null) return reason;
      groups[count++] = (out[12] << 8) | out[13];
      groups[count++] = (out[14] << 8) | out[15];
      i = n;
      break;
    }
    if (digits === 0) {
      if (i < n && text.charCodeAt(i) !== CHAR_COLON) return describeCharacter(text.charCodeAt(i));
      return "a group is empty";
    }
    if (digits > 4) return "a group has more than 4 hex digits";
    if (count === 8) return "more than 8 groups";
    groups[count++] = value;
    if (i === n) break;
    const c = text.charCodeAt(i);
    if (c !== CHAR_COLON) return describeCharacter(c);
    i++;
    if (i < n && text.charCodeAt(i) === CHAR_COLON) {
      if (gapAt >= 0) return '"::" may appear only once';
      gapAt = count;
      i++;
    } else if (i === n) {
      return "an address cannot end with a single colon";
    }
  }
  if (gapAt < 0) {
    if (count !== 8) return `expected 8 groups, found ${count}`;
  } else if (count > 7) {
    // "::" stands for one or more zero groups (RFC 4291 §2.2), so at most 7 are written.
    return '"::" must stand for at least one zero group';
  }
  const gap = gapAt < 0 ? 0 : 8 - count;
  let g = 0;
  for (let k = 0; k < 8; k++) {
    let v = 0;
    if (gapAt >= 0 && k >= gapAt && k < gapAt + gap) v = 0;
    else v = groups[g++];
    out[2 * k] = v >> 8;
    out[2 * k + 1] = v & 0xff;
  }
  return null;
}

function quote(text: string): string {
  return JSON.stringify(text.length > 64 ? `${text.slice(0, 64)}…` : text);
}

function requireString(text: unknown, what: string): string {
  if (typeof text !== "string") throw new AddressError(`${what} must be a string, got ${typeof text}`);
  return text;
}

function mappedIPv4(text: string): Uint8Array {
  const out = new Uint8Array(16);
  const reason = text.length === 0 ? "the text is empty" : readIPv4(text, 0, text.length, out, 12);
  if (reason !== null) throw new AddressError(`invalid IPv4 address ${quote(text)}: ${reason}`);
  out[10] = 0xff;
  out[11] = 0xff;
  return out;
}

function ipv6(text: string): Uint8Array {
  const out = new Uint8Array(16);
  const reason = readIPv6(text, out);
  if (reason !== null) throw new AddressError(`invalid IPv6 address ${quote(text)}: ${reason}`);
  return out;
}

/**
 * Parses an IPv4 or IPv6 address into 16 bytes, IPv4 as IPv4-mapped (RFC 4291 §2.5.5.2).
 * IPv4 is a strict dotted quad; IPv6 is any RFC 4291 §2.2 text form. Zone ids, brackets,
 * whitespace and prefix lengths are refused. Throws `AddressError`.
 *
 * @example parseAddress("192.0.2.1")   // bytes of ::ffff:192.0.2.1 → [0,…,0,255,255,192,0,2,1]
 * @example parseAddress("2001:DB8::1") // bytes [0x20,0x01,0x0d,0xb8,0,…,0,1]
 */
export function parseAddress(text: string): Uint8Array {
  requireString(text, "an address");
  return text.indexOf(":") >= 0 ? ipv6(text) : mappedIPv4(text);
}

/**
 * Parses only the IPv4 dotted-quad form (four decimal octets 0–255, no leading zeros, as
 * common practice) into its 16-byte IPv4-mapped value (RFC 4291 §2.5.5.2).
 * Throws `AddressError` for anything else, IPv6 text included.
 *
 * @example parseIPv4("198.51.100.7") // [0,…,0,255,255,198,51,100,7]
 */
export function parseIPv4(text: string): Uint8Array {
  requireString(text, "an IPv4 address");
  if (text.indexOf(":") >= 0) throw new AddressError(`invalid IPv4 address ${quote(text)}: this is IPv6 text`);
  return mappedIPv4(text);
}

/**
 * Parses only IPv6 text, in any RFC 4291 §2.2 form, into 16 bytes. `::ffff:192.0.2.1`
 * is IPv6 text and is accepted; its value is the IPv4-mapped address. Throws
 * `AddressError` for anything else, dotted IPv4 included.
 *
 * @example parseIPv6("2001:db8::8:800:200c:417a") // [0x20,0x01,0x0d,0xb8,0,0,0,0,0,8,8,0,0x20,0x0c,0x41,0x7a]
 */
export function parseIPv6(text: string): Uint8Array {
  requireString(text, "an IPv6 address");
  if (text.indexOf(":") < 0) throw new AddressError(`invalid IPv6 address ${quote(text)}: IPv6 text has colons`);
  return ipv6(text);
}

/**
 * True when `bytes` is a 16-byte IPv4-mapped address `::ffff:a.b.c.d` (RFC 4291 §2.5.5.2),
 * i.e. how this module stores IPv4.
 *
 * @example isIPv4Mapped(parseAddress("192.0.2.1"))   // true
 * @example isIPv4Mapped(parseAddress("2001:db8::1")) // false
 */
export function isIPv4Mapped(bytes: Uint8Array): boolean {
  if (bytes.length !== 16) return false;
  for (let i = 0; i < 10; i++) if (bytes[i] !== 0) return false;
  return bytes[10] === 0xff && bytes[11] === 0xff;
}

/**
 * Formats 16 address bytes as text: dotted IPv4 for IPv4-mapped values (RFC 4291 §2.5.5.2),
 * otherwise the RFC 5952 §4 canonical IPv6 text: lowercase hex, no leading zeros, `::` for
 * the longest run of two or more zero groups (the first run on a tie), never for a single
 * zero group. Throws `AddressError` when `bytes` is not 16 bytes long.
 *
 * @example formatAddress(parseAddress("2001:0db8:0:0:1:0:0:1")) // "2001:db8::1:0:0:1"
 * @example formatAddress(parseAddress("::ffff:192.0.2.1"))      // "192.0.2.1"
 */
export function formatAddress(bytes: Uint8Array): string {
  if (!(bytes instanceof Uint8Array) || bytes.length !== 16) {
    throw new AddressError("an address is 16 bytes (IPv4 stored IPv4-mapped)");
  }
  if (isIPv4Mapped(bytes)) {
    return `${bytes[12]}.${bytes[13]}.${bytes[14]}.${bytes[15]}`;
  }
  // Longest run of zero groups, first one on a tie (RFC 5952 §4.2.3).
  let bestStart = -1;
  let bestLength = 1; // a run must be longer than one group (RFC 5952 §4.2.2)
  let runStart = -1;
  for (let k = 0; k <= 8; k++) {
    const zero = k < 8 && bytes[2 * k] === 0 && bytes[2 * k + 1] === 0;
    if (zero) {
      if (runStart < 0) runStart = k;
    } else if (runStart >= 0) {
      if (k - runStart > bestLength) {
        bestStart = runStart;
        bestLength = k - runStart;
      }
      runStart = -1;
    }
  }
  let text = "";
  for (let k = 0; k < 8; k++) {
    if (k === bestStart) {
      text += "::";
      k += bestLength - 1;
      continue;
    }
    if (text.length > 0 && !text.endsWith(":")) text += ":";
    text += ((bytes[2 * k] << 8) | bytes[2 * k + 1]).toString(16);
  }
  return text;
}
