import { useEffect, useState } from "react";
import { data, Form, Link, useNavigation, useSearchParams, type AppLoadContext } from "react-router";
import useSWR from "swr";
import { requireMember } from "~/auth/guards.server";
import { roleAtLeast } from "~/auth/users.server";
import { ClaimedExportersTable } from "~/components/exporters/ClaimedExporters";
import { UnclaimedExportersTable } from "~/components/exporters/UnclaimedExporters";
import { Button, CollectorNameInput, ConfirmRow, EmptyState, ErrorState, Field, inputClass, LoadingState, PageHeader, Panel } from "~/components/ui";
import { claimExporter, claimRefusal, exporterActionSchema, releaseExporter } from "~/exporters/claims.server";
import { claimDomainLabel, describeClaim } from "~/exporters/format";
import { collectorNameRule, listCollectorNames } from "~/keys/keys.server";
import { fetchJson, type FetchError } from "~/slice/fetch-json";
import type { ExportersSnapshot } from "./console.exporters-data";
import type { Route } from "./+types/console.exporters";

export { ErrorBoundary } from "~/components/ErrorPanel";

export const meta: Route.MetaFunction = ({ data }) => [{ title: `Exporters · ${data?.tenant.name ?? "Tenant"} · Weir` }];

/** Polling period of the figures, as on Intake. */
const REFRESH_MS = 5000;

/** Where the listeners are: the ports they are bound to (null when off) and the address they bind to. */
function listeners(context: AppLoadContext) {
  // The running listeners know their ports (0 in the environment asks the OS for a free one).
  const { ipfixUdp, netflowUdp, ipfixTcp } = context.collection.ports;
  return { ipfixUdp: ipfixUdp ?? null, netflowUdp: netflowUdp ?? null, ipfixTcp: ipfixTcp ?? null, bindHost: context.env.COLLECT_HOST ?? context.env.HOST };
}

/** Exporters (every role reads; admins claim and release): the page; its figures come from /t/:tenant/exporters-data. */
export async function loader({ request, context, params }: Route.LoaderArgs) {
  const { tenant, role } = await requireMember(request, context, params.tenant);
  const admin = roleAtLeast(role, "admin");
  return {
    tenant: { slug: tenant.slug, name: tenant.name },
    canClaim: admin,
    listeners: listeners(context),
    // The host people reach the console on: usually the one exporters reach too (PUBLIC_URL behind a proxy).
    consoleHost: new URL(context.env.PUBLIC_URL ?? request.url).hostname,
    collectors: admin ? await listCollectorNames(context.db, tenant.id) : [],
    collectorRule: collectorNameRule(),
  };
}

type FieldErrors = Partial<Record<"cidr" | "domain" | "collector", string>>;
type FormValues = { cidr: string; domain: string; collector: string };

export async function action({ request, context, params }: Route.ActionArgs) {
  const { user, tenant } = await requireMember(request, context, params.tenant, "admin");
  const actor = { id: user.id, label: user.login ?? user.email };
  const form = Object.fromEntries(await request.formData());
  const values: FormValues = {
    cidr: typeof form.cidr === "string" ? form.cidr : "",
    domain: typeof form.domain === "string" ? form.domain : "",
    collector: typeof form.collector === "string" ? form.collector : "",
  };
  const intent = form.intent === "release" ? ("release" as const) : ("claim" as const);
  const refused = (status: number, message: string, fieldErrors: FieldErrors = {}) => data({ intent, ok: false as const, message, fieldErrors, values }, { status });

  const parsed = exporterActionSchema.safeParse(form);
  if (!parsed.success) {
    const fieldErrors: FieldErrors = {};
    for (const issue of parsed.error.issues) {
      const field = issue.path[0];
      if ((field === "cidr" || field === "domain" || field === "collector") && !fieldErrors[field]) fieldErrors[field] = issue.message;
    }
    const first = parsed.error.issues[0]?.message ?? "The form was not understood.";
    return refused(400, Object.keys(fieldErrors).length > 0 ? "Fix the marked fields and try again." : first, fieldErrors);
  }

  try {
    if (parsed.data.intent === "claim") {
      const { cidr, domain, collector } = parsed.data;
      const claim = await claimExporter(context.db, { tenantId: tenant.id, collector, cidr: cidr.cidr, domainId: domain, actor });
      await applyNow(context);
      return { intent: "claim" as const, ok: true as const, claim };
    }
    const { cidr, domain } = parsed.data;
    const released = await releaseExporter(context.db, { tenantId: tenant.id, cidr: cidr.cidr, domainId: domain, actor });
    await applyNow(context);
    return { intent: "release" as const, ok: true as const, released };
  } catch (error) {
    // Matched by its code: the refusal's class may come from another module graph.
    const refusal = claimRefusal(error);
    if (!refusal) throw error;
    return refused(refusal.status, refusal.message, refusal.field ? { [refusal.field]: refusal.message } : {});
  }
}

