import { ApiError } from "~/auth/api-keys.server";
import { FlowDecoder } from "~/ipfix/decoder";
import { frameIpfixMessage } from "~/ipfix/framing";
import { RowWriter } from "~/ipfix/row-writer";
import type { PackedFlows } from "./kept-codec";

/** What an IPFIX file held besides its flow records; part of the ingest answer. */
export interface IpfixFileSummary {
  messages: number;
  /** Flow rows stored (each direction of an RFC 5103 biflow is one). */
  records: number;
  /** Data records without addresses, protocol or positive counters: not stored. */
  unusable: number;
  /** Packet sampling interval announced in the file's options records (counters were multiplied by it), null when none. */
  samplingInterval: number | null;
  /** Enterprise-specific elements skipped, by (enterprise number, element id). */
  enterpriseElements: { enterprise: number; id: number; count: number }[];
}

const MAX_DETAILS = 100;

/**
 * Decodes an IPFIX file (RFC 5655: IPFIX messages back to back, RFC 7011) posted as one ingest
 * batch. The batch is atomic, as a JSON batch is: a message that cannot be framed or decoded,
 * or data records whose template the file never defines, refuse the whole file (400
 * `invalid_ipfix`, with the message number and byte offset of each problem, at most 100).
 */
export function parseIpfixFile(bytes: Uint8Array, maxRecords: number): { packed: PackedFlows; summary: IpfixFileSummary } {
  const decoder = new FlowDecoder({ templateLifetimeMs: null });
  const writer = new RowWriter();
  const source = { session: "file", exporter: "file", transport: "ipfix-file" as const, receivedAt: Date.now() };
  const details: { index: number; path: string; message: string }[] = [];
  let invalidCount = 0;
  let messages = 0;
  let unusable = 0;
  let offset = 0;
  if (bytes.byteLength === 0) throw new ApiError(400, "invalid_ipfix", "The body is empty; an IPFIX file holds one or more IPFIX messages (RFC 5655).");
  while (offset < bytes.byteLength) {
    const problem = framingProblem(bytes, offset);
    if (problem !== null) {
      invalidCount++;
      details.push({ index: messages, path: `byte ${offset}`, message: problem });
      break; // the next message cannot be found once a length is wrong
    }
    const length = (bytes[offset + 2] << 8) | bytes[offset + 3]; // framed above
    const outcome = decoder.decode(source, bytes.subarray(offset, offset + length), writer);
    if (outcome.status === "dropped") {
      invalidCount++;
      if (details.length < MAX_DETAILS) details.push({ index: messages, path: `byte ${offset}`, message: outcome.reason });
    } else {
      unusable += outcome.unusable;
    }
    if (writer.count > maxRecords) {
      throw new ApiError(413, "too_many_records", `The file holds more than ${maxRecords} flow records (INGEST_MAX_RECORDS); split it.`, { limit: "INGEST_MAX_RECORDS", maxRecords });
    }
    messages++;
    offset += length;
  }
  const stats = decoder.exporterStats();
  const waiting = stats.reduce((sum, s) => sum + s.waiting + s.droppedWaiting, 0);
  if (waiting > 0 && details.length < MAX_DETAILS) {
    invalidCount++;
    details.push({
      index: messages,
      path: "end of file",
      message: `${waiting} data set${waiting === 1 ? "" : "s"} refer to templates the file does not define before them (RFC 5655 §8: a file carries its templates)`,
    });
  }
  if (invalidCount > 0) {
    throw new ApiError(
      400,
      "invalid_ipfix",
      `The IPFIX file has ${invalidCount} problem${invalidCount === 1 ? "" : "s"}; nothing in it was stored. ${details[0].path}, message ${details[0].index}: ${details[0].message}.`,
      { details, invalidCount },
    );
  }
  const enterprise = new Map<string, { enterprise: number; id: number; count: number }>();
  for (const s of stats) {
    for (const e of s.enterpriseElements) {
      const key = `${e.enterprise}.${e.id}`;
      const seen = enterprise.get(key);
      if (seen) seen.count += e.count;
      else enterprise.set(key, { ...e });
    }
  }
  const packed = writer.take();
  return {
    packed,
    summary: {
      messages,
      records: packed.count,
      unusable,
      samplingInterval: stats.find((s) => s.samplingInterval !== null)?.samplingInterval ?? null,
      enterpriseElements: [...enterprise.values()],
    },
  };
}

/** Why no IPFIX message starts at `offset`, or null when one does (RFC 7011 §3.1 header, RFC 5655 files). */
function framingProblem(bytes: Uint8Array, offset: number): string | null {
  const framing = frameIpfixMessage(bytes, offset);
  if (framing.status === "message") return null;
  const left = bytes.byteLength - offset;
  if (framing.status === "incomplete") return `the file ends ${left} byte${left === 1 ? "" : "s"} into a message of ${framing.needed === 4 ? "unknown length" : `${framing.needed} bytes`}: it is truncated`;
  // NetFlow v9 has no file form: say where such data belongs.
  if (left >= 2 && bytes[offset] === 0 && bytes[offset + 1] === 9) return "version 9 is NetFlow v9, which has no file format; send it to the NetFlow v9 UDP listener";
  return framing.reason;
}
