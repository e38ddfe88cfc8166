import { z } from "zod";
import { ApiError } from "~/auth/api-keys.server";
import { requireMember } from "~/auth/guards.server";
import { recordAudit } from "~/audit.server";
import { parseEstimateSearchParams } from "~/query/request";
import { toSampleFile } from "~/samples/document";
import { exportSamples } from "~/samples/export.server";
import { formatUtc, formatUtcMinute, parseUtcMinute } from "~/slice/format";
import type { Route } from "./+types/console.merge-export";

// The file holds this tenant's samples as they stand now.
const NO_STORE = { "Cache-Control": "no-store" };

/**
 * The form's fields as they arrive in the query string: from and to once each (the console's
 * "YYYY-MM-DD HH:MM" UTC text, or any form the estimate API takes), collectors any number of
 * times (checkboxes) or comma-separated.
 */
const exportFormSchema = z.strictObject(
  {
    from: z.array(z.string()).length(1, "is required, once"),
    to: z.array(z.string()).length(1, "is required, once"),
    collectors: z.array(z.string()).default([]),
  },
  { error: "must be a form with the fields from, to and collectors" },
);

/**
 * GET /t/:tenant/merge/export?from=…&to=…&collectors=a&collectors=b — the Merge page's sample
 * export, for engineers and admins (a sample file holds kept flow records: reading it is
 * reading records, as Slice's groups are, but it takes them out of Weir whole, so viewers, who
 * only read estimates, may not). The same file as GET /api/v1/samples (docs/sample-file.md)
 * with the session instead of a key, sent as a download, and one Ledger entry per export.
 * Errors answer JSON `{ error: { code, message, details } }` with the API's statuses.
 */
export async function loader({ request, context, params }: Route.LoaderArgs) {
  const { user, tenant } = await requireMember(request, context, params.tenant, "engineer");
  try {
    const range = parseExportQuery(new URL(request.url).searchParams);
    const set = await exportSamples(context.db, tenant, range);
    const body = JSON.stringify(toSampleFile(set));
    const kept = set.windows.reduce((sum, w) => sum + w.kept.length, 0);
    await recordAudit(context.db, {
      tenantId: tenant.id,
      actor: { id: user.id, label: user.login ?? user.email },
      action: "samples.export",
      target: range.collectors.length > 0 ? range.collectors.join(", ") : "every stream collector",
      detail: {
        range: `${formatUtcMinute(range.from)} – ${formatUtc(range.to)}`,
        windows: set.windows.length,
        keptRecords: kept,
        bytes: Buffer.byteLength(body),
      },
    });
    return new Response(body, {
      headers: {
        ...NO_STORE,
        "Content-Type": "application/json; charset=utf-8",
        "Content-Disposition": `attachment; filename="${exportFileName(tenant.slug, range.from, range.to)}"`,
      },
    });
  } catch (error) {
    if (error instanceof ApiError) return error.toResponse(NO_STORE);
    context.logger.error({ err: error }, "console sample export failed");
    return new ApiError(500, "internal_error", "The samples could not be exported; the server log has the cause.").toResponse(NO_STORE);
  }
}

/** The export reads; there is nothing to POST here. */
export function action() {
  return new ApiError(405, "method_not_allowed", "Export samples with GET from the Merge page.").toResponse({ ...NO_STORE, Allow: "GET, HEAD" });
}

/**
 * from, to and collectors: the form's shape by its schema, then the range by the estimate
 * query's own rules (time forms, to after from, at most 400 days, collector names), as
 * GET /api/v1/samples reads them.
 */
function parseExportQuery(params: URLSearchParams): { from: number; to: number; collectors: string[] } {
  const fields: Record<string, string[]> = {};
  for (const name of new Set(params.keys())) fields[name] = params.getAll(name);
  const form = exportFormSchema.safeParse(fields);
  if (!form.success) {
    const details = form.error.issues.flatMap((issue) =>
      issue.code === "unrecognized_keys"
        ? issue.keys.map((key) => ({ path: key, message: "is not a field of the export form (from, to, collectors)" }))
        : [{ path: issue.path.join(".") || "(form)", message: issue.message }],
    );
    throw invalid(details);
  }
  // The console's own time form, "2024-05-01 14:05", is UTC; anything else goes to the API's reader as typed.
  const instant = (text: string) => {
    const ms = parseUtcMinute(text);
    return ms === null ? text.trim() : new Date(ms).toISOString();
  };
  const query = new URLSearchParams({ from: instant(form.data.from[0]), to: instant(form.data.to[0]) });
  const collectors = form.data.collectors.flatMap((c) => c.split(",")).map((c) => c.trim()).filter((c) => c !== "");
  if (collectors.length > 0) query.set("collectors", collectors.join(","));
  const parsed = parseEstimateSearchParams(query);
  if (!parsed.ok) throw invalid(parsed.details);
  return { from: parsed.query.from, to: parsed.query.to, collectors: parsed.query.where.collectors };
}

function invalid(details: { path: string; message: string }[]): ApiError {
  const more = details.length > 1 ? ` (and ${details.length - 1} more)` : "";
  return new ApiError(400, "invalid_query", `Cannot export: ${details[0].path} ${details[0].message}${more}.`, { details });
}

/** `weir-samples-riverline-20240501T0200Z-20240501T0500Z.json`: no colons, which some file systems refuse. */
function exportFileName(tenant: string, from: number, to: number): string {
  const stamp = (ms: number) => `${new Date(ms).toISOString().slice(0, 16).replace(/[-:]/g, "")}Z`;
  return `weir-samples-${tenant}-${stamp(from)}-${stamp(to)}.json`;
}