/** The listeners of this process take the change at once; other nodes notice it within seconds (claimsFingerprint). */
async function applyNow(context: AppLoadContext): Promise<void> {
  try {
    await context.collection.reloadClaims();
  } catch (error) {
    context.logger.warn({ err: error }, "exporters: reloading claims after a change failed; the periodic check will pick it up");
  }
}

export default function Exporters({ loaderData, actionData }: Route.ComponentProps) {
  const { tenant, canClaim, listeners, consoleHost, collectors, collectorRule } = loaderData;
  const { data: snapshot, error, isLoading, mutate } = useSWR<ExportersSnapshot, FetchError>(`/t/${tenant.slug}/exporters-data`, fetchJson, {
    refreshInterval: REFRESH_MS,
    refreshWhenHidden: true,
  });
  // A claim or release changes what the figures show: fetch them now rather than at the next poll.
  useEffect(() => {
    if (actionData?.ok) void mutate();
  }, [actionData, mutate]);
  const base = `/t/${tenant.slug}/exporters`;
  const claimed = actionData?.intent === "claim" && actionData.ok ? actionData.claim : undefined;

  return (
    <>
      <PageHeader
        title="Exporters"
        lead={
          <>
            Routers, switches and probes that send IPFIX (RFC 7011) or NetFlow v9 (RFC 3954) to Weir, and the collectors of {tenant.name} they feed. An exporter is
            not a key: a tenant admin claims it by its source address (or a CIDR) and, if needed, its observation domain. Refreshed every {REFRESH_MS / 1000} s.
          </>
        }
      />
      <div className="flex flex-col gap-6">
        <WhereToSend listeners={listeners} consoleHost={consoleHost} />
        {actionData ? <Outcome outcome={actionData} /> : null}
        {error ? <ErrorState title="Could not refresh Exporters" message={`${error.message}${snapshot ? " The figures below are from the last successful refresh." : ""}`} /> : null}
        {canClaim ? (
          <ClaimForm key={claimed ? `${claimed.id}` : "new"} action={base} collectors={collectors} rule={collectorRule} failed={actionData?.intent === "claim" && !actionData.ok ? actionData : undefined} />
        ) : null}
        <Panel title="Claimed exporters">
          {snapshot ? (
            snapshot.claimed.length > 0 ? (
              <ClaimedExportersTable exporters={snapshot.claimed} now={snapshot.now} />
            ) : snapshot.claims.length === 0 ? (
              <EmptyState title="No exporters claimed yet">
                <p>
                  {canClaim
                    ? "Claim an exporter with the form above, or pick one from the unclaimed exporters below once it has sent something."
                    : "A tenant admin claims exporters for this tenant's collectors; until then, records arrive only over the HTTP API."}
                </p>
              </EmptyState>
            ) : (
              <EmptyState title="Nothing received from the claimed exporters yet">
                <p>
                  Point each device at the ports above, from an address inside its claim. It appears here after its first message; if it does not, check that the port
                  is reachable from the device and, for a claim with an observation domain, that the device uses that domain.
                </p>
              </EmptyState>
            )
          ) : isLoading || !error ? (
            <LoadingState label="Reading exporter counters…" />
          ) : null}
        </Panel>
        <Panel title="Claims">
          {snapshot ? (
            snapshot.claims.length === 0 ? (
              <p className="text-sm text-river-300">This tenant has no claims.</p>
            ) : (
              <ClaimsTable claims={snapshot.claims} canRelease={canClaim} action={base} />
            )
          ) : isLoading || !error ? (
            <LoadingState label="Reading claims…" />
          ) : null}
        </Panel>
        {canClaim ? (
          <Panel title="Unclaimed exporters">
            <p className="mb-3 max-w-3xl text-sm text-river-300">
              Sources that sent to this deployment's listeners without matching any tenant's claim. Their messages feed nobody: they are dropped and counted. Only
              admins see this list; claim one for a collector of {tenant.name} below, or with the form above for a whole range or every domain.
            </p>
            {snapshot?.unclaimed ? (
              snapshot.unclaimed.total === 0 ? (
                <EmptyState title="No unclaimed exporters">
                  <p>Every source that has sent to the listeners matches a claim, or none has sent yet.</p>
                </EmptyState>
              ) : (
                <>
                  <UnclaimedExportersTable exporters={snapshot.unclaimed.exporters} now={snapshot.now} action={base} collectors={collectors} />
                  {snapshot.unclaimed.total > snapshot.unclaimed.exporters.length ? (
                    <p className="mt-2 text-xs text-river-300">
                      Showing the {snapshot.unclaimed.exporters.length} most recently seen of {snapshot.unclaimed.total} addresses.
                    </p>
                  ) : null}
                </>
              )
            ) : isLoading || !error ? (
              <LoadingState label="Reading unclaimed exporters…" />
            ) : null}
          </Panel>
        ) : null}
      </div>
    </>
  );
}

