import type { Db } from "./db/client.server";
import { auditLog } from "./db/schema.server";

export interface AuditEvent {
  tenantId: number | null;
  actor: { id: number | null; label: string };
  /** A stable dotted name: "sign-in", "key.create", "member.role", "settings.update" … */
  action: string;
  target?: string | null;
  detail?: Record<string, unknown>;
}

/** Writes one entry of the ledger (audit log). */
export async function recordAudit(db: Db, event: AuditEvent): Promise<void> {
  await db.insert(auditLog).values({
    tenantId: event.tenantId,
    actorUserId: event.actor.id,
    actor: event.actor.label,
    action: event.action,
    target: event.target ?? null,
    detail: event.detail ? JSON.stringify(event.detail) : null,
  });
}
