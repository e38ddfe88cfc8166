import { data, redirect, type AppLoadContext } from "react-router";
import type { Role, Tenant, User } from "~/db/schema.server";
import { getSession } from "./session.server";
import { findUser, membershipBySlug, roleAtLeast } from "./users.server";

/**
 * Throwing guards for loaders and actions: each returns what it vouches for or throws a
 * Response (a redirect to sign in, a 404, a 403) that React Router answers with.
 */

/** The signed-in user, or a redirect to /signin that comes back here afterwards. */
export async function requireUser(request: Request, context: AppLoadContext): Promise<User> {
  const user = await optionalUser(request, context);
  if (user) return user;
  const url = new URL(request.url);
  throw redirect(`/signin?${new URLSearchParams({ returnTo: url.pathname + url.search })}`);
}

/** The signed-in user, if any. */
export async function optionalUser(request: Request, context: AppLoadContext): Promise<User | undefined> {
  const session = await getSession(context.env, request);
  const userId = session.get("userId");
  return userId === undefined ? undefined : findUser(context.db, userId);
}

export interface Member {
  user: User;
  tenant: Tenant;
  role: Role;
}

/**
 * The signed-in user's membership of the tenant in the URL. Not a member (or no such
 * tenant) → 404, so a tenant's existence is not revealed; a role below `needed` → 403.
 */
export async function requireMember(request: Request, context: AppLoadContext, slug: string | undefined, needed: Role = "viewer"): Promise<Member> {
  const user = await requireUser(request, context);
  const membership = slug ? await membershipBySlug(context.db, user.id, slug) : undefined;
  if (!membership) throw data({ message: "No such tenant, or you are not a member of it." }, { status: 404 });
  if (!roleAtLeast(membership.role, needed)) {
    throw data({ message: `This needs the ${needed} role; you are ${article(membership.role)} ${membership.role} in ${membership.tenant.slug}.` }, { status: 403 });
  }
  return { user, tenant: membership.tenant, role: membership.role };
}

function article(role: Role): string {
  return role === "admin" || role === "engineer" ? "an" : "a";
}
