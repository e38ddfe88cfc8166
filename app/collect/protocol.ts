import type { CollectTransport, ExporterStats } from "~/ipfix/types";

/** Rows of consecutive messages of one (session, observation domain), in arrival order. */
export interface DecodedGroup {
  session: string;
  exporter: string;
  transport: CollectTransport;
  /** -1 when the message was too short to carry one. */
  domain: number;
  rows: number;
  messages: number;
  /** Data sets of these messages that had to wait for their template. */
  waited: number;
}

/** A UDP socket the worker binds and reads itself, so a busy main thread cannot make the kernel drop datagrams. */
export interface UdpListen {
  transport: Extract<CollectTransport, "ipfix-udp" | "netflow9-udp">;
  host: string;
  /** 0 asks the OS for a free port. */
  port: number;
  receiveBufferBytes: number;
}

export interface DecodeWorkerData {
  templateLifetimeMs: number;
  udp: UdpListen[];
}

export type DecodeWorkerRequest =
  /** Messages framed on the main thread (TCP); `id` is answered once they and everything before are decoded. */
  | { type: "chunk"; id: number; chunk: Uint8Array<ArrayBuffer> }
  | { type: "end"; session: string }
  | { type: "stats"; id: number }
  | { type: "close"; id: number };

export type DecodeWorkerReply =
  | { type: "ready"; ports: { transport: UdpListen["transport"]; port: number; receiveBufferBytes: number }[] }
  | { type: "listen-failed"; transport: UdpListen["transport"]; port: number; code: string | null; message: string }
  /** `id` is set when this answers a chunk request; `datagrams` counts UDP datagrams read since the last reply. */
  | { type: "decoded"; id: number | null; rows: Uint8Array<ArrayBuffer>; count: number; groups: DecodedGroup[]; datagrams: number }
  | { type: "stats"; id: number; stats: ExporterStats[] }
  | { type: "closed"; id: number }
  | { type: "failure"; message: string };
