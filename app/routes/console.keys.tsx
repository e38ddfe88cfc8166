import { useState } from "react";
import { data, Form, Link, useNavigation, useSearchParams } from "react-router";
import { createApiKey, revokeApiKey, scopesFor } from "~/auth/api-keys.server";
import { requireMember } from "~/auth/guards.server";
import { recordAudit } from "~/audit.server";
import { Button, CollectorNameInput, ConfirmRow, EmptyState, ErrorState, Field, inputClass, PageHeader, Panel } from "~/components/ui";
import { collectorNameRule, findTenantKey, keyActionSchema, listCollectorNames, listTenantKeys, type KeyRow } from "~/keys/keys.server";
import { SCOPE_CHOICES, SCOPE_HELP, scopeLabel, type ScopeChoice } from "~/keys/scope";
import { SecretOnce } from "~/keys/SecretOnce";
import { ensureCollector, MergedCollectorError } from "~/tenants.server";
import type { Route } from "./+types/console.keys";

export { ErrorBoundary } from "~/components/ErrorPanel";

export const meta: Route.MetaFunction = () => [{ title: "Keys · Weir" }];

// The answer to a create carries the one copy of a secret: no cache may keep it.
export const headers: Route.HeadersFunction = () => ({ "Cache-Control": "no-store" });

export async function loader({ request, context, params }: Route.LoaderArgs) {
  const { tenant } = await requireMember(request, context, params.tenant, "admin");
  const [keys, collectors] = await Promise.all([listTenantKeys(context.db, tenant.id), listCollectorNames(context.db, tenant.id)]);
  return {
    tenant: { slug: tenant.slug, name: tenant.name },
    keys,
    collectors,
    collectorRule: collectorNameRule(),
    // PUBLIC_URL when set: behind a proxy the request's own origin is not what collectors reach.
    origin: new URL(context.env.PUBLIC_URL ?? request.url).origin,
  };
}

type FieldErrors = Partial<Record<"collector" | "scope", string>>;

export async function action({ request, context, params }: Route.ActionArgs) {
  const { user, tenant } = await requireMember(request, context, params.tenant, "admin");
  const actor = { id: user.id, label: user.login ?? user.email };
  const form = Object.fromEntries(await request.formData());
  const parsed = keyActionSchema.safeParse(form);

  if (!parsed.success) {
    const fieldErrors: FieldErrors = {};
    for (const issue of parsed.error.issues) {
      const field = issue.path[0];
      if ((field === "collector" || field === "scope") && !fieldErrors[field]) fieldErrors[field] = issue.message;
    }
    const intent = form.intent === "revoke" ? "revoke" : "create";
    const first = parsed.error.issues[0]?.message ?? "The form was not understood.";
    const message =
      intent === "revoke" ? `Could not revoke: the key prefix ${first}.` : Object.keys(fieldErrors).length > 0 ? "Fix the marked fields and try again." : first;
    return data(
      {
        intent,
        ok: false as const,
        message,
        fieldErrors,
        values: { collector: typeof form.collector === "string" ? form.collector : "", scope: typeof form.scope === "string" ? form.scope : "" },
      },
      { status: 400 },
    );
  }

  if (parsed.data.intent === "create") {
    const { collector: name, scope } = parsed.data;
    let collector;
    try {
      collector = await ensureCollector(context.db, tenant.id, name);
    } catch (error) {
      if (!(error instanceof MergedCollectorError)) throw error;
      return data(
        { intent: "create" as const, ok: false as const, message: "Fix the marked fields and try again.", fieldErrors: { collector: error.message } as FieldErrors, values: { collector: name, scope: scope as string } },
        { status: 409 },
      );
    }
    const created = await createApiKey(context.db, { tenantId: tenant.id, collectorId: collector.id, scopes: scopesFor(scope), createdBy: actor.label });
    await recordAudit(context.db, {
      tenantId: tenant.id,
      actor,
      action: "key.create",
      target: created.prefix,
      detail: { prefix: created.prefix, collector: collector.name, scope },
    });
    return { intent: "create" as const, ok: true as const, created: { secret: created.key, prefix: created.prefix, collector: collector.name, scope } };
  }

  const { prefix } = parsed.data;
  const key = await findTenantKey(context.db, tenant.id, prefix);
  if (!key) {
    return data({ intent: "revoke" as const, ok: false as const, message: `This tenant has no key ${prefix}.` }, { status: 404 });
  }
  // A second click, or a second admin, finds it revoked already: the wanted state, nothing to record.
  if (key.revokedAt !== null || !(await revokeApiKey(context.db, prefix, tenant.id))) {
    return { intent: "revoke" as const, ok: true as const, prefix, collector: key.collector, already: true };
  }
  await recordAudit(context.db, {
    tenantId: tenant.id,
    actor,
    action: "key.revoke",
    target: prefix,
    detail: { prefix, collector: key.collector, scope: key.scopes },
  });
  return { intent: "revoke" as const, ok: true as const, prefix, collector: key.collector, already: false };
}

