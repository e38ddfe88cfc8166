import { promisify } from "node:util";
import { gunzip } from "node:zlib";
import { ApiError } from "~/auth/api-keys.server";
import { parseFlowBatch } from "~/flow/record";
import { readLimitedBody } from "~/http/limited-body.server";
import { parseIpfixFile, type IpfixFileSummary } from "./ipfix-body";
import { packFlowRecords, type PackedFlows } from "./kept-codec";

const gunzipAsync = promisify(gunzip);

export interface BodyLimits {
  /** Largest body accepted, in bytes after decompression. */
  maxBodyBytes: number;
  /** Most records accepted in one batch. */
  maxRecords: number;
}

const JSON_TYPES = new Set(["application/json"]);
/** RFC 5655 §9 registers application/ipfix for IPFIX files. */
const IPFIX_TYPE = "application/ipfix";
const NDJSON_TYPES = new Set(["application/x-ndjson", "application/ndjson", "application/jsonl"]);

/** One entry of an invalid-record list: index of the record in the batch. */
export interface RecordProblem {
  index: number;
  path: string;
  message: string;
}

/** A body as read, with what is needed to decode it; plain data, so it can cross to a worker thread. */
export interface ParseJob {
  /** Owns its whole ArrayBuffer, so the buffer can be transferred rather than copied. */
  body: Uint8Array<ArrayBuffer>;
  ndjson: boolean;
  /** An IPFIX file (RFC 5655) rather than JSON. */
  ipfix?: boolean;
  gzip: boolean;
  limits: BodyLimits;
}

/**
 * A decoded and validated batch, or the API error to answer instead, as plain data: an
 * ApiError instance would not survive the trip from a worker, nor `instanceof` across
 * the server's and the route bundle's copies of its class.
 */
export type ParseOutcome =
  | { ok: true; packed: PackedFlows; ipfix?: IpfixFileSummary; ignoredFields?: Record<string, number> }
  | { ok: false; status: number; code: string; message: string; extra: Record<string, unknown> };

/** Turns bodies into packed records: the parse-worker pool, or `parseFlowBody` in the calling thread. */
export interface FlowBodyParser {
  parse(job: ParseJob): Promise<ParseOutcome>;
}

/**
 * Reads an ingest batch: a JSON array of flow records, or NDJSON (one record a line),
 * optionally gzip-compressed. Content type and encoding are checked and the body is read
 * here, under the size limit, before any parser sees it; `parser` then decodes and
 * validates it (see `parseFlowBody`). Throws the ApiError to answer when the batch is
 * refused.
 */
export async function readFlowBatch(
  request: Request,
  limits: BodyLimits,
  parser: FlowBodyParser,
): Promise<{ packed: PackedFlows; ipfix?: IpfixFileSummary; ignoredFields?: Record<string, number> }> {
  const type = (request.headers.get("content-type") ?? "").split(";")[0].trim().toLowerCase();
  const ndjson = NDJSON_TYPES.has(type);
  const ipfix = type === IPFIX_TYPE;
  if (!ndjson && !ipfix && !JSON_TYPES.has(type)) {
    throw new ApiError(
      415,
      "unsupported_media_type",
      `Content-Type must be application/json (a JSON array of records), application/x-ndjson (one record a line) or application/ipfix (an IPFIX file, RFC 5655)${type ? `, not ${type}` : ""}.`,
    );
  }
  const encoding = (request.headers.get("content-encoding") ?? "identity").trim().toLowerCase();
  if (encoding !== "identity" && encoding !== "gzip") {
    throw new ApiError(415, "unsupported_media_type", `Content-Encoding must be gzip or absent, not ${encoding}.`);
  }
  const body = await readLimitedBody(request, limits.maxBodyBytes, () => tooLarge(limits.maxBodyBytes));
  const outcome = await parser.parse({ body, ndjson, ipfix, gzip: encoding === "gzip", limits });
  if (!outcome.ok) throw new ApiError(outcome.status, outcome.code, outcome.message, outcome.extra);
  return { packed: outcome.packed, ipfix: outcome.ipfix, ignoredFields: outcome.ignoredFields };
}

/**
 * Decodes a body read by `readFlowBatch` (gunzip, UTF-8, JSON or NDJSON) and validates
 * every record, giving the records packed as kept-codec rows or the error to answer.
 * Never holds more than the limit in memory: decompression stops at the limit too (a
 * gzip bomb answers 413, not a crash). Rejects only on a fault of its own.
 */
