import { and, asc, eq } from "drizzle-orm";
import { z } from "zod";
import type { Db } from "~/db/client.server";
import { memberships, ROLES, tenants, users, type Role, type User } from "~/db/schema.server";
import type { GitHubIdentity } from "./github.server";

export const emailSchema = z.email("must be an e-mail address").transform((e) => e.toLowerCase());
export const roleSchema = z.enum(ROLES, { error: `must be one of ${ROLES.join(", ")}` });

/** Role order: each role may do everything the ones before it may. */
export function roleAtLeast(role: Role, needed: Role): boolean {
  return ROLES.indexOf(role) >= ROLES.indexOf(needed);
}

/**
 * The user for a GitHub sign-in: found by GitHub id, else by the verified e-mail (a person
 * granted or invited before their first sign-in), else created. Profile fields are refreshed.
 */
export async function upsertUserFromGitHub(db: Db, identity: GitHubIdentity, now = Date.now()): Promise<User> {
  const profile = { githubId: identity.githubId, login: identity.login, name: identity.name, avatarUrl: identity.avatarUrl, lastSignInAt: now };
  const [byGitHub] = await db.select().from(users).where(eq(users.githubId, identity.githubId));
  if (byGitHub) {
    const [row] = await db.update(users).set({ ...profile, email: identity.email }).where(eq(users.id, byGitHub.id)).returning();
    return row;
  }
  const [byEmail] = await db.select().from(users).where(eq(users.email, identity.email));
  if (byEmail) {
    const [row] = await db.update(users).set(profile).where(eq(users.id, byEmail.id)).returning();
    return row;
  }
  const [row] = await db.insert(users).values({ ...profile, email: identity.email }).returning();
  return row;
}

export async function findUser(db: Db, id: number): Promise<User | undefined> {
  const [row] = await db.select().from(users).where(eq(users.id, id));
  return row;
}

/** The user with that e-mail, created (not yet signed in) when new. */
export async function ensureUserByEmail(db: Db, email: string): Promise<User> {
  const address = emailSchema.parse(email);
  await db.insert(users).values({ email: address }).onConflictDoNothing();
  const [row] = await db.select().from(users).where(eq(users.email, address));
  return row;
}

/** Sets a user's role in a tenant (adds the membership when new). */
export async function setMembership(db: Db, userId: number, tenantId: number, role: Role): Promise<void> {
  await db.insert(memberships).values({ userId, tenantId, role }).onConflictDoUpdate({ target: [memberships.userId, memberships.tenantId], set: { role } });
}

export interface TenantMembership {
  tenantId: number;
  slug: string;
  name: string;
  role: Role;
}

/** The tenants a user belongs to, by slug. */
export function membershipsOf(db: Db, userId: number): Promise<TenantMembership[]> {
  return db
    .select({ tenantId: tenants.id, slug: tenants.slug, name: tenants.name, role: memberships.role })
    .from(memberships)
    .innerJoin(tenants, eq(tenants.id, memberships.tenantId))
    .where(eq(memberships.userId, userId))
    .orderBy(asc(tenants.slug));
}

/** The user's role in the tenant with that slug, or undefined when not a member (or no such tenant). */
export async function membershipBySlug(db: Db, userId: number, slug: string): Promise<{ tenant: typeof tenants.$inferSelect; role: Role } | undefined> {
  const [row] = await db
    .select({ tenant: tenants, role: memberships.role })
    .from(memberships)
    .innerJoin(tenants, eq(tenants.id, memberships.tenantId))
    .where(and(eq(memberships.userId, userId), eq(tenants.slug, slug)));
  return row;
}