export default function Keys({ loaderData, actionData }: Route.ComponentProps) {
  const { tenant, keys, collectors, collectorRule, origin } = loaderData;
  const created = actionData?.intent === "create" && actionData.ok ? actionData.created : undefined;
  return (
    <>
      <PageHeader
        title="Keys"
        lead={
          <>
            API keys let collectors and scripts use Weir's HTTP API for {tenant.name}. Each key belongs to one collector and writes only to it: flow records
            and sample-file imports with an ingest key go to that collector, never to another. Weir keeps only a SHA-256 hash of a key, so a secret is shown
            once, when it is made.
          </>
        }
      />
      {created ? <SecretOnce secret={created.secret} prefix={created.prefix} collector={created.collector} scope={created.scope} origin={origin} /> : null}
      {actionData?.intent === "revoke" ? <RevokeOutcome outcome={actionData} /> : null}
      <div className="flex flex-col gap-6">
        {/* Keyed by the new key, so a success starts the next key from a clean form. */}
        <CreateKeyForm
          key={created?.prefix ?? "new"}
          tenantSlug={tenant.slug}
          collectors={collectors}
          rule={collectorRule}
          actionData={actionData?.intent === "create" && !actionData.ok ? actionData : undefined}
        />
        <Panel title="Keys">
          {keys.length === 0 ? (
            <EmptyState title="No keys yet">
              <p>
                Collectors and scripts post flow records with <code className="font-mono text-river-100">Authorization: Bearer &lt;key&gt;</code> to{" "}
                <code className="font-mono text-river-100">/api/v1/flows</code>; a query key reads estimates from{" "}
                <code className="font-mono text-river-100">/api/v1/estimate</code>. Create the first key with the form above.
              </p>
            </EmptyState>
          ) : (
            <KeyTable tenantSlug={tenant.slug} keys={keys} />
          )}
        </Panel>
      </div>
    </>
  );
}

function RevokeOutcome({ outcome }: { outcome: { ok: true; prefix: string; collector: string; already: boolean } | { ok: false; message: string } }) {
  if (!outcome.ok)
    return (
      <div className="mb-6">
        <ErrorState title="Not revoked" message={outcome.message} />
      </div>
    );
  return (
    <p role="status" className="mb-6 rounded-md border-l-4 border-sand-400 bg-river-900 px-4 py-3 text-sm text-river-100">
      {outcome.already
        ? `Key ${outcome.prefix} (collector ${outcome.collector}) was already revoked.`
        : `Key ${outcome.prefix} (collector ${outcome.collector}) is revoked: requests with it now get 401.`}
    </p>
  );
}

