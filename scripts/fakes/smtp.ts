// A local stand-in for an SMTP relay, for development, the demo and tests — never started
// in production (the environment check requires SMTP_URL there). Weir sends to it with
// nodemailer exactly as it would to a real relay; instead of delivering, it keeps the last
// messages in memory so the console (/dev/mail) and tests can read them.
import type { AddressInfo } from "node:net";
import { parseHeaderValue } from "nodemailer/lib/mime-funcs";
import { SMTPServer } from "smtp-server";

export interface CaughtMessage {
  /** The From header (RFC 5322 §3.6.2), or the envelope sender when the header is missing. */
  from: string;
  /** The envelope recipients (RFC 5321 RCPT TO): who the message was actually sent to. */
  to: string[];
  subject: string;
  /** The text/plain body, line ends normalised to "\n". */
  text: string;
  /** ISO 8601, from the Date header (RFC 5322 §3.6.1), or the time of receipt. */
  date: string;
}

export interface FakeSmtp {
  host: string;
  port: number;
  /** Caught messages, newest first. */
  caught(): CaughtMessage[];
  close(): Promise<void>;
}

/** Enough for a day of development; older messages fall off so memory stays bounded. */
export const CAUGHT_MESSAGES_KEPT = 200;
// Invitations and alerts are a few kilobytes; anything far larger is a mistake worth refusing.
const MAX_MESSAGE_BYTES = 1_048_576;

export async function startFakeSmtp(options: { host?: string; port?: number } = {}): Promise<FakeSmtp> {
  const host = options.host ?? "127.0.0.1";
  const messages: CaughtMessage[] = [];

  const server = new SMTPServer({
    // Loopback only and never in production: no TLS or login to set up, so the app's
    // transport connects with plain SMTP (a self-signed STARTTLS would need an exception).
    authOptional: true,
    disabledCommands: ["AUTH", "STARTTLS"],
    size: MAX_MESSAGE_BYTES,
    banner: "Weir fake SMTP (development only; nothing is delivered)",
    closeTimeout: 1000,
    logger: false,
    onData(stream, session, callback) {
      const chunks: Buffer[] = [];
      stream.on("data", (chunk: Buffer) => chunks.push(chunk));
      stream.on("error", callback);
      stream.on("end", () => {
        if (stream.sizeExceeded) {
          callback(Object.assign(new Error("Message exceeds the fake server's size limit"), { responseCode: 552 }));
          return;
        }
        const envelopeFrom = session.envelope.mailFrom ? session.envelope.mailFrom.address : "";
        const to = session.envelope.rcptTo.map((r) => r.address);
        messages.push(readMessage(Buffer.concat(chunks).toString("latin1"), envelopeFrom, to, new Date()));
        if (messages.length > CAUGHT_MESSAGES_KEPT) messages.splice(0, messages.length - CAUGHT_MESSAGES_KEPT);
        callback();
      });
    },
  });

  await new Promise<void>((resolve, reject) => {
    server.once("error", reject);
    server.listen(options.port ?? 0, host, () => {
      server.off("error", reject);
      resolve();
    });
  });
  const { port } = server.server.address() as AddressInfo;
  let closing: Promise<void> | undefined;
  return {
    host,
    port,
    caught: () => messages.toReversed(),
    // Idempotent, so a test that stops the relay early and its cleanup can both call it.
    close: () => (closing ??= new Promise<void>((resolve) => server.close(() => resolve()))),
  };
}

/**
 * Reads what the console shows from a raw RFC 5322 message: the headers it needs and the
 * text/plain body, through MIME multipart (RFC 2046) and transfer encodings (RFC 2045).
 * `raw` is the message as latin1, so each character is one byte of the original.
 */