export async function parseFlowBody(job: ParseJob): Promise<ParseOutcome> {
  try {
    if (job.ipfix) {
      const { packed, summary } = parseIpfixFile(await decompress(job), job.limits.maxRecords);
      return { ok: true, packed, ipfix: summary };
    }
    const values = await decodeValues(job);
    const parsed = parseFlowBatch(values);
    if (!parsed.ok) throw invalidRecords(parsed.details, parsed.invalidCount);
    return { ok: true, packed: packFlowRecords(parsed.records), ignoredFields: parsed.ignoredFields };
  } catch (error) {
    if (!(error instanceof ApiError)) throw error;
    return { ok: false, status: error.status, code: error.code, message: error.message, extra: error.extra };
  }
}

async function decompress({ body, gzip, limits }: ParseJob): Promise<Uint8Array> {
  let bytes: Uint8Array = body;
  if (gzip) {
    try {
      bytes = await gunzipAsync(body, { maxOutputLength: limits.maxBodyBytes });
    } catch (error) {
      if ((error as { code?: string }).code === "ERR_BUFFER_TOO_LARGE") throw tooLarge(limits.maxBodyBytes, "after decompression");
      throw new ApiError(400, "invalid_body", "The body is not valid gzip data.");
    }
  }
  return bytes;
}

async function decodeValues(job: ParseJob): Promise<unknown[]> {
  const { ndjson, limits } = job;
  const bytes = await decompress(job);
  let text: string;
  try {
    text = new TextDecoder("utf-8", { fatal: true }).decode(bytes);
  } catch {
    throw new ApiError(400, "invalid_body", "The body is not valid UTF-8.");
  }
  return ndjson ? parseNdjson(text, limits.maxRecords) : parseJsonArray(text, limits.maxRecords);
}

function tooLarge(maxBytes: number, when = ""): ApiError {
  return new ApiError(413, "payload_too_large", `The body exceeds the limit of ${maxBytes} bytes${when ? ` ${when}` : ""} (INGEST_MAX_BODY_BYTES); split the batch.`, { limit: "INGEST_MAX_BODY_BYTES", maxBytes });
}

function tooManyRecords(maxRecords: number, count: number | string): ApiError {
  return new ApiError(413, "too_many_records", `The batch holds ${count} records; the limit is ${maxRecords} (INGEST_MAX_RECORDS); split the batch.`, { limit: "INGEST_MAX_RECORDS", maxRecords });
}

function parseJsonArray(text: string, maxRecords: number): unknown[] {
  let value: unknown;
  try {
    value = JSON.parse(text);
  } catch (error) {
    throw new ApiError(400, "invalid_json", `The body is not valid JSON: ${(error as Error).message}`);
  }
  if (!Array.isArray(value)) throw new ApiError(400, "invalid_body", "The body must be a JSON array of flow records (or NDJSON with Content-Type: application/x-ndjson).");
  if (value.length > maxRecords) throw tooManyRecords(maxRecords, value.length);
  return value;
}

function parseNdjson(text: string, maxRecords: number): unknown[] {
  const values: unknown[] = [];
  const problems: RecordProblem[] = [];
  let invalidCount = 0;
  let lineStart = 0;
  let lineNumber = 0;
  while (lineStart <= text.length) {
    let lineEnd = text.indexOf("\n", lineStart);
    if (lineEnd === -1) lineEnd = text.length;
    lineNumber++;
    const line = text.slice(lineStart, lineEnd).trim();
    lineStart = lineEnd + 1;
    if (line === "") continue;
    if (values.length >= maxRecords) throw tooManyRecords(maxRecords, `more than ${maxRecords}`);
    try {
      values.push(JSON.parse(line));
    } catch (error) {
      invalidCount++;
      if (problems.length < 100) problems.push({ index: values.length, path: "", message: `line ${lineNumber} is not valid JSON: ${(error as Error).message}` });
      values.push(undefined);
    }
  }
  if (invalidCount > 0) throw invalidRecords(problems, invalidCount);
  return values;
}

/** The 400 answer for a batch with invalid records; nothing of the batch is applied. */
export function invalidRecords(details: RecordProblem[], invalidCount: number): ApiError {
  return new ApiError(
    400,
    "invalid_records",
    `${invalidCount} record${invalidCount === 1 ? " is" : "s are"} invalid; nothing in this batch was stored. Fix them and send the batch again.`,
    { details, invalidCount },
  );
}
