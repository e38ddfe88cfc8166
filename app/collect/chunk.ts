import type { CollectTransport } from "~/ipfix/types";

/**
 * Messages received by the listeners travel to the decode worker in chunks: one transferable
 * buffer holding many datagrams (or TCP-framed messages) back to back, each with where it came
 * from. Posting one message per datagram would cost more than decoding it.
 *
 * Layout per message (little-endian): u8 transport · u8 session length · u8 exporter length ·
 * u8 reserved · f64 receivedAt · u32 message length · session (ASCII) · exporter (ASCII) · message.
 */
export const TRANSPORTS: readonly CollectTransport[] = ["ipfix-udp", "ipfix-tcp", "netflow9-udp", "ipfix-file"];

const HEADER_BYTES = 16;

export interface ChunkMessage {
  transport: CollectTransport;
  session: string;
  exporter: string;
  receivedAt: number;
  message: Uint8Array;
}

/** Collects messages into one growing buffer until `take`. */
export class ChunkBuilder {
  private buffer = new Uint8Array(1 << 20);
  private view = new DataView(this.buffer.buffer);
  private length = 0;
  messages = 0;

  get byteLength(): number {
    return this.length;
  }

  add(transport: CollectTransport, session: string, exporter: string, receivedAt: number, message: Uint8Array): void {
    const need = HEADER_BYTES + session.length + exporter.length + message.byteLength;
    if (this.length + need > this.buffer.byteLength) this.grow(this.length + need);
    const at = this.length;
    this.buffer[at] = TRANSPORTS.indexOf(transport);
    this.buffer[at + 1] = session.length;
    this.buffer[at + 2] = exporter.length;
    this.view.setFloat64(at + 4, receivedAt, true);
    this.view.setUint32(at + 12, message.byteLength, true);
    let o = at + HEADER_BYTES;
    // Sessions and exporters are addresses, ports and digits: ASCII, at most 255 characters.
    for (let i = 0; i < session.length; i++) this.buffer[o++] = session.charCodeAt(i);
    for (let i = 0; i < exporter.length; i++) this.buffer[o++] = exporter.charCodeAt(i);
    this.buffer.set(message, o);
    this.length = o + message.byteLength;
    this.messages++;
  }

  /** The messages so far as an owning buffer (to transfer), and a fresh start. */
  take(): Uint8Array<ArrayBuffer> {
    const out = this.buffer.slice(0, this.length);
    this.length = 0;
    this.messages = 0;
    return out;
  }

  private grow(min: number): void {
    let size = this.buffer.byteLength * 2;
    while (size < min) size *= 2;
    const next = new Uint8Array(size);
    next.set(this.buffer.subarray(0, this.length));
    this.buffer = next;
    this.view = new DataView(next.buffer);
  }
}

/** Calls `each` for every message of a chunk, in order; a view into the chunk, not a copy. */
export function readChunk(chunk: Uint8Array, each: (m: ChunkMessage) => void): void {
  const view = new DataView(chunk.buffer, chunk.byteOffset, chunk.byteLength);
  let at = 0;
  while (at + HEADER_BYTES <= chunk.byteLength) {
    const transport = TRANSPORTS[chunk[at]];
    const sessionLength = chunk[at + 1];
    const exporterLength = chunk[at + 2];
    const receivedAt = view.getFloat64(at + 4, true);
    const length = view.getUint32(at + 12, true);
    let o = at + HEADER_BYTES;
    const session = String.fromCharCode(...chunk.subarray(o, o + sessionLength));
    o += sessionLength;
    const exporter = String.fromCharCode(...chunk.subarray(o, o + exporterLength));
    o += exporterLength;
    each({ transport, session, exporter, receivedAt, message: chunk.subarray(o, o + length) });
    at = o + length;
  }
}
