import { requireMember } from "~/auth/guards.server";
import { roleAtLeast } from "~/auth/users.server";
import type { Db } from "~/db/client.server";
import {
  listClaims,
  listExportersForTenant,
  listUnclaimedExporters,
  type ClaimedExporter,
  type ClaimView,
  type UnclaimedExporter,
} from "~/exporters/claims.server";
import type { Route } from "./+types/console.exporters-data";

/** Unclaimed sources shown at most, most recently seen first: forged source addresses can make many. */
const UNCLAIMED_SHOWN = 200;

export interface ExportersSnapshot {
  /** Server time of the snapshot, epoch ms: every age is measured from it, not the browser's clock. */
  now: number;
  /** The viewer may claim and release (admin); the server checks again in the action. */
  canClaim: boolean;
  /** The observed exporters that feed this tenant, through its claims. */
  claimed: ClaimedExporter[];
  /** The tenant's claims, with how many observed exporters (address, domain, transport) each one matched. */
  claims: (ClaimView & { exporters: number })[];
  /** Sources that sent to this deployment without a claim (deployment-wide): admins only, else null. */
  unclaimed: { exporters: UnclaimedExporter[]; total: number } | null;
}

/** GET /t/:tenant/exporters-data: the Exporters page's figures, as JSON, for any member. */
export async function loader({ request, context, params }: Route.LoaderArgs) {
  const { tenant, role } = await requireMember(request, context, params.tenant);
  const snapshot = await exportersSnapshot(context.db, tenant.id, roleAtLeast(role, "admin"), Date.now());
  return Response.json(snapshot, { headers: { "Cache-Control": "no-store" } });
}

async function exportersSnapshot(db: Db, tenantId: number, admin: boolean, now: number): Promise<ExportersSnapshot> {
  const [claimed, claims, unclaimed] = await Promise.all([
    listExportersForTenant(db, tenantId),
    listClaims(db, tenantId),
    // Other tenants' exporters are never read for a non-admin: only unclaimed ones, and only for admins.
    admin ? listUnclaimedExporters(db) : Promise.resolve(null),
  ]);
  const perClaim = new Map<number, number>();
  for (const e of claimed) perClaim.set(e.claim.id, (perClaim.get(e.claim.id) ?? 0) + 1);
  return {
    now,
    canClaim: admin,
    claimed,
    claims: claims.map((c) => ({ ...c, exporters: perClaim.get(c.id) ?? 0 })),
    unclaimed: unclaimed === null ? null : { exporters: unclaimed.slice(0, UNCLAIMED_SHOWN), total: unclaimed.length },
  };
}
