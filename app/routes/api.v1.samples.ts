import { ApiError, authenticateKey, touchKey } from "~/auth/api-keys.server";
import { parseEstimateSearchParams } from "~/query/request";
import { toSampleFile } from "~/samples/document";
import { exportSamples } from "~/samples/export.server";
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

export function action() {
  return new ApiError(405, "method_not_allowed", "Use GET to export samples.").toResponse({ ...NO_STORE, Allow: "GET, HEAD" });
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