function CreateKeyForm({
  tenantSlug,
  collectors,
  rule,
  actionData,
}: {
  tenantSlug: string;
  collectors: string[];
  rule: { pattern: string; message: string };
  actionData?: { message: string; fieldErrors: FieldErrors; values: { collector: string; scope: string } };
}) {
  const navigation = useNavigation();
  const creating = navigation.state === "submitting" && navigation.formData?.get("intent") === "create";
  const [collector, setCollector] = useState(actionData?.values.collector ?? "");
  const [touched, setTouched] = useState(actionData !== undefined);
  const chosenScope = (SCOPE_CHOICES as readonly string[]).includes(actionData?.values.scope ?? "") ? (actionData!.values.scope as ScopeChoice) : "ingest";

  const name = collector.trim();
  const localError = name === "" ? "is required" : new RegExp(rule.pattern).test(name) ? undefined : rule.message;
  const shownError =
    touched && localError
      ? `Collector name ${localError}.`
      : actionData?.fieldErrors.collector
        ? `Collector name ${actionData.fieldErrors.collector}.`
        : undefined;
  const exists = collectors.includes(name);

  return (
    <Panel title="New key">
      <Form
        method="post"
        action={`/t/${tenantSlug}/keys`}
        noValidate
        onSubmit={(e) => {
          if (localError) {
            e.preventDefault();
            setTouched(true);
          }
        }}
        className="grid gap-5 lg:grid-cols-[minmax(0,20rem)_minmax(0,1fr)_auto] lg:items-start"
      >
        <input type="hidden" name="intent" value="create" />
        <Field
          label="Collector"
          htmlFor="key-collector"
          error={shownError}
          hint={
            <>
              {name === ""
                ? "Choose an existing collector or type a new name."
                : exists
                  ? `Existing collector ${name}.`
                  : `New collector: ${name} is created with the key.`}
              <span className="block">1–64 letters, digits, . _ : or -, starting with a letter or digit.</span>
            </>
          }
        >
          <CollectorNameInput
            id="key-collector"
            value={collector}
            onType={(value) => {
              setCollector(value);
              setTouched(true);
            }}
            collectors={collectors}
            invalid={Boolean(shownError)}
            placeholder="e.g. pop-west"
          />
        </Field>
        <fieldset className="flex flex-col gap-2">
          <legend className="mb-1 text-sm font-medium text-river-100">Scope</legend>
          {SCOPE_CHOICES.map((s) => (
            <label key={s} className="flex items-start gap-2 text-sm">
              <input type="radio" name="scope" value={s} defaultChecked={s === chosenScope} className="mt-1 accent-sand-300" />
              <span>
                <span className="font-medium text-river-50">{SCOPE_HELP[s].label}</span>
                <span className="text-river-300"> — {SCOPE_HELP[s].help}</span>
              </span>
            </label>
          ))}
          {actionData?.fieldErrors.scope ? (
            <p role="alert" className="text-sm text-red-300">
              {`Scope ${actionData.fieldErrors.scope}.`}
            </p>
          ) : null}
        </fieldset>
        <div className="flex flex-col gap-2 lg:pt-6">
          <Button type="submit" disabled={creating}>
            {creating ? "Creating…" : "Create key"}
          </Button>
        </div>
        {actionData && !actionData.fieldErrors.collector && !actionData.fieldErrors.scope ? (
          <p role="alert" className="text-sm text-red-300 lg:col-span-3">
            {actionData.message}
          </p>
        ) : null}
      </Form>
    </Panel>
  );
}

