import { data, Form, Link, useLoaderData, useLocation, useNavigation } from "react-router";
import { requireMember } from "~/auth/guards.server";
import { Button, EmptyState, ErrorState, Field, inputClass, LoadingState, PageHeader, Panel } from "~/components/ui";
import type { DetailRow } from "~/people/ledger-format";
import { ledgerPage, parseLedgerFilter, type LedgerPage } from "~/people/ledger.server";
import type { Route } from "./+types/console.ledger";

export { ErrorBoundary } from "~/components/ErrorPanel";

export const meta: Route.MetaFunction = ({ data }) => [{ title: `Ledger · ${data?.tenant.name ?? "Tenant"} · Weir` }];

interface FilterValues {
  action: string;
  actor: string;
  from: string;
  to: string;
}

type LedgerView =
  | { tenant: { slug: string; name: string }; filter: FilterValues; ok: true; ledger: LedgerPage }
  | { tenant: { slug: string; name: string }; filter: FilterValues; ok: false; error: string };

export async function loader({ request, context, params }: Route.LoaderArgs) {
  const { tenant } = await requireMember(request, context, params.tenant, "admin");
  const search = new URL(request.url).searchParams;
  // Echoed back into the form as typed, so a bad value can be corrected in place.
  const filter: FilterValues = { action: search.get("action") ?? "", actor: search.get("actor") ?? "", from: search.get("from") ?? "", to: search.get("to") ?? "" };
  const who = { slug: tenant.slug, name: tenant.name };
  const parsed = parseLedgerFilter(search);
  if (!parsed.success) {
    const problems = parsed.error.issues.map((i) => `${LABELS[String(i.path[0])] ?? String(i.path[0])} ${i.message}`);
    return data<LedgerView>({ tenant: who, filter, ok: false, error: `${problems.join("; ")}.` }, { status: 400 });
  }
  return data<LedgerView>({ tenant: who, filter, ok: true, ledger: await ledgerPage(context.db, tenant.id, parsed.data) });
}

const LABELS: Record<string, string> = { action: "Action", actor: "Who", from: "From", to: "To", page: "Page" };

export default function Ledger() {
  const view = useLoaderData<typeof loader>();
  const navigation = useNavigation();
  const location = useLocation();
  const base = `/t/${view.tenant.slug}/ledger`;
  // Only a new page or filter of this same ledger shows the loading state; leaving the page does not.
  const loading = navigation.state === "loading" && navigation.location.pathname === location.pathname;
  const actions = view.ok ? view.ledger.actions : [];
  const filtered = Object.values(view.filter).some((v) => v !== "");

  return (
    <>
      <PageHeader
        title="Ledger"
        lead={<>Who did what in {view.tenant.name}, and when: changes to members, invitations, keys and settings, exporter claims and releases, merges, sample-file and IPFIX-file uploads and roll-up runs, and the sign-ins of current members. Newest first; times in UTC, 24-hour.</>}
      />
      <div className="grid grid-cols-[minmax(0,1fr)] gap-6">
        <Panel title="Filter">
          <Form method="get" action={base} className="grid gap-4 sm:grid-cols-2 lg:grid-cols-[minmax(0,14rem)_minmax(0,14rem)_minmax(0,11rem)_minmax(0,11rem)_auto] lg:items-end">
            <Field label="Action" htmlFor="ledger-action">
              <select id="ledger-action" name="action" defaultValue={view.filter.action} className={inputClass}>
                <option value="">Any action</option>
                {[...new Set([...actions, ...(view.filter.action ? [view.filter.action] : [])])].sort().map((a) => (
                  <option key={a} value={a}>
                    {a}
                  </option>
                ))}
              </select>
            </Field>
            <Field label="Who" htmlFor="ledger-actor">
              <input id="ledger-actor" name="actor" type="search" defaultValue={view.filter.actor} placeholder="login or e-mail" maxLength={100} className={inputClass} />
            </Field>
            {/* Text, not the browser's date input: that one shows the date in its locale's order, unlike every other date of the console. */}
            <Field label="From (UTC day)" htmlFor="ledger-from">
              <input id="ledger-from" name="from" type="text" inputMode="numeric" pattern="\d{4}-\d{2}-\d{2}" placeholder="YYYY-MM-DD" autoComplete="off" defaultValue={view.filter.from} className={`${inputClass} font-mono placeholder:font-sans placeholder:italic`} />
            </Field>
            <Field label="To (UTC day, inclusive)" htmlFor="ledger-to">
              <input id="ledger-to" name="to" type="text" inputMode="numeric" pattern="\d{4}-\d{2}-\d{2}" placeholder="YYYY-MM-DD" autoComplete="off" defaultValue={view.filter.to} className={`${inputClass} font-mono placeholder:font-sans placeholder:italic`} />
            </Field>
            <div className="flex gap-2">
              <Button type="submit">Apply</Button>
              {filtered ? (
                <Link to={base} className="inline-flex items-center rounded-md border border-river-600 px-3.5 py-2 text-sm font-medium text-river-100 hover:border-river-400 hover:bg-river-800">
                  Clear
                </Link>
              ) : null}
            </div>
          </Form>
        </Panel>

        <Panel title="Entries">
          {loading ? (
            <LoadingState label="Loading entries…" />
          ) : !view.ok ? (
            <ErrorState title="These filters cannot be used" message={view.error} />
          ) : view.ledger.rows.length === 0 ? (
            view.ledger.total > 0 ? (
              <EmptyState title={`There is no page ${view.ledger.page}`}>
                <p>
                  These filters match {view.ledger.total} entries on {view.ledger.pages} {view.ledger.pages === 1 ? "page" : "pages"}.{" "}
                  <Link to={pageHref(base, view.filter, 1)} className="text-sand-300 underline underline-offset-4">
                    Go to the first page
                  </Link>
                  .
                </p>
              </EmptyState>
            ) : (
              <EmptyState title={filtered ? "No entries match these filters" : "The ledger is empty"}>
                {filtered ? "Widen the dates, pick another action or clear the filters." : "Changes to members, invitations, keys and settings, merges, imports and roll-up runs will appear here, with the sign-ins of members."}
              </EmptyState>
            )
          ) : (
            <LedgerTable ledger={view.ledger} base={base} filter={view.filter} />
          )}
        </Panel>
      </div>
    </>
  );
}

