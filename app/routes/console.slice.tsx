import { and, eq, gt } from "drizzle-orm";
import { useMemo, useState } from "react";
import { useLoaderData, useNavigate, useSearchParams, type ShouldRevalidateFunctionArgs } from "react-router";
import { requireMember } from "~/auth/guards.server";
import { SliceForm } from "~/components/slice/SliceForm";
import { SliceResults } from "~/components/slice/SliceResults";
import { Button, Cautions, EmptyState, PageHeader, Panel } from "~/components/ui";
import { reservoirs } from "~/db/schema.server";
import { collectorChoices } from "~/merges/merges.server";
import { parseSliceParams, sliceSearch, type SliceState } from "~/slice/query-state";
import type { Route } from "./+types/console.slice";

export { ErrorBoundary } from "~/components/ErrorPanel";

export const meta: Route.MetaFunction = ({ data }) => [{ title: `Slice · ${data?.tenant.name ?? "Tenant"} · Weir` }];

/**
 * Slice (every role): the tenant's collectors for the form (stream collectors, and merges
 * with their inputs), and whether it has any data yet.
 */
export async function loader({ request, context, params }: Route.LoaderArgs) {
  const { tenant } = await requireMember(request, context, params.tenant);
  const [choices, anyData] = await Promise.all([
    collectorChoices(context.db, tenant.id),
    context.db
      .select({ id: reservoirs.id })
      .from(reservoirs)
      .where(and(eq(reservoirs.tenantId, tenant.id), gt(reservoirs.records, 0)))
      .limit(1),
  ]);
  return {
    tenant: { slug: tenant.slug, name: tenant.name, windowSeconds: tenant.windowSeconds, weightAttribute: tenant.weightAttribute },
    collectors: choices,
    hasData: anyData.length > 0,
    // For the "send flows" example; PUBLIC_URL when set, since a proxy may hide the public origin.
    origin: context.env.PUBLIC_URL?.replace(/\/$/, "") ?? new URL(request.url).origin,
  };
}

/**
 * The question lives in the search params and is answered in the browser; the loader's data
 * (collectors, settings) does not depend on them, so a changed question does not reload it.
 */
export function shouldRevalidate({ currentUrl, nextUrl, formMethod, defaultShouldRevalidate }: ShouldRevalidateFunctionArgs) {
  if (formMethod === undefined && currentUrl.pathname === nextUrl.pathname) return false;
  return defaultShouldRevalidate;
}

export default function Slice() {
  const { tenant, collectors, hasData, origin } = useLoaderData<typeof loader>();
  const [searchParams] = useSearchParams();
  const navigate = useNavigate();
  const search = searchParams.toString();
  const { state, problems } = useMemo(() => parseSliceParams(new URLSearchParams(search)), [search]);

  // Replaces the entry rather than pushing one per chip; the search is written as sliceSearch
  // spells it (setSearchParams would percent-encode every "/" and ":" of a prefix).
  const update = (next: SliceState) => navigate({ search: sliceSearch(next) }, { replace: true, preventScrollReset: true });
  // Text a box holds but could not apply: the question is not asked until it is fixed or cleared.
  const [held, setHeld] = useState<string[]>([]);

  return (
    <>
      <PageHeader
        title="Slice"
        lead={
          <>
            Estimate any subset of {tenant.name}'s traffic from its priority samples: choose the records in the Question panel and read the estimate with its 95%
            interval in the answer beside it (below it on a narrow screen). The question is kept in the page address, so a copied link shows the same slice.
          </>
        }
        actions={hasData ? <CopyLink /> : null}
      />
      <div className="mb-6">
        <Cautions />
      </div>
      {!hasData ? (
        <NoDataYet slug={tenant.slug} origin={origin} />
      ) : (
        <div className="grid items-start gap-6 lg:grid-cols-[22rem_minmax(0,1fr)]">
          <Panel title="Question">
            {problems.length > 0 ? (
              <div role="status" className="mb-4 rounded-md border border-sand-400/60 bg-sand-950/50 px-3 py-2 text-sm text-sand-100">
                <p className="font-medium">Parts of this link were set aside:</p>
                <ul className="mt-1 list-inside list-disc">
                  {problems.map((p) => (
                    <li key={p}>{p}</li>
                  ))}
                </ul>
              </div>
            ) : null}
            <SliceForm state={state} onChange={update} collectors={collectors} weightAttribute={tenant.weightAttribute} onHold={setHeld} />
          </Panel>
          <section aria-label="Answer" className="min-w-0">
            {held.length > 0 ? <NotAsked problems={held} /> : <SliceResults state={state} tenant={tenant.slug} windowSeconds={tenant.windowSeconds} onChange={update} />}
          </section>
        </div>
      )}
    </>
  );
}

/** In place of the answer while a box holds text that was refused, so no answer reads as if it included it. */
function NotAsked({ problems }: { problems: string[] }) {
  return (
    <div role="status" data-held="true" className="rounded-lg border border-red-400/50 bg-red-950/30 px-4 py-3 text-sm text-red-100">
      <p className="font-medium">Not asked yet: the question holds text that could not be applied.</p>
      <ul className="mt-1 list-inside list-disc text-red-200">
        {problems.map((p) => (
          <li key={p}>{p}</li>
        ))}
      </ul>
      <p className="mt-2 text-red-200">Fix the text or clear the box; the answer appears as soon as every box is applied.</p>
    </div>
  );
}

function CopyLink() {
  const [copied, setCopied] = useState<"no" | "yes" | "failed">("no");
  async function copy() {
    try {
      await navigator.clipboard.writeText(window.location.href);
      setCopied("yes");
    } catch {
      // Clipboard access needs a secure context or permission; the address bar still has the link.
      setCopied("failed");
    }
    setTimeout(() => setCopied("no"), 2500);
  }
  return (
    <div className="flex items-center gap-3">
      <span role="status" className="text-sm text-river-300">
        {copied === "yes" ? "Link copied." : copied === "failed" ? "Could not copy; use the address bar." : ""}
      </span>
      <Button type="button" tone="quiet" onClick={copy}>
        Copy link
      </Button>
    </div>
  );
}

function NoDataYet({ slug, origin }: { slug: string; origin: string }) {
  const example = [
    `curl -sS -X POST ${origin}/api/v1/flows \\`,
    `  -H "Authorization: Bearer <key>" -H "Content-Type: application/json" \\`,
    `  -H "Idempotency-Key: first-batch" \\`,
    `  --data '[{"src":"198.51.100.10","dst":"203.0.113.130","sport":51000,"dport":443,"proto":6,"bytes":120000,"packets":90}]'`,
  ].join("\n");
  return (
    <EmptyState title={`No flow records in ${slug} yet`}>
      <div className="mx-auto flex max-w-3xl flex-col gap-3 text-left">
        <p>
          Slice answers from the samples Weir keeps of the records your collectors send. Once records arrive, this page estimates any subset of them. To send
          the first ones:
        </p>
        <ol className="list-inside list-decimal space-y-1">
          <li>A tenant admin creates an API key with the ingest scope for a collector (Keys).</li>
          <li>
            The collector, or any script, posts records as JSON or NDJSON to <code className="font-mono text-river-100">/api/v1/flows</code>, for example:
          </li>
        </ol>
        <pre className="overflow-x-auto rounded-md border border-river-700 bg-river-950 p-3 font-mono text-xs text-river-100">{example}</pre>
        <p>Intake shows each collector's records as they arrive.</p>
      </div>
    </EmptyState>
  );
}
