import { data, Form, useNavigation } from "react-router";
import { ApiError } from "~/auth/api-keys.server";
import { requireMember } from "~/auth/guards.server";
import { MergeList } from "~/components/merge/MergeList";
import { MergeSummary } from "~/components/merge/MergeSummary";
import { SampleExport } from "~/components/merge/SampleExport";
import { SampleUpload } from "~/components/merge/SampleUpload";
import { Button, Cautions, EmptyState, ErrorState, Field, inputClass, PageHeader, Panel } from "~/components/ui";
import { mergeAnswer, type MergeAnswer } from "~/merges/answer";
import { copiesAndMerges } from "~/query/collector-kinds.server";
import { createMerge, deleteMerge, listMerges, refuseTakenName, streamCollectorNames, type MergeActor } from "~/merges/merges.server";
import { planMerge } from "~/merges/plan.server";
import { parseMergeRequest, type MergeIssue } from "~/merges/request.server";
import { formatUtcMinute, parseUtcMinute, UTC_MINUTE_PATTERN } from "~/slice/format";
import { collectorNameSchema } from "~/tenants.server";
import type { Route } from "./+types/console.merge";

export { ErrorBoundary } from "~/components/ErrorPanel";

export const meta: Route.MetaFunction = () => [{ title: "Merge · Weir" }];

/** Windows a preview or a created merge lists on the page; the totals cover all. */
const PAGE_WINDOW_LIMIT = 50;
const HOUR_MS = 3_600_000;

/** Merge (engineers and admins): stream collectors to choose from, existing merges, upload limits. */
export async function loader({ request, context, params }: Route.LoaderArgs) {
  const { tenant } = await requireMember(request, context, params.tenant, "engineer");
  const [streams, merges, special] = await Promise.all([streamCollectorNames(context.db, tenant.id), listMerges(context.db, tenant.id), copiesAndMerges(context.db, tenant.id)]);
  // Copies (collectors filled by sample-file imports) with the collectors they came from.
  const copies: Record<string, string[]> = Object.fromEntries(special.filter((c) => c.kind === "copy").map((c) => [c.name, c.of]));
  // The last 24 hours up to the next whole hour, computed here so server and browser show the same defaults.
  const to = Math.ceil(Date.now() / HOUR_MS) * HOUR_MS;
  return {
    tenant: { slug: tenant.slug, name: tenant.name, sampleSize: tenant.sampleSize, coordinated: tenant.coordinated },
    streams,
    copies,
    merges,
    defaults: { from: formatUtcMinute(to - 24 * HOUR_MS), to: formatUtcMinute(to) },
    range: { from: to - 24 * HOUR_MS, to },
    maxBytes: context.env.SAMPLES_MAX_BODY_BYTES,
  };
}

type FormValues = { name: string; collectors: string[]; from: string; to: string; sampleSize: string };
type FieldErrors = Partial<Record<"name" | "collectors" | "from" | "to" | "sampleSize", string>>;