function LedgerTable({ ledger, base, filter }: { ledger: LedgerPage; base: string; filter: FilterValues }) {
  const first = (ledger.page - 1) * ledger.pageSize + 1;
  const last = first + ledger.rows.length - 1;
  return (
    <>
      {/* The padding keeps focus rings at the table's edges from being clipped by the scroll box. */}
      <div className="-m-1.5 overflow-x-auto p-1.5">
        <table className="sticky-first w-full text-left text-sm">
          <caption className="sr-only">Ledger entries, newest first</caption>
          <thead className="border-b border-river-700 text-xs tracking-wide text-river-300 uppercase">
            <tr>
              <th scope="col" className="py-2 pr-4 font-medium">When</th>
              <th scope="col" className="py-2 pr-4 font-medium">Who</th>
              <th scope="col" className="py-2 pr-4 font-medium">Action</th>
              <th scope="col" className="py-2 pr-4 font-medium">Target</th>
              <th scope="col" className="py-2 font-medium">Details</th>
            </tr>
          </thead>
          <tbody>
            {ledger.rows.map((r) => (
              <tr key={r.id} className="border-b border-river-800 align-top" data-action={r.action}>
                <td className="py-2.5 pr-4 font-mono text-xs whitespace-nowrap text-river-100">{r.when}</td>
                <td className="py-2.5 pr-4 font-mono text-xs whitespace-nowrap text-river-50">{r.who}</td>
                <td className="py-2.5 pr-4 whitespace-nowrap">
                  <span className="rounded-full border border-river-600 px-2 py-0.5 font-mono text-xs text-sand-200">{r.action}</span>
                </td>
                {/* break-words wraps a long token (an e-mail address) only where it would not fit, and never shrinks the column to split names mid-word as break-all does. */}
                <td className="max-w-[16rem] py-2.5 pr-4 font-mono text-xs break-words text-river-100">{r.target ?? <span className="font-sans text-river-300">—</span>}</td>
                <td className="py-2.5 text-river-200">{r.details.length > 0 ? <DetailRows rows={r.details} /> : <span className="text-river-300">—</span>}</td>
              </tr>
            ))}
          </tbody>
        </table>
      </div>
      <nav aria-label="Ledger pages" className="mt-4 flex flex-wrap items-center justify-between gap-3 text-sm text-river-300">
        <p>
          Entries {first}–{last} of {ledger.total} · page {ledger.page} of {ledger.pages}
        </p>
        <div className="flex gap-2">
          {ledger.page > 1 ? (
            <Link to={pageHref(base, filter, ledger.page - 1)} rel="prev" className="rounded-md border border-river-600 px-3 py-1.5 text-river-100 hover:border-river-400 hover:bg-river-800">
              ← Newer
            </Link>
          ) : null}
          {ledger.page < ledger.pages ? (
            <Link to={pageHref(base, filter, ledger.page + 1)} rel="next" className="rounded-md border border-river-600 px-3 py-1.5 text-river-100 hover:border-river-400 hover:bg-river-800">
              Older →
            </Link>
          ) : null}
        </div>
      </nav>
    </>
  );
}

/** An entry's particulars as key/value rows. */
function DetailRows({ rows }: { rows: DetailRow[] }) {
  return (
    <dl className="grid min-w-[14rem] grid-cols-[max-content_minmax(0,1fr)] gap-x-3 gap-y-0.5 text-xs">
      {rows.map((row, i) =>
        row.label === "" ? (
          <dd key={i} className="col-span-2 font-mono break-words text-river-100">
            {row.value}
          </dd>
        ) : (
          <div key={i} className="contents">
            <dt className="text-river-300">{row.label}</dt>
            <dd className="font-mono break-words text-river-100">{row.value}</dd>
          </div>
        ),
      )}
    </dl>
  );
}

/** The URL of one page under the same filters (blank filters left out, so URLs stay short). */
function pageHref(base: string, filter: FilterValues, page: number): string {
  const params = new URLSearchParams();
  for (const [key, value] of Object.entries(filter)) if (value) params.set(key, value);
  if (page > 1) params.set("page", String(page));
  const query = params.toString();
  return query ? `${base}?${query}` : base;
}
