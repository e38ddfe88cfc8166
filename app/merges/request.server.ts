import { z } from "zod";
import { MAX_SPAN_DAYS, requestTimeSchema } from "~/query/request";
import { collectorNameSchema, sampleSizeSchema } from "~/tenants.server";

/** Most collectors one merge takes: each is read whole for every window in range. */
export const MAX_MERGE_INPUTS = 50;

const DAY_MS = 86_400_000;

/** A merge request as validated: times in epoch ms; `sampleSize` absent means the tenant's k. */
export interface MergeRequest {
  name: string;
  collectors: string[];
  from: number;
  to: number;
  sampleSize?: number;
  preview: boolean;
  /** Merge a copy with its origin (or two copies of one origin) anyway; absent or false: 422 copy_with_origin. */
  allowOverlap?: boolean;
}

/** One problem with a request; `path` names the field as the client wrote it (`collectors[2]`). */
export interface MergeIssue {
  path: string;
  message: string;
}

export type ParsedMerge = { ok: true; request: MergeRequest } | { ok: false; message: string; details: MergeIssue[] };

const FIELDS = ["name", "collectors", "from", "to", "sampleSize", "preview", "allowOverlap"] as const;

/**
 * The body of `POST /api/v1/merge` and of the console's Merge form: the name the merge is
 * stored and queried under, the stream collectors it merges, the window range [from, to)
 * in the estimate API's time forms, and the wanted sample size.
 */
export const mergeRequestSchema = z
  .strictObject(
    {
      name: z.string({ error: "must be the name of the merged collector, as text" }).pipe(collectorNameSchema),
      collectors: z
        .array(z.string({ error: "must be a collector name, as text" }).pipe(collectorNameSchema), { error: "must be a list of collector names" })
        .min(1, { error: "must name at least one collector" })
        .max(MAX_MERGE_INPUTS, { error: `names at most ${MAX_MERGE_INPUTS} collectors; merge the rest into a second merge` }),
      from: requestTimeSchema,
      to: requestTimeSchema,
      sampleSize: z.int({ error: "must be a whole number from 16 to 65536" }).pipe(sampleSizeSchema).optional(),
      preview: z.boolean({ error: "must be true or false" }).default(false),
      allowOverlap: z.boolean({ error: "must be true or false (true merges a copy with its origin anyway)" }).default(false),
    },
    { error: `the request must be a JSON object with ${FIELDS.join(", ")}` },
  )
  .superRefine((r, ctx) => {
    const seen = new Set<string>();
    r.collectors.forEach((name, i) => {
      if (seen.has(name)) ctx.addIssue({ code: "custom", path: ["collectors", i], message: `names ${name} twice; name each collector once` });
      seen.add(name);
    });
    if (r.to <= r.from) {
      ctx.addIssue({ code: "custom", path: ["to"], message: `must be after from (${new Date(r.from).toISOString()})` });
    } else if (r.to - r.from > MAX_SPAN_DAYS * DAY_MS) {
      const days = Math.ceil((r.to - r.from) / DAY_MS);
      ctx.addIssue({ code: "custom", path: ["to"], message: `the range spans ${days} days; one merge covers at most ${MAX_SPAN_DAYS} days` });
    }
  });

function formatPath(path: readonly PropertyKey[]): string {
  let text = "";
  for (const segment of path) text += typeof segment === "number" ? `[${segment}]` : text === "" ? String(segment) : `.${String(segment)}`;
  return text;
}

/**
 * Validates a merge request (parsed JSON, or the console form made into the same shape).
 *
 * @example parseMergeRequest({ name: "all-pops", collectors: ["pop-west", "pop-east"], from: "2024-05-01T00:00:00Z", to: "2024-05-02T00:00:00Z" })
 *   // { ok: true, request: { name: "all-pops", collectors: ["pop-west", "pop-east"], from: 1714521600000, to: 1714608000000, preview: false } }
 * @example parseMergeRequest({ name: "x", collectors: [], from: 0, to: 1 })
 *   // { ok: false, details: [{ path: "collectors", message: "must name at least one collector" }], … }
 */
export function parseMergeRequest(body: unknown): ParsedMerge {
  const parsed = mergeRequestSchema.safeParse(body);
  if (parsed.success) return { ok: true, request: parsed.data };
  const details: MergeIssue[] = [];
  for (const issue of parsed.error.issues) {
    if (issue.code === "unrecognized_keys") {
      for (const key of issue.keys) {
        const shown = key.length > 64 ? `${key.slice(0, 64)}…` : key;
        details.push({ path: formatPath([...issue.path, shown]), message: `is not a known field (known: ${FIELDS.join(", ")})` });
      }
      continue;
    }
    details.push({ path: formatPath(issue.path), message: issue.message });
  }
  const first = details[0];
  const more = details.length > 1 ? ` (and ${details.length - 1} more)` : "";
  return { ok: false, message: `Invalid merge request: ${first.path === "" ? "" : `${first.path}: `}${first.message}${more}.`, details };
}