export async function action({ request, context, params }: Route.ActionArgs) {
  const { user, tenant } = await requireMember(request, context, params.tenant, "engineer");
  const actor: MergeActor = { id: user.id, label: user.login ?? user.email };
  const form = await request.formData();
  const intent = form.get("intent");
  const text = (field: string) => {
    const value = form.get(field);
    return typeof value === "string" ? value : "";
  };
  const mergeCtx = { db: context.db, manager: context.manager, node: context.env.NODE_ID };

  if (intent === "delete") {
    const name = collectorNameSchema.safeParse(text("name"));
    if (!name.success) return data({ intent: "delete" as const, ok: false as const, message: "Could not delete: the form named no merge." }, { status: 400 });
    try {
      const deleted = await deleteMerge(mergeCtx, tenant.id, name.data, actor);
      return { intent: "delete" as const, ok: true as const, name: deleted.name, inputs: deleted.inputs };
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      return data({ intent: "delete" as const, ok: false as const, message: error.message }, { status: error.status });
    }
  }
  const mode = intent === "preview" ? ("preview" as const) : intent === "create" ? ("create" as const) : null;
  if (mode === null) {
    return data({ intent: "unknown" as const, ok: false as const, message: "The form must say Preview, Create merge or Delete." }, { status: 400 });
  }

  const values: FormValues = {
    name: text("name").trim(),
    collectors: form.getAll("collectors").filter((c): c is string => typeof c === "string"),
    from: text("from").trim(),
    to: text("to").trim(),
    sampleSize: text("sampleSize").trim(),
  };
  const fail = (status: number, message: string, details: MergeIssue[]) =>
    data({ intent: mode, ok: false as const, message, fieldErrors: fieldErrors(details), values }, { status });

  const parsed = parseMergeRequest({
    name: values.name,
    collectors: values.collectors,
    from: fromUtcInput(values.from),
    to: fromUtcInput(values.to),
    sampleSize: values.sampleSize === "" ? undefined : /^\d{1,9}$/.test(values.sampleSize) ? Number(values.sampleSize) : values.sampleSize,
    preview: mode === "preview",
  });
  if (!parsed.ok) return fail(400, "Fix the marked fields; nothing was merged.", parsed.details);

  const mergeTenant = { id: tenant.id, sampleSize: tenant.sampleSize, coordinated: tenant.coordinated };
  try {
    if (mode === "preview") {
      await refuseTakenName(context.db, tenant.id, parsed.request.name);
      const plan = await planMerge(context.db, mergeTenant, parsed.request);
      const answer = mergeAnswer(plan, { preview: true, createdBy: actor.label, createdAt: null, windowLimit: PAGE_WINDOW_LIMIT });
      return { intent: mode, ok: true as const, answer, values };
    }
    const { plan, createdAt } = await createMerge(mergeCtx, mergeTenant, parsed.request, actor);
    const answer = mergeAnswer(plan, { preview: false, createdBy: actor.label, createdAt, windowLimit: PAGE_WINDOW_LIMIT });
    return { intent: mode, ok: true as const, answer, values };
  } catch (error) {
    if (!(error instanceof ApiError)) throw error;
    const details = Array.isArray(error.extra.details) ? (error.extra.details as MergeIssue[]) : [];
    return fail(error.status, error.message, details);
  }
}

