import { Form, NavLink, Outlet, useLoaderData, useNavigate } from "react-router";
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
  return (
    <div className="flex min-h-screen flex-col">
      <header className="border-b border-river-800 bg-river-950">
        <div className="mx-auto flex max-w-7xl flex-wrap items-center gap-x-6 gap-y-2 px-6 py-3">
          <a href="/" className="flex items-center gap-2 font-semibold text-river-50">
            <svg aria-hidden="true" viewBox="0 0 32 20" className="h-5 w-8">
              <path d="M0 6 Q8 2 14 6 L14 18 L0 18 Z" fill="#467472" />
              <path d="M14 6 L20 6 L26 18 L14 18 Z" fill="#d29d45" />
              <path d="M20 12 Q26 10 32 13 L32 18 L24 18 Z" fill="#2e4b4c" />
            </svg>
            Weir
          </a>
          <label className="flex items-center gap-2 text-sm text-river-300">
            <span className="sr-only">Tenant</span>
            <select
              className="rounded-md border border-river-700 bg-river-900 px-2 py-1 text-river-50"
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
          <nav aria-label="Console sections" className="flex flex-wrap gap-1">
            {sections.map((s) => (
              <NavLink
                key={s.path}
                to={`/t/${tenant.slug}/${s.path}`}
                title={s.hint}
                className={({ isActive }) =>
                  `rounded-md px-3 py-1.5 text-sm ${isActive ? "bg-river-800 text-sand-200" : "text-river-200 hover:bg-river-900 hover:text-river-50"}`
                }
              >
                {s.label}
              </NavLink>
            ))}
          </nav>
          <div className="ml-auto flex items-center gap-3 text-sm text-river-300">
            <span>
              <span className="text-river-100">{user.login ?? user.email}</span> · {role}
            </span>
            <Form method="post" action="/signout">
              <button type="submit" className="rounded-md border border-river-700 px-2.5 py-1 text-river-200 hover:border-river-500">
                Sign out
              </button>
            </Form>
          </div>
        </div>
        {fakeServices ? (
          <p className="bg-sand-950 px-6 py-1 text-center text-xs text-sand-200">
            Development mode: sign-in and e-mail go to local fakes started by Weir; they do not exist in a production build.
          </p>
        ) : null}
      </header>
      <main className="mx-auto w-full max-w-7xl flex-1 px-6 py-8">
        <Outlet />
      </main>
    </div>
  );
}

export const ErrorBoundary = SharedErrorBoundary;