function KeyTable({ tenantSlug, keys }: { tenantSlug: string; keys: KeyRow[] }) {
  const [search] = useSearchParams();
  const confirming = search.get("revoke");
  const navigation = useNavigation();
  const revoking = navigation.state === "submitting" && navigation.formData?.get("intent") === "revoke";
  return (
    <div className="overflow-x-auto">
      <table className="sticky-first w-full text-left text-sm">
        <caption className="sr-only">API keys of this tenant, newest first</caption>
        <thead className="border-b border-river-700 text-xs tracking-wide text-river-300 uppercase">
          <tr>
            <th scope="col" className="py-2 pr-4 font-medium">
              Prefix
            </th>
            <th scope="col" className="py-2 pr-4 font-medium">
              Scope
            </th>
            <th scope="col" className="py-2 pr-4 font-medium">
              Collector
            </th>
            <th scope="col" className="py-2 pr-4 font-medium">
              Created by
            </th>
            <th scope="col" className="py-2 pr-4 font-medium">
              Created
            </th>
            <th scope="col" className="py-2 pr-4 font-medium">
              Last used
            </th>
            <th scope="col" className="py-2 pr-4 font-medium">
              Status
            </th>
            {/* relative: keeps the visually hidden label inside the scrolling table on narrow screens. */}
            <th scope="col" className="relative py-2 font-medium">
              <span className="sr-only">Actions</span>
            </th>
          </tr>
        </thead>
        <tbody>
          {keys.map((k) => {
            const active = k.revokedAt === null;
            return <KeyRows key={k.prefix} k={k} active={active} confirm={active && confirming === k.prefix} tenantSlug={tenantSlug} revoking={revoking} />;
          })}
        </tbody>
      </table>
      <p className="mt-3 text-xs text-river-400">Times are UTC. Last use is recorded at most once a minute per key.</p>
    </div>
  );
}

function KeyRows({ k, active, confirm, tenantSlug, revoking }: { k: KeyRow; active: boolean; confirm: boolean; tenantSlug: string; revoking: boolean }) {
  return (
    <>
      <tr className={`border-b border-river-800 ${active ? "" : "text-river-400"}`} data-prefix={k.prefix}>
        <td className="py-2.5 pr-4 font-mono text-river-50">{k.prefix}</td>
        <td className="py-2.5 pr-4">{scopeLabel(k.scopes)}</td>
        <td className="py-2.5 pr-4 font-mono">{k.collector}</td>
        <td className="py-2.5 pr-4">{k.createdBy ?? <span className="text-river-400">not recorded</span>}</td>
        <td className="py-2.5 pr-4 font-mono text-xs whitespace-nowrap">{utc(k.createdAt)}</td>
        <td className="py-2.5 pr-4 font-mono text-xs whitespace-nowrap">
          {k.lastUsedAt === null ? <span className="font-sans text-river-400">never</span> : utc(k.lastUsedAt)}
        </td>
        <td className="py-2.5 pr-4">
          {active ? (
            <span className="rounded-full border border-river-500 px-2 py-0.5 text-xs text-river-100">active</span>
          ) : (
            <span className="rounded-full border border-red-400/40 px-2 py-0.5 text-xs text-red-200" title={`Revoked ${utc(k.revokedAt!)}`}>
              revoked
            </span>
          )}
        </td>
        <td className="py-2.5 text-right">
          {active && !confirm ? (
            <Link
              to={`?revoke=${k.prefix}`}
              preventScrollReset
              className="text-sm text-red-200 underline-offset-4 hover:underline"
              aria-label={`Revoke key ${k.prefix}`}
            >
              Revoke
            </Link>
          ) : null}
        </td>
      </tr>
      {confirm ? (
        <ConfirmRow
          colSpan={8}
          action={`/t/${tenantSlug}/keys`}
          fields={{ intent: "revoke", prefix: k.prefix }}
          message={`Revoke ${k.prefix} of collector ${k.collector}? Every request with it gets 401 from now on; this cannot be undone.`}
          label="Revoke key"
          busyLabel="Revoking…"
          busy={revoking}
        />
      ) : null}
    </>
  );
}

/** Epoch ms as `YYYY-MM-DD HH:MM`, UTC, so server and browser render the same text. */
function utc(ms: number): string {
  return new Date(ms).toISOString().slice(0, 16).replace("T", " ");
}