function WhereToSend({ listeners, consoleHost }: { listeners: { ipfixUdp: number | null; netflowUdp: number | null; ipfixTcp: number | null; bindHost: string }; consoleHost: string }) {
  const ports: [string, number | null][] = [
    ["IPFIX over UDP", listeners.ipfixUdp],
    ["NetFlow v9 over UDP", listeners.netflowUdp],
    ["IPFIX over TCP", listeners.ipfixTcp],
  ];
  const loopback = /^(127\.|::1$|localhost$)/.test(listeners.bindHost);
  return (
    <Panel title="Where to send">
      <div className="grid gap-4 text-sm text-river-200 lg:grid-cols-[auto_minmax(0,1fr)]">
        <dl className="grid grid-cols-[auto_auto] gap-x-4 gap-y-1">
          {ports.map(([label, port]) => (
            <div key={label} className="contents">
              <dt className="text-river-300">{label}</dt>
              <dd className="font-mono text-river-50">{port === null ? <span className="font-sans text-river-400">off</span> : `port ${port}`}</dd>
            </div>
          ))}
        </dl>
        <div className="flex flex-col gap-2">
          <p>
            Set the device's flow export destination to this deployment (the console answers at <span className="font-mono text-river-100">{consoleHost}</span>)
            on one of these ports. The listeners bind to <span className="font-mono text-river-100">{listeners.bindHost}</span>
            {loopback ? ", a loopback address: only exporters on this machine reach them (set COLLECT_HOST to listen on a network)" : ""}.
          </p>
          <p>
            UDP source addresses can be forged, and a claim trusts the source address: filter the listener ports (firewall or access list) so that only your
            exporters' networks can reach them.
          </p>
          <p>An exporter that no claim matches feeds nobody: its messages are dropped and counted until an admin claims it.</p>
        </div>
      </div>
    </Panel>
  );
}

type Outcome =
  | { intent: "claim"; ok: true; claim: { cidr: string; domainId: number | null; collector: string; newCollector: boolean } }
  | { intent: "release"; ok: true; released: { cidr: string; domainId: number | null; collector: string } }
  | { intent: "claim" | "release"; ok: false; message: string; fieldErrors: FieldErrors };

