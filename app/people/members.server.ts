import { and, asc, count, eq } from "drizzle-orm";
import type { Db } from "~/db/client.server";
import { memberships, users, type Role } from "~/db/schema.server";
import { memberLabel } from "./roles";

export interface MemberRow {
  userId: number;
  login: string | null;
  name: string | null;
  email: string;
  role: Role;
  joinedAt: number;
  lastSignInAt: number | null;
}

/** The members of one tenant, admins first, then by e-mail. */
export async function listMembers(db: Db, tenantId: number): Promise<MemberRow[]> {
  const rows = await db
    .select({
      userId: users.id,
      login: users.login,
      name: users.name,
      email: users.email,
      role: memberships.role,
      joinedAt: memberships.createdAt,
      lastSignInAt: users.lastSignInAt,
    })
    .from(memberships)
    .innerJoin(users, eq(users.id, memberships.userId))
    .where(eq(memberships.tenantId, tenantId))
    .orderBy(asc(users.email));
  const rank: Record<Role, number> = { admin: 0, engineer: 1, viewer: 2 };
  return rows.sort((a, b) => rank[a.role] - rank[b.role]);
}

/** Why a change to a member was refused; each maps to a message a person can act on. */
export type MemberRefusal = "not-member" | "last-admin";

export type MemberChange =
  | { ok: true; member: { userId: number; label: string }; from: Role; to: Role | null }
  | { ok: false; reason: MemberRefusal };

/**
 * Sets a member's role. The check that a tenant keeps at least one admin and the change run
 * in one write transaction, so two admins demoting each other at once cannot both succeed.
 */
export function changeRole(db: Db, tenantId: number, userId: number, role: Role): Promise<MemberChange> {
  return db.transaction(async (tx) => {
    const current = await memberOf(tx, tenantId, userId);
    if (!current) return { ok: false, reason: "not-member" } as const;
    if (current.role === "admin" && role !== "admin" && (await adminCount(tx, tenantId)) <= 1) return { ok: false, reason: "last-admin" } as const;
    await tx.update(memberships).set({ role }).where(and(eq(memberships.tenantId, tenantId), eq(memberships.userId, userId)));
    return { ok: true, member: { userId, label: current.label }, from: current.role, to: role } as const;
  });
}

/** Removes a member from the tenant (their user and other tenants stay); never the last admin. */
export function removeMember(db: Db, tenantId: number, userId: number): Promise<MemberChange> {
  return db.transaction(async (tx) => {
    const current = await memberOf(tx, tenantId, userId);
    if (!current) return { ok: false, reason: "not-member" } as const;
    if (current.role === "admin" && (await adminCount(tx, tenantId)) <= 1) return { ok: false, reason: "last-admin" } as const;
    await tx.delete(memberships).where(and(eq(memberships.tenantId, tenantId), eq(memberships.userId, userId)));
    return { ok: true, member: { userId, label: current.label }, from: current.role, to: null } as const;
  });
}

type Tx = Parameters<Parameters<Db["transaction"]>[0]>[0];

async function memberOf(tx: Tx, tenantId: number, userId: number): Promise<{ role: Role; label: string } | undefined> {
  const [row] = await tx
    .select({ role: memberships.role, login: users.login, email: users.email })
    .from(memberships)
    .innerJoin(users, eq(users.id, memberships.userId))
    .where(and(eq(memberships.tenantId, tenantId), eq(memberships.userId, userId)));
  return row ? { role: row.role, label: memberLabel(row) } : undefined;
}

async function adminCount(tx: Tx, tenantId: number): Promise<number> {
  const [row] = await tx.select({ n: count() }).from(memberships).where(and(eq(memberships.tenantId, tenantId), eq(memberships.role, "admin")));
  return row.n;
}
