import { createHash, randomBytes } from "node:crypto";
import { and, asc, eq, gt, isNull } from "drizzle-orm";
import { z } from "zod";
import { roleAtLeast } from "~/auth/users.server";
import type { Db } from "~/db/client.server";
import { invites, memberships, tenants, users, type Role } from "~/db/schema.server";
import { memberLabel } from "./roles";

/** An invitation is good for a week: long enough to come back from a trip, short enough that a stale mailbox does not grant access. */
export const INVITE_TTL_MS = 7 * 24 * 3600_000;

// 256 random bits; base64url so the token sits in a URL path without escaping.
const TOKEN_BYTES = 32;

/** The shape of a token in a link: 32 bytes in base64url without padding are 43 characters. */
export const inviteTokenSchema = z.string().regex(/^[A-Za-z0-9_-]{43}$/, "is not an invitation token");

/**
 * Only the SHA-256 of a token is stored, so a leaked database does not hand out working
 * invitations. A fast hash suffices for a random 256-bit secret (common practice for
 * bearer tokens; no password stretching is needed when nothing can be guessed).
 */
export function hashInviteToken(token: string): string {
  return createHash("sha256").update(token).digest("hex");
}

export type CreateInviteResult =
  | { ok: true; id: number; token: string; expiresAt: number }
  | { ok: false; reason: "member"; role: Role }
  | { ok: false; reason: "pending"; expiresAt: number };

/**
 * A new invitation to the tenant. Refused when the address already belongs to a member
 * (change their role instead) or has an invitation still waiting (revoke it to send another).
 */
export async function createInvite(
  db: Db,
  input: { tenantId: number; email: string; role: Role; invitedBy: number },
  now = Date.now(),
): Promise<CreateInviteResult> {
  const [member] = await db
    .select({ role: memberships.role })
    .from(memberships)
    .innerJoin(users, eq(users.id, memberships.userId))
    .where(and(eq(memberships.tenantId, input.tenantId), eq(users.email, input.email)));
  if (member) return { ok: false, reason: "member", role: member.role };
  const [waiting] = await db
    .select({ expiresAt: invites.expiresAt })
    .from(invites)
    .where(and(eq(invites.tenantId, input.tenantId), eq(invites.email, input.email), pending(now)));
  if (waiting) return { ok: false, reason: "pending", expiresAt: waiting.expiresAt };

  const token = randomBytes(TOKEN_BYTES).toString("base64url");
  const expiresAt = now + INVITE_TTL_MS;
  const [row] = await db
    .insert(invites)
    .values({ tenantId: input.tenantId, email: input.email, role: input.role, tokenHash: hashInviteToken(token), invitedBy: input.invitedBy, createdAt: now, expiresAt })
    .returning({ id: invites.id });
  return { ok: true, id: row.id, token, expiresAt };
}

/** Undoes `createInvite` when its e-mail could not be sent, so no invitation exists that nobody received. */
export async function discardInvite(db: Db, tenantId: number, id: number): Promise<void> {
  await db.delete(invites).where(and(eq(invites.tenantId, tenantId), eq(invites.id, id), isNull(invites.acceptedAt)));
}

export interface PendingInvite {
  id: number;
  email: string;
  role: Role;
  invitedBy: string | null;
  createdAt: number;
  expiresAt: number;
}

/** Invitations of the tenant that can still be accepted, soonest to expire first. */
export async function listPendingInvites(db: Db, tenantId: number, now = Date.now()): Promise<PendingInvite[]> {
  const rows = await db
    .select({ id: invites.id, email: invites.email, role: invites.role, createdAt: invites.createdAt, expiresAt: invites.expiresAt, login: users.login, inviterEmail: users.email })
    .from(invites)
    .leftJoin(users, eq(users.id, invites.invitedBy))
    .where(and(eq(invites.tenantId, tenantId), pending(now)))
    .orderBy(asc(invites.expiresAt));
  return rows.map((r) => ({
    id: r.id,
    email: r.email,
    role: r.role,
    invitedBy: r.inviterEmail === null ? null : memberLabel({ login: r.login, email: r.inviterEmail }),
    createdAt: r.createdAt,
    expiresAt: r.expiresAt,
  }));
}

/** Withdraws a pending invitation of this tenant; undefined when there is none with that id (or it is no longer pending). */
export async function revokeInvite(db: Db, tenantId: number, id: number, now = Date.now()): Promise<{ email: string; role: Role } | undefined> {
  const [row] = await db
    .update(invites)
    .set({ revokedAt: now })
    .where(and(eq(invites.tenantId, tenantId), eq(invites.id, id), pending(now)))
    .returning({ email: invites.email, role: invites.role });
  return row;
}

