import type { AppLoadContext } from "react-router";
import { ApiError, authenticateKey, touchKey } from "~/auth/api-keys.server";
import { parseEstimateSearchParams } from "~/query/request";
import { parseSampleFile, SampleFileError, toSampleFile } from "~/samples/document";
import { exportSamples } from "~/samples/export.server";
import { decodeUtf8, discardBody, fileDigest, gunzipLimited, importSampleSet, invalidSampleFile, parseImportCollector, readLimitedBody } from "~/samples/import.server";
import { MergedCollectorError } from "~/tenants.server";
import type { Route } from "./+types/api.v1.samples";

// Samples change with every ingest batch.
const NO_STORE = { "Cache-Control": "no-store" };
const PARAMETERS = ["from", "to", "collectors"];

/**
 * GET /api/v1/samples?from=…&to=…&collectors=a,b — the tenant's priority samples whose
 * window starts in [from, to), every node's, as one sample file (docs/sample-file.md).
 * from and to take the forms the estimate API takes; collectors is optional.
 */
export async function loader({ request, context }: Route.LoaderArgs) {
  try {
    // The key first, so a caller without one learns nothing about the parameters.
    const principal = await authenticateKey(context.db, request, "query");
    touchKey(context.db, principal.keyId).catch((error: unknown) => context.logger.warn({ err: error }, "could not record key use"));
    const range = parseRange(new URL(request.url).searchParams);
    const set = await exportSamples(context.db, principal.tenant, range);
    return new Response(JSON.stringify(toSampleFile(set)), {
      headers: {
        ...NO_STORE,
        "Content-Type": "application/json; charset=utf-8",
        "Content-Disposition": `attachment; filename="weir-samples-${compactTime(range.from)}-${compactTime(range.to)}.json"`,
      },
    });
  } catch (error) {
    if (error instanceof ApiError) return error.toResponse(NO_STORE);
    context.logger.error({ err: error }, "sample export failed");
    return new ApiError(500, "internal_error", "The samples could not be exported; the server log has the cause.").toResponse(NO_STORE);
  }
}

/**
 * POST /api/v1/samples?collector=NAME — imports a sample file (the body, application/json,
 * gzip allowed) into the collector NAME: each of the file's windows is merged into that
 * collector's reservoir of the same window, all in one transaction (docs/sample-file.md,
 * "Importing"). Needs a key with the ingest scope, and NAME must be the key's own collector
 * (the default when absent): a key writes only to its own collector.
 */
export async function action({ request, context }: Route.ActionArgs) {
  if (request.method !== "POST") {
    await discardBody(request);
    return new ApiError(405, "method_not_allowed", "Use GET to export samples and POST to import a sample file.").toResponse({ ...NO_STORE, Allow: "GET, HEAD, POST" });
  }
  try {
    const principal = await authenticateKey(context.db, request, "ingest");
    touchKey(context.db, principal.keyId).catch((error: unknown) => context.logger.warn({ err: error }, "could not record key use"));
    const collector = parseImportParams(new URL(request.url).searchParams) ?? principal.collector.name;
    if (collector !== principal.collector.name) {
      const message = `names ${collector}, but this key belongs to the collector ${principal.collector.name}; a key imports only into its own collector (make a key for ${collector} on the Keys page, or upload the file on the console's Merge page)`;
      throw new ApiError(403, "wrong_collector", `Cannot import: collector ${message}.`, { details: [{ path: "collector", message }] });
    }
    const bytes = await readSampleFile(request, context);
    const set = parseSampleFile(decodeUtf8(bytes));
    const summary = await importSampleSet(
      { db: context.db, manager: context.manager, node: context.env.NODE_ID },
      principal.tenant,
      collector,
      set,
      { id: null, label: `key ${principal.prefix}` },
      fileDigest(bytes),
    );
    return Response.json(summary, { headers: NO_STORE });
  } catch (error) {
    // Refused before the body was read (key, parameters, content type): read it off first.
    await discardBody(request);
    if (error instanceof SampleFileError) return invalidSampleFile(error).toResponse(NO_STORE);
    if (error instanceof MergedCollectorError) return new ApiError(409, "merged_collector", error.message).toResponse(NO_STORE);
    if (error instanceof ApiError) return error.toResponse(NO_STORE);
    context.logger.error({ err: error }, "sample import failed");
    return new ApiError(500, "internal_error", "The sample file could not be imported; nothing was stored. The server log has the cause.").toResponse(NO_STORE);
  }
}

