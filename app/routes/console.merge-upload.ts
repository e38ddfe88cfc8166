import { z } from "zod";
import { ApiError } from "~/auth/api-keys.server";
import { requireMember } from "~/auth/guards.server";
import { parseSampleFile, SampleFileError } from "~/samples/document";
import { decodeUtf8, discardBody, fileDigest, importSampleSet, invalidSampleFile, parseImportCollector, readLimitedBody, sampleFileTooLarge } from "~/samples/import.server";
import { ingestIpfixUpload, isIpfixUpload } from "~/ingest/ipfix-upload.server";
import { MergedCollectorError } from "~/tenants.server";
import type { Route } from "./+types/console.merge-upload";

// The answer reports what was written to this tenant's samples.
const NO_STORE = { "Cache-Control": "no-store" };

/** Room for the multipart framing and the collector field around a file of the full limit. */
const MULTIPART_OVERHEAD_BYTES = 16 * 1024;

/** The upload form: exactly a collector name and one file. */
const uploadFormSchema = z.strictObject(
  {
    collector: z.unknown(),
    file: z.instanceof(File, { error: "must be a file (a sample file exported by Weir, or an IPFIX file)" }),
  },
  { error: "must be a form with the fields collector and file" },
);

/**
 * POST /t/:tenant/merge/upload — the Merge page's upload (multipart/form-data with `collector`
 * and `file`), for engineers and admins. A sample file is the same import as
 * POST /api/v1/samples; an IPFIX file (RFC 5655: named .ipfix, or starting with a version-10
 * message) is the same batch as POST /api/v1/flows with Content-Type application/ipfix.
 * Answers JSON: the summary, or `{ error: { code, message, details } }` with the same statuses.
 */
export async function action({ request, context, params }: Route.ActionArgs) {
  const { user, tenant } = await requireMember(request, context, params.tenant, "engineer").catch(async (refusal: unknown) => {
    // The redirect to sign in, the 404 for a non-member, the 403 for a viewer: read the body off first.
    await discardBody(request);
    throw refusal;
  });
  try {
    const maxBytes = context.env.SAMPLES_MAX_BODY_BYTES;
    const form = await readUploadForm(request, maxBytes);
    const collector = parseImportCollector(form.collector, "collector", "invalid_form");
    if (form.file.size > maxBytes) throw sampleFileTooLarge(maxBytes);
    const bytes = new Uint8Array(await form.file.arrayBuffer());
    if (isIpfixUpload(form.file.name, bytes)) {
      const summary = await ingestIpfixUpload(
        { db: context.db, manager: context.manager, parser: context.parsePool, maxBodyBytes: maxBytes },
        tenant,
        collector,
        bytes,
        { id: user.id, label: user.login ?? user.email },
      );
      return Response.json(summary, { headers: NO_STORE });
    }
    const set = parseSampleFile(decodeUtf8(bytes));
    const summary = await importSampleSet(
      { db: context.db, manager: context.manager, node: context.env.NODE_ID },
      tenant,
      collector,
      set,
      { id: user.id, label: user.login ?? user.email },
      fileDigest(bytes),
    );
    return Response.json(summary, { headers: NO_STORE });
  } catch (error) {
    await discardBody(request);
    if (error instanceof SampleFileError) return invalidSampleFile(error).toResponse(NO_STORE);
    if (error instanceof MergedCollectorError) {
      return new ApiError(409, "merged_collector", error.message, { details: [{ path: "collector", message: "names a merged collector" }] }).toResponse(NO_STORE);
    }
    if (error instanceof ApiError) return error.toResponse(NO_STORE);
    // Matched by name: the pool's class is the host's copy, not this module graph's.
    if ((error as Error).name === "ParsePoolFull") {
      return new ApiError(503, "overloaded", "Weir is decoding as many uploads as it can hold; nothing was stored. Try again in a moment.").toResponse({ ...NO_STORE, "Retry-After": "1" });
    }
    context.logger.error({ err: error }, "sample upload failed");
    return new ApiError(500, "internal_error", "The sample file could not be imported; nothing was stored. The server log has the cause.").toResponse(NO_STORE);
  }
}

/** Uploads are POSTed by the Merge page; there is nothing to GET here. */
export function loader() {
  return new ApiError(405, "method_not_allowed", "Upload a sample file with POST (multipart/form-data) from the Merge page.").toResponse({ ...NO_STORE, Allow: "POST" });
}

/**
 * Reads the multipart body under the limit (Content-Length up front, then while streaming),
 * and only then lets the platform's parser split it: `request.formData()` alone would buffer
 * whatever size was sent.
 */
async function readUploadForm(request: Request, maxBytes: number): Promise<z.infer<typeof uploadFormSchema>> {
  const contentType = request.headers.get("content-type") ?? "";
  const type = contentType.split(";")[0].trim().toLowerCase();
  if (type !== "multipart/form-data") {
    throw new ApiError(415, "unsupported_media_type", `Send the upload as multipart/form-data with the fields collector and file${type ? `, not ${type}` : ""}.`);
  }
  let body: Uint8Array<ArrayBuffer>;
  try {
    body = await readLimitedBody(request, maxBytes + MULTIPART_OVERHEAD_BYTES);
  } catch (error) {
    // Stated with the file limit people set, not the framing allowance.
    if (error instanceof ApiError && error.status === 413) throw sampleFileTooLarge(maxBytes);
    throw error;
  }
  let form: FormData;
  try {
    form = await new Response(body, { headers: { "content-type": contentType } }).formData();
  } catch {
    throw new ApiError(400, "invalid_form", "The upload is not a readable multipart/form-data body.");
  }
  const fields: Record<string, FormDataEntryValue> = {};
  const details: { path: string; message: string }[] = [];
  for (const [name, value] of form) {
    if (name in fields) details.push({ path: name, message: "is given more than once" });
    fields[name] = value;
  }
  const parsed = uploadFormSchema.safeParse(fields);
  if (!parsed.success) {
    for (const issue of parsed.error.issues) {
      if (issue.code === "unrecognized_keys") details.push(...issue.keys.map((key) => ({ path: key, message: "is not a field of the upload form (collector, file)" })));
      else details.push({ path: issue.path.join(".") || "(form)", message: issue.path.length === 1 && fields[String(issue.path[0])] === undefined ? "is required" : issue.message });
    }
  }
  if (details.length > 0 || !parsed.success) {
    const more = details.length > 1 ? ` (and ${details.length - 1} more)` : "";
    throw new ApiError(400, "invalid_form", `Invalid upload: ${details[0].path}: ${details[0].message}${more}.`, { details });
  }
  return parsed.data;
}
