import { ApiError, authenticateKey, touchKey } from "~/auth/api-keys.server";
import { invalidRecords, readFlowBatch, type RecordProblem } from "~/ingest/body.server";
import { ParsePoolFull } from "~/ingest/parse-pool.server";
import type { Route } from "./+types/api.v1.flows";

// Printable ASCII, as in the IETF idempotency-key header draft's examples; long enough for UUIDs and hashes.
const IDEMPOTENCY_KEY = /^[\x21-\x7e]{1,200}$/;

/**
 * POST /api/v1/flows — ingest a batch of flow records (JSON array, NDJSON or an IPFIX file,
 * optionally gzip). The batch is atomic and the answer is sent only after it is
 * stored; a retry with the same Idempotency-Key is applied once.
 */
export async function action({ request, context }: Route.ActionArgs) {
  const { db, env, logger, manager, parsePool } = context;
  try {
    if (request.method !== "POST") throw new ApiError(405, "method_not_allowed", "Use POST to send flow records.");
    const principal = await authenticateKey(db, request, "ingest");
    const idempotencyKey = request.headers.get("idempotency-key") ?? undefined;
    if (idempotencyKey !== undefined && !IDEMPOTENCY_KEY.test(idempotencyKey)) {
      throw new ApiError(400, "invalid_idempotency_key", "Idempotency-Key must be 1–200 printable ASCII characters without spaces.");
    }
    const { packed, ipfix, ignoredFields } = await readFlowBatch(request, { maxBodyBytes: env.INGEST_MAX_BODY_BYTES, maxRecords: env.INGEST_MAX_RECORDS }, parsePool);
    const answer = await manager.ingest({
      tenant: principal.tenant,
      collector: principal.collector,
      records: packed,
      // The manager's clock: flow times are checked against it (tests inject one).
      receivedAt: manager.now(),
      idempotencyKey,
      source: ipfix ? "ipfix-file" : "json",
      ignoredFields,
    });
    await touchKey(db, principal.keyId);
    // What an IPFIX file held besides its records (unusable ones, sampling, enterprise elements).
    return Response.json(ipfix && !answer.duplicate ? { ...answer, ipfix } : answer, { headers: { "Cache-Control": "no-store" } });
  } catch (error) {
    return errorResponse(error, logger);
  }
}

export function loader() {
  return new ApiError(405, "method_not_allowed", "Use POST to send flow records.").toResponse({ Allow: "POST" });
}

function errorResponse(error: unknown, logger: Route.ActionArgs["context"]["logger"]): Response {
  if (error instanceof ApiError) return error.toResponse(error.status === 405 ? { Allow: "POST" } : undefined);
  // Records refused for their times by the manager (app/ingest/time-check.ts), matched by code.
  const refused = error as { code?: unknown; details?: RecordProblem[]; invalidCount?: number };
  if (refused?.code === "weir_times_refused") return invalidRecords(refused.details ?? [], refused.invalidCount ?? 0).toResponse();
  if (error instanceof ParsePoolFull) {
    logger.warn({ limit: error.maxQueuedBytes }, "ingest: parse queue full");
    return new ApiError(
      503,
      "overloaded",
      "Weir is parsing as many batches as it can hold; nothing of this batch was stored. Retry after a second with the same Idempotency-Key.",
    ).toResponse({ "Retry-After": "1" });
  }
  if (isBusy(error)) {
    logger.warn({ err: error }, "ingest: database busy");
    return new ApiError(503, "busy", "The database is busy; nothing of this batch was stored. Retry with the same Idempotency-Key.").toResponse({ "Retry-After": "1" });
  }
  logger.error({ err: error }, "ingest failed");
  return new ApiError(500, "internal_error", "Ingest failed; nothing of this batch was stored. Retry with the same Idempotency-Key.").toResponse();
}

function isBusy(error: unknown): boolean {
  const code = (error as { code?: string }).code ?? "";
  return code.startsWith("SQLITE_BUSY") || code.startsWith("SQLITE_LOCKED");
}