function Outcome({ outcome }: { outcome: Outcome }) {
  if (!outcome.ok) {
    // The claim form shows its own field errors; a refused release or a row's claim shows here.
    return <ErrorState title={outcome.intent === "release" ? "Not released" : "Not claimed"} message={outcome.message} />;
  }
  const text =
    outcome.intent === "claim"
      ? `Claimed ${describeClaim(outcome.claim.cidr, outcome.claim.domainId)} for collector ${outcome.claim.collector}${outcome.claim.newCollector ? " (new collector)" : ""}: its messages feed that collector from now on.`
      : `Released ${describeClaim(outcome.released.cidr, outcome.released.domainId)} of collector ${outcome.released.collector}: its messages are dropped and counted as unclaimed from now on.`;
  return (
    <p role="status" className="rounded-md border-l-4 border-sand-400 bg-river-900 px-4 py-3 text-sm text-river-100">
      {text}
    </p>
  );
}

function ClaimForm({
  action,
  collectors,
  rule,
  failed,
}: {
  action: string;
  collectors: string[];
  rule: { pattern: string; message: string };
  failed?: { message: string; fieldErrors: FieldErrors; values: FormValues };
}) {
  const navigation = useNavigation();
  const claiming = navigation.state === "submitting" && navigation.formData?.get("intent") === "claim" && navigation.formData?.get("from") === "form";
  const [collector, setCollector] = useState(failed?.values.collector ?? "");
  const [touched, setTouched] = useState(false);
  const name = collector.trim();
  const localError = name === "" ? undefined : new RegExp(rule.pattern).test(name) ? undefined : rule.message;
  const collectorError = touched && localError ? `Collector name ${localError}.` : failed?.fieldErrors.collector;
  return (
    <Panel title="New claim">
      <Form
        method="post"
        action={action}
        preventScrollReset
        onSubmit={(e) => {
          if (localError) {
            e.preventDefault();
            setTouched(true);
          }
        }}
        className="grid gap-5 lg:grid-cols-[minmax(0,16rem)_minmax(0,12rem)_minmax(0,16rem)_auto] lg:items-start"
      >
        <input type="hidden" name="intent" value="claim" />
        <input type="hidden" name="from" value="form" />
        <Field label="Address or CIDR" htmlFor="claim-cidr" error={failed?.fieldErrors.cidr} hint="The exporter's source address, e.g. 192.0.2.1, or a range, e.g. 198.51.100.0/24.">
          <input
            id="claim-cidr"
            name="cidr"
            required
            defaultValue={failed?.values.cidr}
            autoComplete="off"
            spellCheck={false}
            placeholder="192.0.2.1"
            aria-invalid={failed?.fieldErrors.cidr ? true : undefined}
            className={`${inputClass} font-mono`}
          />
        </Field>
        <Field label="Observation domain" htmlFor="claim-domain" error={failed?.fieldErrors.domain} hint="Empty: every domain. NetFlow v9 calls it the source id.">
          <input
            id="claim-domain"
            name="domain"
            inputMode="numeric"
            defaultValue={failed?.values.domain}
            autoComplete="off"
            placeholder="every domain"
            aria-invalid={failed?.fieldErrors.domain ? true : undefined}
            className={`${inputClass} font-mono`}
          />
        </Field>
        <Field
          label="Collector"
          htmlFor="claim-collector"
          error={collectorError}
          hint={name === "" ? "An existing collector or a new name." : collectors.includes(name) ? `Existing collector ${name}.` : `New collector: ${name} is created with the claim.`}
        >
          <CollectorNameInput
            id="claim-collector"
            required
            value={collector}
            onType={(value) => {
              setCollector(value);
              setTouched(true);
            }}
            collectors={collectors}
            invalid={Boolean(collectorError)}
            placeholder="e.g. pop-north"
          />
        </Field>
        <div className="lg:pt-6">
          <Button type="submit" disabled={claiming}>
            {claiming ? "Claiming…" : "Claim"}
          </Button>
        </div>
      </Form>
      <p className="mt-3 text-xs text-river-300">
        The most specific claim wins: the longest prefix, then a claim naming the domain over one for every domain. Claims of two tenants may not overlap.
      </p>
    </Panel>
  );
}

