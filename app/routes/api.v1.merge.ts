import type { AppLoadContext } from "react-router";
import { ApiError, authenticateKey, touchKey, type KeyPrincipal } from "~/auth/api-keys.server";
import { readLimitedBody } from "~/http/limited-body.server";
import { API_WINDOW_LIMIT, mergeAnswer } from "~/merges/answer";
import { createMerge, deleteMerge, refuseTakenName, type MergeActor } from "~/merges/merges.server";
import { planMerge, type MergeTenant } from "~/merges/plan.server";
import { parseMergeRequest } from "~/merges/request.server";
import { collectorNameSchema, findTenantById } from "~/tenants.server";
import type { Route } from "./+types/api.v1.merge";

// A merge request is a name, a few collector names and a range; anything larger is a mistake.
const MAX_BODY_BYTES = 64 * 1024;
const NO_STORE = { "Cache-Control": "no-store" };
const ALLOW = { Allow: "POST, DELETE" };

/**
 * POST /api/v1/merge — merges the samples of several stream collectors, window by window,
 * into one merged collector queryable by name (Duffield, Lund, Thorup, J. ACM 54(6), 2007:
 * the merge of priority samples of disjoint streams is the priority sample of the union).
 * Body: { name, collectors, from, to, sampleSize?, preview? }. 201 with the stored merge,
 * 200 with the same answer for a preview (nothing stored; a taken name is a 409 there too,
 * so a preview says whether the create would go through).
 *
 * DELETE /api/v1/merge?name=NAME — deletes a merged collector (its inputs stay).
 *
 * Both need an API key with the query scope.
 */
export async function action({ request, context }: Route.ActionArgs) {
  if (request.method !== "POST" && request.method !== "DELETE") return methodNotAllowed();
  try {
    const principal = await authenticateKey(context.db, request, "query");
    touchKey(context.db, principal.keyId).catch((error: unknown) => context.logger.warn({ err: error }, "could not record key use"));
    const actor: MergeActor = { id: null, label: `key ${principal.prefix}` };
    return request.method === "POST" ? await merge(request, context, principal, actor) : await remove(request, context, principal, actor);
  } catch (error) {
    if (error instanceof ApiError) return error.toResponse(NO_STORE);
    context.logger.error({ err: error }, "merge failed");
    return new ApiError(500, "internal_error", "The merge could not be completed; nothing was stored. The server log has the cause.").toResponse(NO_STORE);
  }
}

export function loader() {
  return methodNotAllowed();
}

function methodNotAllowed(): Response {
  return new ApiError(405, "method_not_allowed", "Use POST with a JSON body to merge (or preview), DELETE ?name=… to delete a merge.").toResponse({
    ...NO_STORE,
    ...ALLOW,
  });
}

async function merge(request: Request, context: AppLoadContext, principal: KeyPrincipal, actor: MergeActor): Promise<Response> {
  const params = [...new URL(request.url).searchParams.keys()];
  if (params.length > 0) {
    const details = [...new Set(params)].map((path) => ({ path, message: "POST takes the request in the JSON body, not the query string" }));
    throw new ApiError(400, "invalid_request", "Invalid merge request: send every field in the JSON body.", { details });
  }
  const text = new TextDecoder().decode(
    await readLimitedBody(request, MAX_BODY_BYTES, () => new ApiError(413, "payload_too_large", `A merge request body is at most ${MAX_BODY_BYTES} bytes.`)),
  );
  let body: unknown;
  try {
    body = JSON.parse(text);
  } catch (error) {
    const reason = (error as Error).message;
    throw new ApiError(400, "invalid_json", `Invalid merge request: the body is not JSON (${reason}).`, { details: [{ path: "", message: `is not JSON: ${reason}` }] });
  }
  const parsed = parseMergeRequest(body);
  if (!parsed.ok) throw new ApiError(400, "invalid_request", parsed.message, { details: parsed.details });

  const tenant = await mergeTenant(context, principal);
  if (parsed.request.preview) {
    await refuseTakenName(context.db, tenant.id, parsed.request.name);
    const plan = await planMerge(context.db, tenant, parsed.request);
    return Response.json(mergeAnswer(plan, { preview: true, createdBy: actor.label, createdAt: null, windowLimit: API_WINDOW_LIMIT }), { headers: NO_STORE });
  }
  const { plan, createdAt } = await createMerge({ db: context.db, manager: context.manager, node: context.env.NODE_ID }, tenant, parsed.request, actor);
  return Response.json(mergeAnswer(plan, { preview: false, createdBy: actor.label, createdAt, windowLimit: API_WINDOW_LIMIT }), { status: 201, headers: NO_STORE });
}

async function remove(request: Request, context: AppLoadContext, principal: KeyPrincipal, actor: MergeActor): Promise<Response> {
  const params = new URL(request.url).searchParams;
  const details = [...new Set(params.keys())].filter((key) => key !== "name").map((path) => ({ path, message: "is not a known parameter (known: name)" }));
  const names = params.getAll("name");
  if (names.length !== 1) details.push({ path: "name", message: names.length === 0 ? "is required: DELETE /api/v1/merge?name=<merge>" : "is given more than once; give it once" });
  else {
    const checked = collectorNameSchema.safeParse(names[0]);
    if (!checked.success) details.push({ path: "name", message: checked.error.issues[0].message });
  }
  if (details.length > 0) throw new ApiError(400, "invalid_request", `Invalid request: ${details[0].path}: ${details[0].message}.`, { details });

  const deleted = await deleteMerge({ db: context.db, manager: context.manager, node: context.env.NODE_ID }, principal.tenant.id, names[0], actor);
  return Response.json(
    {
      deleted: {
        name: deleted.name,
        inputs: deleted.inputs,
        from: new Date(deleted.from).toISOString(),
        to: new Date(deleted.to).toISOString(),
        sampleSize: deleted.sampleSize,
        coordinated: deleted.coordinated,
        windows: deleted.windows,
        kept: deleted.kept,
        duplicatesDropped: deleted.duplicatesDropped,
        createdBy: deleted.createdBy,
        createdAt: new Date(deleted.createdAt).toISOString(),
      },
      note: `Deleted the merge ${deleted.name} and its samples; its inputs (${deleted.inputs.join(", ")}) are unchanged.`,
    },
    { headers: NO_STORE },
  );
}

/** The tenant's current settings: coordination is read from its row, as the console reads it. */
async function mergeTenant(context: AppLoadContext, principal: KeyPrincipal): Promise<MergeTenant> {
  const row = await findTenantById(context.db, principal.tenant.id);
  if (!row) throw new ApiError(401, "unauthenticated", "Unknown or revoked API key.");
  return { id: row.id, sampleSize: row.sampleSize, coordinated: row.coordinated };
}
