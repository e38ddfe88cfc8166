// Shared by the IPFIX decoder tests: byte literals, a message source and the rows decoded back
// into records through kept-codec's own reader (so the row layout is checked with every test).
import type { FlowRecord } from "~/flow/record";
import { decodeRowRecord, KEPT_ROW_BYTES } from "~/ingest/kept-codec";
import { FlowDecoder, RowWriter } from "~/ipfix/decoder";
import type { CollectTransport, DecoderOptions, MessageOutcome, MessageSource } from "~/ipfix/types";

/** Octets from hex text; spaces, line breaks and `#` comments to the end of a line are ignored. */
export function hex(text: string): Uint8Array {
  const digits = text.replace(/#[^\n]*/g, "").replace(/\s+/g, "");
  if (digits.length % 2 !== 0 || /[^0-9a-f]/i.test(digits)) throw new Error(`bad hex: ${digits}`);
  return Uint8Array.from(digits.match(/../g) ?? [], (h) => parseInt(h, 16));
}

export function concat(...parts: Uint8Array[]): Uint8Array {
  const out = new Uint8Array(parts.reduce((n, p) => n + p.length, 0));
  let at = 0;
  for (const p of parts) {
    out.set(p, at);
    at += p.length;
  }
  return out;
}

/** A fixed receive time (2024-05-01T02:00:00Z): tests never read the clock. */
export const T0 = Date.UTC(2024, 4, 1, 2, 0, 0);

export function source(transport: CollectTransport = "ipfix-udp", receivedAt = T0, session = "udp:192.0.2.10:50000"): MessageSource {
  return { session, exporter: "192.0.2.10", transport, receivedAt };
}

/** A decoder and a writer, with a helper that decodes one message and returns its outcome and rows. */
export function harness(options: Partial<DecoderOptions> = {}) {
  const decoder = new FlowDecoder({ templateLifetimeMs: null, ...options });
  const out = new RowWriter(4);
  return {
    decoder,
    out,
    decode(message: Uint8Array, src: MessageSource = source()): { outcome: MessageOutcome; rows: FlowRecord[] } {
      const before = out.count;
      const outcome = decoder.decode(src, message, out);
      const rows: FlowRecord[] = [];
      for (let i = before; i < out.count; i++) rows.push(decodeRowRecord(out.bytes, i * KEPT_ROW_BYTES));
      return { outcome, rows };
    },
    stats(domain?: number) {
      const all = decoder.exporterStats();
      return domain === undefined ? all : all.filter((s) => s.domain === domain);
    },
  };
}

/** Text of an address as kept-codec stores it (IPv4-mapped for IPv4, RFC 4291 §2.5.5.2). */
export function addressText(bytes: Uint8Array): string {
  const v4 = bytes.subarray(0, 10).every((b) => b === 0) && bytes[10] === 0xff && bytes[11] === 0xff;
  if (v4) return [...bytes.subarray(12)].join(".");
  const groups: string[] = [];
  for (let i = 0; i < 16; i += 2) groups.push(((bytes[i] << 8) | bytes[i + 1]).toString(16));
  return groups.join(":");
}

/** The parts of a decoded row a test compares, with addresses as text. */
export function flow(r: FlowRecord) {
  return {
    src: addressText(r.src),
    dst: addressText(r.dst),
    sport: r.sport,
    dport: r.dport,
    proto: r.proto,
    bytes: r.bytes,
    packets: r.packets,
    start: r.start,
    end: r.end,
  };
}
