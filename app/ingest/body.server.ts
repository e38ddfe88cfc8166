import { promisify } from "node:util";
import { gunzip } from "node:zlib";
import { ApiError } from "~/auth/api-keys.server";

const gunzipAsync = promisify(gunzip);

export interface BodyLimits {
  /** Largest body accepted, in bytes after decompression. */
  maxBodyBytes: number;
  /** Most records accepted in one batch. */
  maxRecords: number;
}

const JSON_TYPES = new Set(["application/json"]);
const NDJSON_TYPES = new Set(["application/x-ndjson", "application/ndjson", "application/jsonl"]);

/** One entry of an invalid-record list: index of the record in the batch. */
export interface RecordProblem {
  index: number;
  path: string;
  message: string;
}

/**
 * Reads an ingest body as a list of raw JSON values: a JSON array, or NDJSON
 * (one value a line), optionally gzip-compressed. Never holds more than the
 * limit in memory: the compressed body is capped at the limit while reading, and
 * decompression stops at the limit too (a gzip bomb answers 413, not a crash).
 */
export async function readRecordValues(request: Request, limits: BodyLimits): Promise<unknown[]> {
  const type = (request.headers.get("content-type") ?? "").split(";")[0].trim().toLowerCase();
  const ndjson = NDJSON_TYPES.has(type);
  if (!ndjson && !JSON_TYPES.has(type)) {
    throw new ApiError(
      415,
      "unsupported_media_type",
      `Content-Type must be application/json (a JSON array of records) or application/x-ndjson (one record a line)${type ? `, not ${type}` : ""}.`,
    );
  }
  const encoding = (request.headers.get("content-encoding") ?? "identity").trim().toLowerCase();
  if (encoding !== "identity" && encoding !== "gzip") {
    throw new ApiError(415, "unsupported_media_type", `Content-Encoding must be gzip or absent, not ${encoding}.`);
  }

  let body = await readLimited(request, limits.maxBodyBytes);
  if (encoding === "gzip") {
    try {
      body = await gunzipAsync(body, { maxOutputLength: limits.maxBodyBytes });
    } catch (error) {
      if ((error as { code?: string }).code === "ERR_BUFFER_TOO_LARGE") throw tooLarge(limits.maxBodyBytes, "after decompression");
      throw new ApiError(400, "invalid_body", "The body is not valid gzip data.");
    }
  }
  let text: string;
  try {
    text = new TextDecoder("utf-8", { fatal: true }).decode(body);
  } catch {
    throw new ApiError(400, "invalid_body", "The body is not valid UTF-8.");
  }
  return ndjson ? parseNdjson(text, limits.maxRecords) : parseJsonArray(text, limits.maxRecords);
}

async function readLimited(request: Request, maxBytes: number): Promise<Buffer> {
  const declared = Number(request.headers.get("content-length"));
  if (Number.isFinite(declared) && declared > maxBytes) throw tooLarge(maxBytes);
  if (!request.body) return Buffer.alloc(0);
  const reader = request.body.getReader();
  const chunks: Uint8Array[] = [];
  let total = 0;
  for (;;) {
    const { done, value } = await reader.read();
    if (done) break;
    total += value.byteLength;
    if (total > maxBytes) {
      await reader.cancel().catch(() => undefined);
      throw tooLarge(maxBytes);
    }
    chunks.push(value);
  }
  return Buffer.concat(chunks, total);
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