/** The first message per form field; `collectors[2]` marks the collectors field. */
function fieldErrors(details: MergeIssue[]): FieldErrors {
  const out: FieldErrors = {};
  for (const d of details) {
    const field = d.path.replace(/[[.].*$/, "");
    if ((field === "name" || field === "collectors" || field === "from" || field === "to" || field === "sampleSize") && !out[field]) out[field] = d.message;
  }
  return out;
}

/** The form's `YYYY-MM-DD HH:MM` (24-hour UTC, the console's time form) as ISO 8601; other text goes to the request's own reader as typed. */
function fromUtcInput(text: string): string {
  const ms = parseUtcMinute(text);
  return ms === null ? text : new Date(ms).toISOString();
}

export default function Merge({ loaderData, actionData }: Route.ComponentProps) {
  const { tenant, streams, copies, merges, defaults, range, maxBytes } = loaderData;
  const outcome = actionData?.intent === "preview" || actionData?.intent === "create" ? actionData : undefined;
  const created = outcome?.ok && outcome.intent === "create" ? outcome.answer : undefined;
  return (
    <>
      <PageHeader
        title="Merge"
        lead={
          <>
            Merge the samples of several of {tenant.name}'s collectors, window by window, into one merged collector that Slice and the estimate API answer from
            by its name. Export a sample file of any range, or upload one exported elsewhere, below.
          </>
        }
      />
      <div className="mb-6 flex flex-col gap-3">
        <Explanation coordinated={tenant.coordinated} />
        <Cautions compact />
      </div>

      {actionData?.intent === "delete" ? <DeleteOutcome outcome={actionData} /> : null}
      {actionData?.intent === "unknown" ? (
        <div className="mb-6">
          <ErrorState title="Nothing done" message={actionData.message} />
        </div>
      ) : null}

      <div className="flex flex-col gap-6">
        <Panel title="New merge">
          {streams.length === 0 ? (
            <EmptyState title="No collectors to merge yet">
              <p>A merge takes the samples of stream collectors, the ones that post flow records. Once collectors have sent records, choose them here.</p>
            </EmptyState>
          ) : (
            <MergeForm
              // A created merge starts the next one from a clean form.
              key={created ? `${created.name}@${created.createdAt}` : "form"}
              tenantSlug={tenant.slug}
              streams={streams}
              copies={copies}
              sampleSize={tenant.sampleSize}
              defaults={defaults}
              failed={outcome && !outcome.ok ? outcome : undefined}
              values={outcome && !created ? outcome.values : undefined}
            />
          )}
        </Panel>

        {outcome?.ok ? <Outcome answer={outcome.answer} /> : null}

        <Panel title="Merges">
          {merges.length === 0 ? (
            <EmptyState title="No merges yet">
              <p>A merge you create appears here with its inputs, range, sample size and who made it.</p>
            </EmptyState>
          ) : (
            <MergeList tenantSlug={tenant.slug} merges={merges} />
          )}
        </Panel>

        <SampleExport tenantSlug={tenant.slug} collectors={streams} copies={copies} merges={merges.map((m) => m.name)} defaults={range} />

        <SampleUpload tenantSlug={tenant.slug} collectors={streams} maxBytes={maxBytes} />
      </div>
    </>
  );
}

function Explanation({ coordinated }: { coordinated: boolean }) {
  return (
    <div className="rounded-md border-l-4 border-sand-400 bg-river-900 px-4 py-3 text-sm text-river-200">
      <p>
        Priority samples of disjoint record streams merge into the priority sample of their union (Duffield, Lund, Thorup, J. ACM 54(6), 2007): per window,
        the merged reservoir keeps the k highest priorities of all inputs, with k = min(the sample size you ask for, every input's k), and its τ follows from
        theirs, so its estimates stay unbiased.{" "}
        {coordinated
          ? "This tenant samples with coordinated priorities, so a flow exported by more than one collector has the same priority everywhere and the merge counts it once."
          : "This is valid when the collectors saw different records; if two collectors export the same flows, a merge counts them twice (a tenant with coordinated priorities counts them once)."}
      </p>
      <p className="mt-2">
        The merge is stored as a collector of its own: choose it by name under Merges in Slice. It is counted only when picked, never together with its own
        inputs. It is a snapshot: windows still open are merged as they stand now, and records that arrive later are not added.
      </p>
    </div>
  );
}

function MergeForm({
  tenantSlug,
  streams,
  copies,
  sampleSize,
  defaults,
  failed,
  values,
}: {
  tenantSlug: string;
  streams: string[];
  copies: Record<string, string[]>;
  sampleSize: number;
  defaults: { from: string; to: string };
  failed?: { message: string; fieldErrors: FieldErrors };
  values?: FormValues;
}) {
  const navigation = useNavigation();
  const busy = navigation.state === "submitting" ? navigation.formData?.get("intent") : null;
  const errors = failed?.fieldErrors ?? {};
  const chosen = values?.collectors ?? [];
  return (
    <Form method="post" action={`/t/${tenantSlug}/merge`} noValidate className="flex flex-col gap-5">
      <fieldset className="flex flex-col gap-2">
        <legend className="mb-1 text-sm font-medium text-river-100">Collectors</legend>
        <div className="flex max-h-52 flex-wrap gap-x-5 gap-y-1.5 overflow-y-auto">
          {streams.map((name) => (
            <label key={name} className="inline-flex items-center gap-2 text-sm text-river-100">
              <input type="checkbox" name="collectors" value={name} defaultChecked={chosen.includes(name)} className="accent-sand-300" />
              <span className="font-mono">{name}</span>
              {copies[name] ? <span className="text-xs text-river-300">copy of {copies[name].join(", ")}</span> : null}
            </label>
          ))}
        </div>
        {errors.collectors ? (
          <p role="alert" className="text-sm text-red-300">{`Collectors: ${errors.collectors}.`}</p>
        ) : (
          <p className="text-xs text-river-300">
            Stream collectors only (up to 50); merges are not merged again, and a copy (imported sample files) not with the collector it came from.
          </p>
        )}
      </fieldset>
      <div className="grid gap-4 md:grid-cols-2 lg:grid-cols-4">
        {/* Text in the console's one time form, not the browser's date-time input, which follows its locale (a 12-hour clock in some). */}
        <Field label="From (UTC)" htmlFor="merge-from" error={errors.from ? `From ${errors.from}.` : undefined} hint="24-hour, YYYY-MM-DD HH:MM; windows starting at or after this time.">
          <input id="merge-from" name="from" type="text" inputMode="numeric" pattern={UTC_MINUTE_PATTERN} placeholder="YYYY-MM-DD HH:MM" autoComplete="off" defaultValue={values?.from ?? defaults.from} className={`${inputClass} font-mono placeholder:font-sans placeholder:italic`} />
        </Field>
        <Field label="To (UTC)" htmlFor="merge-to" error={errors.to ? `To ${errors.to}.` : undefined} hint="24-hour; windows starting before this time; at most 400 days.">
          <input id="merge-to" name="to" type="text" inputMode="numeric" pattern={UTC_MINUTE_PATTERN} placeholder="YYYY-MM-DD HH:MM" autoComplete="off" defaultValue={values?.to ?? defaults.to} className={`${inputClass} font-mono placeholder:font-sans placeholder:italic`} />
        </Field>
        <Field
          label="Sample size k"
          htmlFor="merge-k"
          error={errors.sampleSize ? `Sample size ${errors.sampleSize}.` : undefined}
          hint={`16–65536; the tenant's is ${sampleSize}. Each window keeps min(this, every input's k).`}
        >
          <input id="merge-k" name="sampleSize" type="number" min={16} max={65536} defaultValue={values?.sampleSize ?? String(sampleSize)} className={`${inputClass} font-mono`} />
        </Field>
        <Field
          label="Name"
          htmlFor="merge-name"
          error={errors.name ? `Name: ${errors.name}.` : undefined}
          hint="The merged collector's name, as Slice lists it; not an existing collector's."
        >
          <input
            id="merge-name"
            name="name"
            defaultValue={values?.name ?? ""}
            placeholder="e.g. all-pops-may"
            autoComplete="off"
            spellCheck={false}
            className={`${inputClass} font-mono`}
          />
        </Field>
      </div>
      <div className="flex flex-wrap items-center gap-3">
        <Button type="submit" name="intent" value="preview" tone="quiet" disabled={busy != null}>
          {busy === "preview" ? "Previewing…" : "Preview"}
        </Button>
        <Button type="submit" name="intent" value="create" disabled={busy != null}>
          {busy === "create" ? "Merging…" : "Create merge"}
        </Button>
        <p className="text-xs text-river-300">Preview shows the merged windows without storing anything.</p>
      </div>
      {failed ? <ErrorState title="Not merged" message={failed.message} /> : null}
    </Form>
  );
}

function Outcome({ answer }: { answer: MergeAnswer }) {
  const title = answer.preview ? `Preview of ${answer.name}` : `Created ${answer.name}`;
  return (
    <Panel title={title}>
      {answer.preview ? null : (
        <p role="status" className="mb-4 text-sm text-river-100">
          {`The merge ${answer.name} of ${answer.collectors.join(", ")} is stored: choose it under Merges in Slice. Records that arrive later are not added to it.`}
        </p>
      )}
      <MergeSummary answer={answer} />
    </Panel>
  );
}

function DeleteOutcome({ outcome }: { outcome: { ok: true; name: string; inputs: string[] } | { ok: false; message: string } }) {
  if (!outcome.ok) {
    return (
      <div className="mb-6">
        <ErrorState title="Not deleted" message={outcome.message} />
      </div>
    );
  }
  return (
    <p role="status" className="mb-6 rounded-md border-l-4 border-sand-400 bg-river-900 px-4 py-3 text-sm text-river-100">
      {`Deleted the merge ${outcome.name}; its inputs (${outcome.inputs.join(", ")}) are unchanged.`}
    </p>
  );
}
