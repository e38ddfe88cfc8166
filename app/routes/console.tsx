import { useEffect, useRef } from "react";
import { Form, NavLink, Outlet, useLoaderData, useLocation, useNavigate } from "react-router";
import { requireMember } from "~/auth/guards.server";
import { membershipsOf, roleAtLeast } from "~/auth/users.server";
// Only the loader uses the .server imports above; the component gets plain data, so no
// server-only module reaches the browser bundle.
import type { Role } from "~/db/schema.server";
import { ErrorBoundary as SharedErrorBoundary } from "~/components/ErrorPanel";
import type { Route } from "./+types/console";

/** The console sections and the least role that sees each (the server checks again in every loader and action). */
export const SECTIONS: { path: string; label: string; role: Role; hint: string }[] = [
  { path: "slice", label: "Slice", role: "viewer", hint: "Estimate any subset of traffic" },
  { path: "intake", label: "Intake", role: "viewer", hint: "Live ingest health per collector" },
  { path: "exporters", label: "Exporters", role: "viewer", hint: "IPFIX and NetFlow exporters and the collectors they feed" },
  { path: "merge", label: "Merge", role: "engineer", hint: "Merge collectors' samples, upload sample files" },
  { path: "keys", label: "Keys", role: "admin", hint: "API keys for collectors and scripts" },
  { path: "people", label: "People", role: "admin", hint: "Members, roles and invitations" },
  { path: "ledger", label: "Ledger", role: "admin", hint: "Who did what, when" },
  { path: "settings", label: "Settings", role: "admin", hint: "Sample size, windows, retention" },
];

export async function loader({ request, context, params }: Route.LoaderArgs) {
  const { user, tenant, role } = await requireMember(request, context, params.tenant);
  const tenants = await membershipsOf(context.db, user.id);
  return {
    user: { email: user.email, login: user.login, name: user.name },
    tenant: { slug: tenant.slug, name: tenant.name },
    role,
    sections: SECTIONS.filter((s) => roleAtLeast(role, s.role)),
    tenants: tenants.map((t) => ({ slug: t.slug, name: t.name, role: t.role })),
    fakeServices: context.github.fake,
  };
}

export default function Console() {
  const { user, tenant, role, sections, tenants, fakeServices } = useLoaderData<typeof loader>();
  const navigate = useNavigate();
  const location = useLocation();
  const current = sections.find((s) => location.pathname.startsWith(`/t/${tenant.slug}/${s.path}`));
  // The phone menu closes once a link in it has taken the reader to another page.
  const menu = useRef<HTMLDetailsElement>(null);
  useEffect(() => {
    if (menu.current) menu.current.open = false;
  }, [location.pathname]);
  const links = (className: (active: boolean) => string) =>
    sections.map((s) => (
      <NavLink key={s.path} to={`/t/${tenant.slug}/${s.path}`} title={s.hint} className={({ isActive }) => className(isActive)}>
        {s.label}
      </NavLink>
    ));
  const signOut = (
    <Form method="post" action="/signout">
      <button type="submit" className="rounded-md border border-river-700 px-2.5 py-1 text-river-200 hover:border-river-500">
        Sign out
      </button>
    </Form>
  );
  return (
    <div className="flex min-h-screen flex-col">
      <header className="border-b border-river-800 bg-river-950">
        <div className="mx-auto flex max-w-7xl flex-wrap items-center gap-x-6 gap-y-2 px-4 py-3 sm:px-6">
          <a href="/" className="flex items-center gap-2 font-semibold text-river-50">
            <svg aria-hidden="true" viewBox="0 0 32 20" className="h-5 w-8">
              <path d="M0 6 Q8 2 14 6 L14 18 L0 18 Z" fill="#467472" />
              <path d="M14 6 L20 6 L26 18 L14 18 Z" fill="#d29d45" />
              <path d="M20 12 Q26 10 32 13 L32 18 L24 18 Z" fill="#2e4b4c" />
            </svg>
            Weir
          </a>
          <label className="flex min-w-0 items-center gap-2 text-sm text-river-300">
            <span className="sr-only">Tenant</span>
            <select
              className="max-w-[11rem] truncate rounded-md border border-river-700 bg-river-900 px-2 py-1 text-river-50 sm:max-w-none"
              value={tenant.slug}
              onChange={(e) => navigate(`/t/${e.target.value}/slice`)}
            >
              {tenants.map((t) => (
                <option key={t.slug} value={t.slug}>
                  {t.name} ({t.role})
                </option>
              ))}
            </select>
          </label>
          {/* Wide screens: the sections in a row. */}
          <nav aria-label="Console sections" className="hidden flex-wrap gap-1 lg:flex">
            {links((active) => `rounded-md px-3 py-1.5 text-sm ${active ? "bg-river-800 text-sand-200" : "text-river-200 hover:bg-river-900 hover:text-river-50"}`)}
          </nav>
          <div className="ml-auto hidden items-center gap-3 text-sm text-river-300 lg:flex">
            <span>
              <span className="text-river-100">{user.login ?? user.email}</span> · {role}
            </span>
            {signOut}
          </div>
          {/* Narrow screens: a menu (a disclosure, so it opens even before the page's script runs). */}
          <details ref={menu} className="relative ml-auto lg:hidden">
            <summary className="flex cursor-pointer list-none items-center gap-2 rounded-md border border-river-700 px-3 py-1.5 text-sm text-river-100 hover:border-river-500 [&::-webkit-details-marker]:hidden">
              <svg aria-hidden="true" viewBox="0 0 16 12" className="h-3 w-4 fill-current">
                <rect width="16" height="2" />
                <rect y="5" width="16" height="2" />
                <rect y="10" width="16" height="2" />
              </svg>
              Menu{current ? <span className="text-sand-200">· {current.label}</span> : null}
            </summary>
            <div className="absolute right-0 z-30 mt-2 flex w-64 max-w-[calc(100vw-2rem)] flex-col gap-3 rounded-lg border border-river-700 bg-river-950 p-2 shadow-xl">
              <nav aria-label="Console sections" className="flex flex-col">
                {links((active) => `rounded-md px-3 py-2 text-sm ${active ? "bg-river-800 text-sand-200" : "text-river-200 hover:bg-river-900 hover:text-river-50"}`)}
              </nav>
              <div className="flex items-center justify-between gap-3 border-t border-river-800 px-3 pt-3 pb-1 text-sm text-river-300">
                <span className="min-w-0 truncate">
                  <span className="text-river-100">{user.login ?? user.email}</span> · {role}
                </span>
                {signOut}
              </div>
            </div>
          </details>
        </div>
        {fakeServices ? (
          <p className="bg-sand-950 px-6 py-1 text-center text-xs text-sand-200">
            Development or demo: sign-in and e-mail go to local fakes started by Weir (invented accounts, caught mail); they never run beside a real GitHub app or mail relay.
          </p>
        ) : null}
      </header>
      <main className="mx-auto w-full max-w-7xl flex-1 px-4 py-6 sm:px-6 sm:py-8">
        <Outlet />
      </main>
    </div>
  );
}

export const ErrorBoundary = SharedErrorBoundary;
