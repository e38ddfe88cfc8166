/**
 * The contract between the IPFIX / NetFlow v9 decoder (pure, app/ipfix/decoder.ts) and the
 * transports that feed it (UDP and TCP listeners, IPFIX files posted over HTTP).
 *
 * IPFIX: RFC 7011 (protocol), RFC 7012 (information model), RFC 5103 (biflows),
 * RFC 5655 (files). NetFlow v9: RFC 3954.
 */

/** How a message reached Weir; also the `source` of the ingest batch it ends up in. */
export type CollectTransport = "ipfix-udp" | "ipfix-tcp" | "netflow9-udp" | "ipfix-file";

/** Where one message came from. */
export interface MessageSource {
  /**
   * The transport session (RFC 7011 §2): templates, sequence numbers and statistics are kept
   * per (session, observation domain). A UDP exporter socket ("udp:192.0.2.1:50000"), a TCP
   * connection, or one posted file.
   */
  session: string;
  /** The exporter's address as text, as shown to people. */
  exporter: string;
  transport: CollectTransport;
  /** Epoch ms: template lifetimes, waiting-set lifetimes and statistics use it. */
  receivedAt: number;
}

export interface DecoderOptions {
  /**
   * UDP only: a template not refreshed for this long is forgotten (RFC 7011 §8.4); null keeps
   * templates until withdrawn or the session ends (TCP, files).
   */
  templateLifetimeMs: number | null;
  /** Data sets held per (session, domain) while their template is missing (default 64); beyond, the oldest is dropped and counted. */
  maxWaitingSets?: number;
  /** Bytes held per (session, domain) while waiting (default 256 KiB). */
  maxWaitingBytes?: number;
  /** A waiting set older than this is dropped and counted (default 60 s). */
  waitingLifetimeMs?: number;
  /** Sessions remembered at once (default 10 000); the least recently used beyond are forgotten. */
  maxSessions?: number;
}

/** What became of one message. */
export type MessageOutcome =
  | {
      status: "decoded";
      version: 9 | 10;
      domain: number;
      /** Flow rows written (each direction of a biflow is one row), replayed ones included. */
      records: number;
      /** Data records that carried no addresses, protocol, or positive byte and packet counts. */
      unusable: number;
      /**
       * Data sets of this message held for a template not (yet) known. Sets, not records: how many
       * records a set holds is known only once its template is.
       */
      waiting: number;
      /** Held data records of earlier messages decoded now that their template arrived. */
      replayed: number;
      /** Records (IPFIX) or export packets (v9) newly found lost by the sequence numbers. */
      lost: number;
    }
  | {
      status: "dropped";
      version: 9 | 10 | null;
      domain: number | null;
      /** Why, in words for the console, e.g. "set length 70 runs past the message end (64)". */
      reason: string;
    };

export interface TemplateSummary {
  id: number;
  options: boolean;
  /** Element names in template order; enterprise-specific ones as "e<PEN>.<id>", unknown IANA ones as "ie<id>". */
  fields: string[];
  refreshedAt: number;
}

/** What the decoder knows of one (session, observation domain). */
export interface ExporterStats {
  session: string;
  exporter: string;
  transport: CollectTransport;
  /** Observation Domain ID / source id; -1 for messages too short to carry one. */
  domain: number;
  version: 9 | 10 | null;
  firstSeen: number;
  lastSeen: number;
  messages: number;
  records: number;
  unusable: number;
  lost: number;
  /** IPFIX sequence numbers count data records, NetFlow v9 ones export packets. */
  lostUnit: "records" | "packets";
  /** Data sets held for a template now (sets: their record count is unknown until it comes). */
  waiting: number;
  /** Data sets dropped for want of a template (buffer full, too old, session ended). */
  droppedWaiting: number;
  malformed: number;
  lastError: string | null;
  /** Packet sampling interval announced in options records (counters are multiplied by it); null when none. */
  samplingInterval: number | null;
  templates: TemplateSummary[];
  enterpriseElements: { enterprise: number; id: number; count: number }[];
}
