import { Link, useLoaderData } from "react-router";
import useSWR from "swr";
import { requireMember } from "~/auth/guards.server";
import { IntakeTable } from "~/components/intake/IntakeTable";
import { Cautions, EmptyState, ErrorState, LoadingState, PageHeader, Panel } from "~/components/ui";
import { fetchJson, type FetchError } from "~/slice/fetch-json";
import type { IntakeSnapshot } from "./console.intake-data";
import type { Route } from "./+types/console.intake";

export { ErrorBoundary } from "~/components/ErrorPanel";

export const meta: Route.MetaFunction = ({ data }) => [{ title: `Intake · ${data?.tenant.name ?? "Tenant"} · Weir` }];

/** Polling period of the live numbers: often enough to watch a collector come back, cheap for SQLite. */
const REFRESH_MS = 5000;

/** Intake (every role): the page; its numbers come from /t/:tenant/intake-data. */
export async function loader({ request, context, params }: Route.LoaderArgs) {
  const { tenant } = await requireMember(request, context, params.tenant);
  return { tenant: { slug: tenant.slug, name: tenant.name } };
}

export default function Intake() {
  const { tenant } = useLoaderData<typeof loader>();
  const { data, error, isLoading } = useSWR<IntakeSnapshot, FetchError>(`/t/${tenant.slug}/intake-data`, fetchJson, {
    refreshInterval: REFRESH_MS,
    // Keep polling in a background tab too: an operator often leaves Intake open on a side screen.
    refreshWhenHidden: true,
  });

  return (
    <>
      <PageHeader
        title="Intake"
        lead={<>Live ingest health of {tenant.name}, per collector: where its records come from, how fast they arrive, the exact bytes of recent windows, and how full each open reservoir is. Refreshed every {REFRESH_MS / 1000} s; times in UTC.</>}
        actions={
          <Link to={`/t/${tenant.slug}/calibration`} className="text-sm text-river-200 underline-offset-4 hover:underline">
            Calibration: how often intervals covered
          </Link>
        }
      />
      <div className="flex flex-col gap-6">
        {error ? <ErrorState title="Could not refresh Intake" message={`${error.message}${data ? " The figures below are from the last successful refresh." : ""}`} /> : null}
        <Panel title="Collectors">
          {data ? (
            data.collectors.length === 0 ? (
              <EmptyState title="No collectors yet">
                <p>
                  A collector appears here once a tenant admin creates an API key for it (Keys) or claims an exporter for it (Exporters). It then posts flow records to{" "}
                  <code className="font-mono text-river-100">/api/v1/flows</code> with that key, or its exporters send IPFIX or NetFlow v9 to the listeners, and this page
                  shows them arriving.
                </p>
              </EmptyState>
            ) : (
              <IntakeTable snapshot={data} />
            )
          ) : isLoading || !error ? (
            <LoadingState label="Reading ingest counters…" />
          ) : null}
        </Panel>
        <Cautions compact />
      </div>
    </>
  );
}
