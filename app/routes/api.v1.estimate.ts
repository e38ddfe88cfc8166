import type { AppLoadContext } from "react-router";
import { ApiError, authenticateKey, touchKey } from "~/auth/api-keys.server";
import { optionalUser } from "~/auth/guards.server";
import { membershipBySlug } from "~/auth/users.server";
import { runEstimate, type EstimateTenant } from "~/query/estimate.server";
import { parseEstimateRequest, parseEstimateSearchParams, type ParsedQuery } from "~/query/request";
import type { Route } from "./+types/api.v1.estimate";

// A query is a few filters; anything this large is a mistake or an attack, not a query.
const MAX_BODY_BYTES = 256 * 1024;
// Answers depend on data that changes with every ingest batch.
const NO_STORE = { "Cache-Control": "no-store" };

/**
 * Names the tenant when a console session asks instead of an API key. It is not part of
 * the query, so it is taken out before the query string is parsed.
 */
const TENANT_PARAM = "tenant";

/** GET /api/v1/estimate?from=…&to=…&src=…: the query in the query string. */
export async function loader({ request, context }: Route.LoaderArgs) {
  return respond(request, context, async (params) => parseEstimateSearchParams(params));
}

/** POST /api/v1/estimate with the query as a JSON body. */
export async function action({ request, context }: Route.ActionArgs) {
  if (request.method !== "POST") {
    return Response.json(
      { error: { code: "method_not_allowed", message: "Use GET with a query string or POST with a JSON body." } },
      { status: 405, headers: { ...NO_STORE, Allow: "GET, HEAD, POST" } },
    );
  }
  return respond(request, context, async (params) => {
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

/**
 * Authenticates first, so a caller without a key or session learns nothing about the
 * request format. `parse` gets the query string without the `tenant` parameter.
 */
async function respond(request: Request, context: AppLoadContext, parse: (params: URLSearchParams) => Promise<ParsedQuery>): Promise<Response> {
  try {
    const { tenant, params } = await authenticate(request, context);
    const parsed = await parse(params);
    if (!parsed.ok) throw new ApiError(400, "invalid_query", parsed.message, { details: parsed.details });
    const answer = await runEstimate(context, tenant, parsed.query);
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

/**
 * The tenant a request may query, and its query string without `tenant`.
 *
 * With an `Authorization` header (scripts, collectors) the API key decides, exactly as for
 * every other endpoint; a `tenant` parameter is then allowed only when it names the key's
 * own tenant. Without one, a console session may ask for a tenant it belongs to (any role:
 * reading estimates is what a viewer does), named by `?tenant=<slug>` for GET and POST
 * alike. The session cookie is SameSite=Lax, so another site cannot make a browser POST
 * with it, and a cross-site GET cannot read the answer (no CORS headers).
 */
async function authenticate(request: Request, context: AppLoadContext): Promise<{ tenant: EstimateTenant; params: URLSearchParams }> {
  const params = new URL(request.url).searchParams;
  const named = params.getAll(TENANT_PARAM);
  params.delete(TENANT_PARAM);
  const slug = named[0];
  // Checked only once the caller is known, like every other problem with the request.
  const once = () => {
    if (named.length > 1) throw invalidTenant(`is given ${named.length} times; give it once`);
  };

  const hasKey = request.headers.has("authorization");
  if (hasKey || slug === undefined) {
    // A signed-in person who forgot ?tenant= gets told how to ask, not "send a key".
    if (!hasKey && (await optionalUser(request, context))) {
      throw invalidTenant("is required with a console session: add ?tenant=<slug> to the URL");
    }
    const principal = await authenticateKey(context.db, request, "query");
    touchKey(context.db, principal.keyId).catch((error: unknown) => context.logger.warn({ err: error }, "could not record key use"));
    if (slug !== undefined && slug !== principal.tenant.slug) {
      throw invalidTenant(`names ${JSON.stringify(slug)}, but this API key belongs to tenant ${principal.tenant.slug}; leave tenant out with a key`);
    }
    once();
    return { tenant: principal.tenant, params };
  }

  const user = await optionalUser(request, context);
  if (!user) {
    throw new ApiError(401, "unauthenticated", "Sign in to the console to query with ?tenant=, or send an API key as 'Authorization: Bearer <key>'.");
  }
  const membership = await membershipBySlug(context.db, user.id, slug);
  // The same answer for "no such tenant" and "not yours", as the console's pages give.
  if (!membership) throw new ApiError(404, "not_found", "No such tenant, or you are not a member of it.");
  once();
  return { tenant: membership.tenant, params };
}

function invalidTenant(message: string): ApiError {
  return new ApiError(400, "invalid_query", `Invalid query: tenant: ${message}.`, { details: [{ path: TENANT_PARAM, message }] });
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
