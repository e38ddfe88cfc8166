import type { AppLoadContext } from "react-router";
import { ApiError, authenticateKey, touchKey } from "~/auth/api-keys.server";
import { optionalUser } from "~/auth/guards.server";
import { membershipBySlug } from "~/auth/users.server";
import { calibrationReport } from "~/calibration/report.server";
import type { Route } from "./+types/api.v1.calibration";

// The report changes with every calibration run.
const NO_STORE = { "Cache-Control": "no-store" };
const TENANT_PARAM = "tenant";

/**
 * GET /api/v1/calibration: how often the 95% intervals of closed windows' totals covered their
 * exact totals over the last day, week and month (app/calibration/report.server.ts). Asked
 * like /api/v1/estimate: with a query-scope API key, or with a console session and
 * `?tenant=<slug>` (any role).
 */
export async function loader({ request, context }: Route.LoaderArgs) {
  try {
    const tenant = await authenticate(request, context);
    return Response.json(await calibrationReport(context.db, tenant, Date.now()), { headers: NO_STORE });
  } catch (error) {
    if (error instanceof ApiError) return error.toResponse(NO_STORE);
    context.logger.error({ err: error }, "calibration report failed");
    return Response.json(
      { error: { code: "internal_error", message: "The calibration report could not be read; the server log has the cause." } },
      { status: 500, headers: NO_STORE },
    );
  }
}

export async function action() {
  return Response.json(
    { error: { code: "method_not_allowed", message: "Use GET: the calibration report takes no body." } },
    { status: 405, headers: { ...NO_STORE, Allow: "GET, HEAD" } },
  );
}

/**
 * The tenant a request may read, by the rules of /api/v1/estimate (see its `authenticate`):
 * an `Authorization` header decides alone (a `tenant` parameter must then name the key's
 * tenant); without one, a console session may name a tenant it belongs to. The caller is
 * known before any parameter is judged, so a stranger learns nothing of the format.
 */
async function authenticate(request: Request, context: AppLoadContext): Promise<{ id: number; slug: string }> {
  const params = new URL(request.url).searchParams;
  const named = params.getAll(TENANT_PARAM);
  const slug = named[0];
  const checkParams = () => {
    if (named.length > 1) throw invalid(TENANT_PARAM, `is given ${named.length} times; give it once`);
    const unknown = [...new Set(params.keys())].filter((name) => name !== TENANT_PARAM);
    if (unknown.length > 0) throw invalid(unknown[0], "is not a parameter of the calibration report (it takes only tenant, with a console session)");
  };

  const hasKey = request.headers.has("authorization");
  if (hasKey || slug === undefined) {
    if (!hasKey && (await optionalUser(request, context))) {
      throw invalid(TENANT_PARAM, "is required with a console session: add ?tenant=<slug> to the URL");
    }
    const principal = await authenticateKey(context.db, request, "query");
    touchKey(context.db, principal.keyId).catch((error: unknown) => context.logger.warn({ err: error }, "could not record key use"));
    if (slug !== undefined && slug !== principal.tenant.slug) {
      throw invalid(TENANT_PARAM, `names ${JSON.stringify(slug)}, but this API key belongs to tenant ${principal.tenant.slug}; leave tenant out with a key`);
    }
    checkParams();
    return principal.tenant;
  }

  const user = await optionalUser(request, context);
  if (!user) {
    throw new ApiError(401, "unauthenticated", "Sign in to the console to read the report with ?tenant=, or send an API key as 'Authorization: Bearer <key>'.");
  }
  const membership = await membershipBySlug(context.db, user.id, slug);
  // The same answer for "no such tenant" and "not yours", as the console's pages give.
  if (!membership) throw new ApiError(404, "not_found", "No such tenant, or you are not a member of it.");
  checkParams();
  return membership.tenant;
}

function invalid(path: string, message: string): ApiError {
  return new ApiError(400, "invalid_query", `Invalid query: ${path}: ${message}.`, { details: [{ path, message }] });
}
