import type { AppLoadContext } from "react-router";
import { ApiError, authenticateKey, touchKey } from "~/auth/api-keys.server";
import { runEstimate } from "~/query/estimate.server";
import { parseEstimateRequest, parseEstimateSearchParams, type ParsedQuery } from "~/query/request";
import type { Route } from "./+types/api.v1.estimate";

// A query is a few filters; anything this large is a mistake or an attack, not a query.
const MAX_BODY_BYTES = 256 * 1024;
// Answers depend on data that changes with every ingest batch.
const NO_STORE = { "Cache-Control": "no-store" };

/** GET /api/v1/estimate?from=…&to=…&src=…: the query in the query string. */
export async function loader({ request, context }: Route.LoaderArgs) {
  return respond(request, context, async () => parseEstimateSearchParams(new URL(request.url).searchParams));
}

/** POST /api/v1/estimate with the query as a JSON body. */
export async function action({ request, context }: Route.ActionArgs) {
  if (request.method !== "POST") {
    return Response.json(
      { error: { code: "method_not_allowed", message: "Use GET with a query string or POST with a JSON body." } },
      { status: 405, headers: { ...NO_STORE, Allow: "GET, HEAD, POST" } },
    );
  }
  return respond(request, context, async () => {
    const params = new URL(request.url).searchParams;
    if ([...params.keys()].length > 0) {
      const details = [...new Set(params.keys())].map((path) => ({ path, message: "POST takes the query in the JSON body, not the query string" }));
      return { ok: false, message: "Invalid query: with POST, send every field in the JSON body.", details };
    }
    const text = await readBody(request);
    let body: unknown;
    try {
      body = JSON.parse(text);
    } catch (error) {
      const reason = (error as Error).message;
      return { ok: false, message: `Invalid query: the body is not JSON (${reason}).`, details: [{ path: "", message: `is not JSON: ${reason}` }] };
    }
    return parseEstimateRequest(body);
  });
}

/** Authenticates first, so a caller without a key learns nothing about the request format. */
async function respond(request: Request, context: AppLoadContext, parse: () => Promise<ParsedQuery>): Promise<Response> {
  try {
    const principal = await authenticateKey(context.db, request, "query");
    touchKey(context.db, principal.keyId).catch((error: unknown) => context.logger.warn({ err: error }, "could not record key use"));
    const parsed = await parse();
    if (!parsed.ok) throw new ApiError(400, "invalid_query", parsed.message, { details: parsed.details });
    const answer = await runEstimate(context, principal.tenant, parsed.query);
    return Response.json(answer, { headers: NO_STORE });
  } catch (error) {
    if (error instanceof ApiError) return error.toResponse(NO_STORE);
    context.logger.error({ err: error }, "estimate failed");
    return Response.json(
      { error: { code: "internal_error", message: "The estimate could not be computed; the server log has the cause." } },
      { status: 500, headers: NO_STORE },
    );
  }
}

/** The body as text, refused with 413 past MAX_BODY_BYTES without buffering the rest. */
async function readBody(request: Request): Promise<string> {
  const tooLarge = () =>
    new ApiError(413, "payload_too_large", `An estimate request body is at most ${MAX_BODY_BYTES} bytes.`);
  const declared = Number(request.headers.get("content-length"));
  if (declared > MAX_BODY_BYTES) throw tooLarge();
  if (!request.body) return "";
  const reader = request.body.getReader();
  const chunks: Uint8Array[] = [];
  let size = 0;
  for (;;) {
    const { done, value } = await reader.read();
    if (done) break;
    size += value.byteLength;
    if (size > MAX_BODY_BYTES) {
      await reader.cancel();
      throw tooLarge();
    }
    chunks.push(value);
  }
  return Buffer.concat(chunks).toString("utf8");
}
