/**
 * Cutting IPFIX messages out of a byte stream: a TCP transport session (RFC 7011 §10.4) or an
 * IPFIX file (RFC 5655: a file is IPFIX messages back to back). Each message starts with
 * its version (10) and its total length in octets (RFC 7011 §3.1), so the next message's
 * extent is known from its first four octets.
 *
 * Pure module: no I/O.
 */

/** An IPFIX message header is 16 octets (RFC 7011 §3.1). */
export const IPFIX_HEADER_OCTETS = 16;

export type Framing =
  /** A whole message of `length` octets starts at the offset. */
  | { status: "message"; length: number }
  /** The buffer ends inside a message: wait for at least `needed` octets from the offset. */
  | { status: "incomplete"; needed: number }
  /** The stream cannot be IPFIX from here on (there is no way to find the next message). */
  | { status: "malformed"; reason: string };

/**
 * The extent of the next IPFIX message in `buffer` from `offset`.
 * @example frameIpfixMessage(new Uint8Array([0, 10, 0, 16, ...twelveMore])) // { status: "message", length: 16 }
 * @example frameIpfixMessage(new Uint8Array([0, 10])) // { status: "incomplete", needed: 4 }
 * @example frameIpfixMessage(new Uint8Array([0, 9, 0, 1])) // { status: "malformed", reason: "version 9 is not IPFIX (10) …" }
 */
export function frameIpfixMessage(buffer: Uint8Array, offset = 0): Framing {
  const available = buffer.length - offset;
  if (available < 4) return { status: "incomplete", needed: 4 };
  const version = (buffer[offset] << 8) | buffer[offset + 1];
  if (version !== 10) {
    return { status: "malformed", reason: `version ${version} is not IPFIX (10); a stream or file holds IPFIX messages only (RFC 7011 §3.1, RFC 5655)` };
  }
  const length = (buffer[offset + 2] << 8) | buffer[offset + 3];
  if (length < IPFIX_HEADER_OCTETS) {
    return { status: "malformed", reason: `message length ${length} is shorter than the ${IPFIX_HEADER_OCTETS}-octet message header (RFC 7011 §3.1)` };
  }
  if (available < length) return { status: "incomplete", needed: length };
  return { status: "message", length };
}