/** Why an invitation link does or does not work. */
export type InviteState = "valid" | "accepted" | "revoked" | "expired";

export interface InviteView {
  id: number;
  state: InviteState;
  email: string;
  role: Role;
  tenant: { id: number; slug: string; name: string };
  invitedBy: string | null;
  expiresAt: number;
  acceptedAt: number | null;
  acceptedBy: number | null;
  revokedAt: number | null;
}

/** The invitation a token opens, whatever its state; undefined when no invitation has that token. */
export async function findInvite(db: Db, token: string, now = Date.now()): Promise<InviteView | undefined> {
  const [row] = await db
    .select({ invite: invites, tenant: { id: tenants.id, slug: tenants.slug, name: tenants.name }, inviterLogin: users.login, inviterEmail: users.email })
    .from(invites)
    .innerJoin(tenants, eq(tenants.id, invites.tenantId))
    .leftJoin(users, eq(users.id, invites.invitedBy))
    .where(eq(invites.tokenHash, hashInviteToken(token)));
  if (!row) return undefined;
  const { invite } = row;
  return {
    id: invite.id,
    state: stateOf(invite, now),
    email: invite.email,
    role: invite.role,
    tenant: row.tenant,
    invitedBy: row.inviterEmail === null ? null : memberLabel({ login: row.inviterLogin, email: row.inviterEmail }),
    expiresAt: invite.expiresAt,
    acceptedAt: invite.acceptedAt,
    acceptedBy: invite.acceptedBy,
    revokedAt: invite.revokedAt,
  };
}

// A used invitation reads as used even after its expiry, since that is what happened to it.
function stateOf(invite: { acceptedAt: number | null; revokedAt: number | null; expiresAt: number }, now: number): InviteState {
  if (invite.acceptedAt !== null) return "accepted";
  if (invite.revokedAt !== null) return "revoked";
  if (invite.expiresAt <= now) return "expired";
  return "valid";
}

export type AcceptResult =
  | { ok: true; tenant: { id: number; slug: string; name: string }; email: string; invitedRole: Role; role: Role; outcome: "joined" | "promoted" | "kept" }
  | { ok: false; state: Exclude<InviteState, "valid"> | "unknown" };

/**
 * Uses an invitation for the signed-in user: the invitation is marked accepted and the user
 * becomes a member with the invited role. A member already holding that role or a higher
 * one keeps it, since an invitation must never take rights away. All in one write
 * transaction, so a link clicked twice at once works only once.
 */
export function acceptInvite(db: Db, token: string, userId: number, now = Date.now()): Promise<AcceptResult> {
  return db.transaction(async (tx): Promise<AcceptResult> => {
    const [row] = await tx
      .select({ invite: invites, tenant: { id: tenants.id, slug: tenants.slug, name: tenants.name } })
      .from(invites)
      .innerJoin(tenants, eq(tenants.id, invites.tenantId))
      .where(eq(invites.tokenHash, hashInviteToken(token)));
    if (!row) return { ok: false, state: "unknown" };
    const state = stateOf(row.invite, now);
    if (state !== "valid") return { ok: false, state };
    await tx.update(invites).set({ acceptedAt: now, acceptedBy: userId }).where(eq(invites.id, row.invite.id));

    const invitedRole = row.invite.role;
    const [current] = await tx
      .select({ role: memberships.role })
      .from(memberships)
      .where(and(eq(memberships.tenantId, row.tenant.id), eq(memberships.userId, userId)));
    const base = { ok: true, tenant: row.tenant, email: row.invite.email, invitedRole } as const;
    if (!current) {
      await tx.insert(memberships).values({ userId, tenantId: row.tenant.id, role: invitedRole, createdAt: now });
      return { ...base, role: invitedRole, outcome: "joined" };
    }
    if (roleAtLeast(current.role, invitedRole)) return { ...base, role: current.role, outcome: "kept" };
    await tx.update(memberships).set({ role: invitedRole }).where(and(eq(memberships.tenantId, row.tenant.id), eq(memberships.userId, userId)));
    return { ...base, role: invitedRole, outcome: "promoted" };
  });
}

function pending(now: number) {
  return and(isNull(invites.acceptedAt), isNull(invites.revokedAt), gt(invites.expiresAt, now));
}