function readMessage(raw: string, envelopeFrom: string, to: string[], receivedAt: Date): CaughtMessage {
  const { headers, body } = splitEntity(raw);
  const date = new Date(headers.get("date") ?? "");
  return {
    from: decodeEncodedWords(headers.get("from") ?? "") || envelopeFrom,
    to,
    subject: decodeEncodedWords(headers.get("subject") ?? ""),
    text: textOf(headers, body).replace(/\r\n/g, "\n").replace(/\n$/, ""),
    date: (Number.isNaN(date.getTime()) ? receivedAt : date).toISOString(),
  };
}

function splitEntity(raw: string): { headers: Map<string, string>; body: string } {
  const end = raw.indexOf("\r\n\r\n");
  const head = end === -1 ? raw : raw.slice(0, end);
  const body = end === -1 ? "" : raw.slice(end + 4);
  const headers = new Map<string, string>();
  // Unfold continuation lines first (RFC 5322 §2.2.3).
  for (const line of head.replace(/\r\n(?=[ \t])/g, "").split("\r\n")) {
    const colon = line.indexOf(":");
    if (colon <= 0) continue;
    const name = line.slice(0, colon).trim().toLowerCase();
    if (!headers.has(name)) headers.set(name, line.slice(colon + 1).trim());
  }
  return { headers, body };
}

/** The first text/plain part, decoded; "" when there is none. */
function textOf(headers: Map<string, string>, body: string): string {
  const type = parseHeaderValue(headers.get("content-type") ?? "text/plain");
  const mimeType = type.value.toLowerCase();
  if (mimeType.startsWith("multipart/")) {
    const boundary = type.params.boundary;
    if (!boundary) return "";
    const parts = body.split(`--${boundary}`).slice(1);
    for (const part of parts) {
      if (part.startsWith("--")) break;
      const entity = splitEntity(part.replace(/^\r\n/, ""));
      const text = textOf(entity.headers, entity.body.replace(/\r\n$/, ""));
      if (text) return text;
    }
    return "";
  }
  if (mimeType !== "text/plain") return "";
  const bytes = decodeTransfer(body, headers.get("content-transfer-encoding") ?? "7bit");
  return decodeCharset(bytes, type.params.charset);
}

function decodeTransfer(body: string, encoding: string): Buffer {
  switch (encoding.trim().toLowerCase()) {
    case "base64":
      return Buffer.from(body.replace(/\s+/g, ""), "base64");
    case "quoted-printable":
      return decodeQuotedPrintable(body);
    default:
      return Buffer.from(body, "latin1");
  }
}

/** RFC 2045 §6.7: soft line breaks end in "=", other "=" introduce a hex byte. */
function decodeQuotedPrintable(body: string): Buffer {
  const unwrapped = body.replace(/=\r?\n/g, "");
  return Buffer.from(unwrapped.replace(/=([0-9A-Fa-f]{2})/g, (_, hex: string) => String.fromCharCode(parseInt(hex, 16))), "latin1");
}

function decodeCharset(bytes: Buffer, charset = "utf-8"): string {
  try {
    return new TextDecoder(charset).decode(bytes);
  } catch {
    return new TextDecoder("utf-8").decode(bytes);
  }
}

/** RFC 2047 encoded words ("=?utf-8?Q?...?=" / "?B?"), as nodemailer writes non-ASCII headers. */
function decodeEncodedWords(value: string): string {
  // Whitespace between two adjacent encoded words is not part of the text (RFC 2047 §6.2).
  const joined = value.replace(/(\?=)\s+(?==\?)/g, "$1");
  return joined.replace(/=\?([^?]+)\?([BbQq])\?([^?]*)\?=/g, (_, charset: string, kind: string, data: string) => {
    const bytes =
      kind.toUpperCase() === "B"
        ? Buffer.from(data, "base64")
        : Buffer.from(data.replace(/_/g, " ").replace(/=([0-9A-Fa-f]{2})/g, (__, hex: string) => String.fromCharCode(parseInt(hex, 16))), "latin1");
    return decodeCharset(bytes, charset.split("*")[0]);
  });
}