const IMPORT_PARAMETERS = ["collector"];

/** The one parameter of an import, `collector`, validated as every collector name is; null when absent (the key's own collector). */
function parseImportParams(params: URLSearchParams): string | null {
  const details = [...new Set(params.keys())]
    .filter((name) => !IMPORT_PARAMETERS.includes(name))
    .map((path) => ({ path, message: `is not a known parameter (known: ${IMPORT_PARAMETERS.join(", ")})` }));
  if (params.getAll("collector").length > 1) details.push({ path: "collector", message: "is given more than once; an import goes into one collector" });
  if (details.length > 0) {
    const more = details.length > 1 ? ` (and ${details.length - 1} more)` : "";
    throw new ApiError(400, "invalid_query", `Invalid query: ${details[0].path}: ${details[0].message}${more}.`, { details });
  }
  return params.has("collector") ? parseImportCollector(params.get("collector"), "collector", "invalid_query") : null;
}

/** The body's bytes (gunzipped): JSON only, gzip allowed, never more than SAMPLES_MAX_BODY_BYTES in memory. */
async function readSampleFile(request: Request, context: AppLoadContext): Promise<Uint8Array> {
  const type = (request.headers.get("content-type") ?? "").split(";")[0].trim().toLowerCase();
  if (type !== "application/json") {
    throw new ApiError(415, "unsupported_media_type", `Content-Type must be application/json (a sample file)${type ? `, not ${type}` : ""}.`);
  }
  const encoding = (request.headers.get("content-encoding") ?? "identity").trim().toLowerCase();
  if (encoding !== "identity" && encoding !== "gzip") {
    throw new ApiError(415, "unsupported_media_type", `Content-Encoding must be gzip or absent, not ${encoding}.`);
  }
  const maxBytes = context.env.SAMPLES_MAX_BODY_BYTES;
  const body = await readLimitedBody(request, maxBytes);
  return encoding === "gzip" ? await gunzipLimited(body, maxBytes) : body;
}

/**
 * from, to and collectors, validated by the estimate query's own rules (time forms, to after
 * from, at most 400 days, collector names), so both endpoints read a range the same way.
 */
function parseRange(params: URLSearchParams): { from: number; to: number; collectors: string[] } {
  const unknown = [...new Set(params.keys())].filter((name) => !PARAMETERS.includes(name));
  const details = unknown.map((path) => ({ path, message: `is not a known parameter (known: ${PARAMETERS.join(", ")})` }));
  const parsed = parseEstimateSearchParams(new URLSearchParams([...params].filter(([name]) => PARAMETERS.includes(name))));
  if (!parsed.ok) details.push(...parsed.details);
  if (details.length > 0 || !parsed.ok) {
    const first = details[0];
    const more = details.length > 1 ? ` (and ${details.length - 1} more)` : "";
    throw new ApiError(400, "invalid_query", `Invalid query: ${first.path}: ${first.message}${more}.`, { details });
  }
  return { from: parsed.query.from, to: parsed.query.to, collectors: parsed.query.where.collectors };
}

/** 2024-05-01T02:00:00.000Z → 20240501T020000Z: no colons, which some file systems refuse. */
function compactTime(ms: number): string {
  return new Date(ms).toISOString().replace(".000Z", "Z").replace(/[-:]/g, "");
}