function ClaimsTable({ claims, canRelease, action }: { claims: ExportersSnapshot["claims"]; canRelease: boolean; action: string }) {
  const [search] = useSearchParams();
  const confirming = search.get("release");
  const navigation = useNavigation();
  const releasing = navigation.state === "submitting" && navigation.formData?.get("intent") === "release";
  const columns = canRelease ? 6 : 5;
  return (
    <div className="overflow-x-auto">
      <table className="w-full text-left text-sm">
        <caption className="sr-only">This tenant's exporter claims, in address order</caption>
        <thead className="border-b border-river-700 text-xs tracking-wide text-river-300 uppercase">
          <tr>
            <th scope="col" className="py-2 pr-4 font-medium">
              Address or CIDR
            </th>
            <th scope="col" className="py-2 pr-4 font-medium">
              Domain
            </th>
            <th scope="col" className="py-2 pr-4 font-medium">
              Collector
            </th>
            <th scope="col" className="py-2 pr-4 text-right font-medium">
              Exporters seen
            </th>
            <th scope="col" className="py-2 pr-4 font-medium">
              Claimed
            </th>
            {canRelease ? (
              <th scope="col" className="relative py-2 font-medium">
                <span className="sr-only">Actions</span>
              </th>
            ) : null}
          </tr>
        </thead>
        <tbody>
          {claims.map((c) => (
            <ClaimRows key={c.id} c={c} canRelease={canRelease} confirm={canRelease && confirming === String(c.id)} action={action} releasing={releasing} columns={columns} />
          ))}
        </tbody>
      </table>
    </div>
  );
}

function ClaimRows({
  c,
  canRelease,
  confirm,
  action,
  releasing,
  columns,
}: {
  c: ExportersSnapshot["claims"][number];
  canRelease: boolean;
  confirm: boolean;
  action: string;
  releasing: boolean;
  columns: number;
}) {
  return (
    <>
      <tr className="border-b border-river-800" data-claim={describeClaim(c.cidr, c.domainId)}>
        <td className="py-2.5 pr-4 font-mono text-river-50">{c.cidr}</td>
        <td className="py-2.5 pr-4">{c.domainId === null ? <span className="text-river-300">every domain</span> : <span className="font-mono">{c.domainId}</span>}</td>
        <td className="py-2.5 pr-4 font-mono">{c.collector}</td>
        <td className="py-2.5 pr-4 text-right font-mono">{c.exporters === 0 ? <span className="font-sans text-river-400">none yet</span> : c.exporters}</td>
        <td className="py-2.5 pr-4 text-xs whitespace-nowrap text-river-200">
          <span className="font-mono">{new Date(c.createdAt).toISOString().slice(0, 16).replace("T", " ")}</span> by {c.createdBy}
        </td>
        {canRelease ? (
          <td className="py-2.5 text-right">
            {confirm ? null : (
              <Link
                to={`?release=${c.id}`}
                preventScrollReset
                className="text-sm text-red-200 underline-offset-4 hover:underline"
                aria-label={`Release ${describeClaim(c.cidr, c.domainId)}`}
              >
                Release
              </Link>
            )}
          </td>
        ) : null}
      </tr>
      {confirm ? (
        <ConfirmRow
          colSpan={columns}
          action={action}
          fields={{ intent: "release", cidr: c.cidr, domain: c.domainId === null ? "" : String(c.domainId) }}
          message={`Release ${c.cidr} (${claimDomainLabel(c.domainId)}) from collector ${c.collector}? Its messages will be dropped and counted as unclaimed; records already stored stay.`}
          label="Release claim"
          busyLabel="Releasing…"
          busy={releasing}
        />
      ) : null}
    </>
  );
}
