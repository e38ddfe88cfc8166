import nodemailer from "nodemailer";
import { z } from "zod";
import type { CaughtMessage } from "../scripts/fakes/smtp";

export type { CaughtMessage };

/**
 * One message as Weir writes it. Subject and recipient are single header lines, so a line
 * break in either (a header injection, RFC 5322 §2.2) is refused here rather than trusted
 * to the transport.
 */
export const outgoingMailSchema = z.object({
  to: z.email("must be an e-mail address"),
  subject: z
    .string()
    .min(1)
    .max(200)
    .refine((s) => !/[\r\n]/.test(s), "must be one line"),
  text: z.string().min(1),
  html: z.string().min(1).optional(),
});
export type OutgoingMail = z.input<typeof outgoingMailSchema>;

export interface Mail {
  /** Hands the message to the SMTP relay; rejects when the relay refuses or cannot be reached. */
  send(mail: OutgoingMail): Promise<void>;
  /** Messages the local fake SMTP server caught, newest first; null when mail goes to a real relay. */
  caught(): CaughtMessage[] | null;
}

// A relay that does not answer must not hold a console request open for minutes
// (nodemailer's own defaults are 2 minutes for connecting and 10 for a reply).
const CONNECTION_TIMEOUT_MS = 10_000;
const SOCKET_TIMEOUT_MS = 30_000;

/**
 * Mail over SMTP with nodemailer: to `smtpUrl` (smtp:// or smtps://, credentials in the
 * URL), or to the local fake SMTP server that `startServer` runs outside production.
 * The transport is not pooled: each message opens and closes its own connection, so there
 * is nothing to close at shutdown.
 */
export function createMail(options: { smtpUrl: string; from: string } | { fake: { host: string; port: number; caught(): CaughtMessage[] }; from: string }): Mail {
  const timeouts = { connectionTimeout: CONNECTION_TIMEOUT_MS, greetingTimeout: CONNECTION_TIMEOUT_MS, socketTimeout: SOCKET_TIMEOUT_MS };
  const transport =
    "smtpUrl" in options
      ? nodemailer.createTransport({ url: options.smtpUrl, ...timeouts })
      : nodemailer.createTransport({ host: options.fake.host, port: options.fake.port, secure: false, ignoreTLS: true, ...timeouts });
  const fake = "fake" in options ? options.fake : null;
  return {
    async send(mail) {
      const message = outgoingMailSchema.parse(mail);
      await transport.sendMail({ from: options.from, ...message });
    },
    caught: () => (fake ? fake.caught() : null),
  };
}
