import type { InStatement } from "@libsql/client";
import { ApiError } from "~/auth/api-keys.server";
import type { Db } from "~/db/client.server";
import type { ReservoirManager } from "~/ingest/manager.server";
import { putWindowStatements } from "~/samples/store.server";
import type { MergeListing } from "./answer";
import { planMerge, type MergePlan, type MergeTenant } from "./plan.server";
import type { MergeRequest } from "./request.server";

/** What creating or deleting a merge needs of the server. */
export interface MergeContext {
  db: Db;
  manager: Pick<ReservoirManager, "exclusive">;
  /** This node's id: merged reservoirs are stored under it. */
  node: string;
}

/** Who asks: a person (user id and login) or an API key (`key <prefix>`, no user). */
export interface MergeActor {
  id: number | null;
  label: string;
}

/**
 * Creates the merged collector `plan.name`: the collector (kind `merge`), its provenance row,
 * every merged reservoir (stored under this node) and the ledger entry, in one write
 * transaction, so a failed create leaves nothing behind. Runs through the manager's
 * `exclusive`, so none of this node's ingest batches lands between reading the inputs and
 * storing their merge. The merge is a snapshot: windows still open are merged as they are
 * now, and records that arrive later are not added to it.
 *
 * Throws ApiError 409 when the name is taken, 422 for invalid inputs, too large a range,
 * or a range with nothing to merge.
 */
export function createMerge(ctx: MergeContext, tenant: MergeTenant, request: MergeRequest, actor: MergeActor): Promise<{ plan: MergePlan; createdAt: number }> {
  return ctx.manager.exclusive(async () => {
    await refuseTakenName(ctx.db, tenant.id, request.name);
    const plan = await planMerge(ctx.db, tenant, request);
    if (plan.windows.length === 0) throw nothingToMerge(plan);
    const createdAt = Date.now();
    // One interactive write transaction rather than one batch: the reservoir statements need
    // the new collector's id, so the collector row goes in first, inside the same transaction.
    const tx = await ctx.db.$client.transaction("write");
    try {
      let collectorId: number;
      try {
        const inserted = await tx.execute({
          sql: "INSERT INTO collectors (tenant_id, name, kind, created_at) VALUES (?, ?, 'merge', ?) RETURNING id",
          args: [tenant.id, plan.name, createdAt],
        });
        collectorId = Number(inserted.rows[0][0]);
      } catch (error) {
        // A collector of this name appeared since the check (a key made for it, another node's merge).
        if (!/UNIQUE constraint failed/.test(String((error as Error).message))) throw error;
        await tx.rollback();
        await refuseTakenName(ctx.db, tenant.id, request.name);
        throw error;
      }
      const statements: InStatement[] = [
        {
          sql:
            "INSERT INTO merges (tenant_id, collector_id, inputs, from_ms, to_ms, sample_size, coordinated, windows, kept, duplicates_dropped, created_by, created_at) " +
            "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
          args: [
            tenant.id,
            collectorId,
            JSON.stringify(plan.collectors),
            plan.from,
            plan.to,
            plan.sampleSize,
            plan.coordinated ? 1 : 0,
            plan.totals.windows,
            plan.totals.kept,
            plan.totals.duplicatesDropped,
            actor.label,
            createdAt,
          ],
        },
      ];
      for (const w of plan.windows) {
        statements.push(...putWindowStatements(tenant.id, collectorId, { windowStart: w.windowStart, windowSeconds: w.windowSeconds, node: ctx.node }, w.state, createdAt));
      }
      statements.push(
        auditStatement(tenant.id, actor, "merge.create", plan.name, createdAt, {
          inputs: plan.collectors,
          from: new Date(plan.from).toISOString(),
          to: new Date(plan.to).toISOString(),
          sampleSize: plan.sampleSize,
          coordinated: plan.coordinated,
          windows: plan.totals.windows,
          kept: plan.totals.kept,
          duplicatesDropped: plan.totals.duplicatesDropped,
        }),
      );
      await tx.batch(statements);
      await tx.commit();
      return { plan, createdAt };
    } finally {
      // Rolls back unless committed; a no-op after commit or rollback.
      tx.close();
    }
  });
}

/** The 422 of a create whose range holds no window of the inputs. */
export function nothingToMerge(plan: Pick<MergePlan, "collectors" | "from" | "to">): ApiError {
  const message = `nothing to merge: ${plan.collectors.join(", ")} have no windows starting in [${new Date(plan.from).toISOString()}, ${new Date(plan.to).toISOString()})`;
  return new ApiError(422, "nothing_to_merge", `Cannot merge: ${message}.`, { details: [{ path: "from", message }] });
}

/** Throws ApiError 409 when the tenant has a collector (stream or merge) of that name. */
export async function refuseTakenName(db: Db, tenantId: number, name: string): Promise<void> {
  const found = await db.$client.execute({ sql: "SELECT kind FROM collectors WHERE tenant_id = ? AND name = ?", args: [tenantId, name] });
  if (found.rows.length === 0) return;
  const message =
    String(found.rows[0][0]) === "merge"
      ? `${name} is an existing merge; delete it first to build it again, or choose another name`
      : `${name} is a stream collector of this tenant; choose another name for the merge`;
  throw new ApiError(409, "name_taken", `Cannot merge: name: ${message}.`, { details: [{ path: "name", message }] });
}

/**
 * Deletes the merged collector `name`: its reservoirs and provenance row go with it (ON
 * DELETE CASCADE), and the ledger records it, in one write transaction. The inputs are not
 * touched. Throws ApiError 404 for an unknown name and 422 for a stream collector.
 */
export function deleteMerge(ctx: MergeContext, tenantId: number, name: string, actor: MergeActor): Promise<MergeListing> {
  return ctx.manager.exclusive(async () => {
    const found = await ctx.db.$client.execute({ sql: "SELECT id, kind FROM collectors WHERE tenant_id = ? AND name = ?", args: [tenantId, name] });
    if (found.rows.length === 0) {
      throw new ApiError(404, "not_found", `This tenant has no merge named ${name}.`, { details: [{ path: "name", message: `${name} is not a collector of this tenant` }] });
    }
    if (String(found.rows[0][1]) !== "merge") {
      const message = `${name} is a stream collector, not a merge; only merges can be deleted here`;
      throw new ApiError(422, "not_a_merge", `Cannot delete: ${message}.`, { details: [{ path: "name", message }] });
    }
    const collectorId = Number(found.rows[0][0]);
    const [merge] = await selectMerges(ctx.db, tenantId, collectorId);
    const at = Date.now();
    await ctx.db.$client.batch(
      [
        { sql: "DELETE FROM collectors WHERE tenant_id = ? AND id = ? AND kind = 'merge'", args: [tenantId, collectorId] },
        auditStatement(tenantId, actor, "merge.delete", name, at, {
          inputs: merge.inputs,
          from: new Date(merge.from).toISOString(),
          to: new Date(merge.to).toISOString(),
          windows: merge.windows,
          createdBy: merge.createdBy,
        }),
      ],
      "write",
    );
    return merge;
  });
}

/** A tenant's merges with their provenance, newest first. */
export function listMerges(db: Db, tenantId: number): Promise<MergeListing[]> {
  return selectMerges(db, tenantId);
}

/** The tenant's merges, or the one of that merged collector. */
async function selectMerges(db: Db, tenantId: number, collectorId?: number): Promise<MergeListing[]> {
  const found = await db.$client.execute({
    sql:
      "SELECT c.name, m.inputs, m.from_ms, m.to_ms, m.sample_size, m.coordinated, m.windows, m.kept, m.duplicates_dropped, m.created_by, m.created_at " +
      "FROM merges m JOIN collectors c ON c.id = m.collector_id AND c.tenant_id = m.tenant_id " +
      `WHERE m.tenant_id = ?${collectorId === undefined ? "" : " AND m.collector_id = ?"} ORDER BY m.created_at DESC, m.id DESC`,
    args: collectorId === undefined ? [tenantId] : [tenantId, collectorId],
  });
  return found.rows.map((row) => ({
    name: String(row[0]),
    inputs: JSON.parse(String(row[1])) as string[],
    from: Number(row[2]),
    to: Number(row[3]),
    sampleSize: Number(row[4]),
    coordinated: Number(row[5]) === 1,
    windows: Number(row[6]),
    kept: Number(row[7]),
    duplicatesDropped: Number(row[8]),
    createdBy: String(row[9]),
    createdAt: Number(row[10]),
  }));
}

/** Names of the tenant's stream collectors (the ones a merge can take), by name. */
export async function streamCollectorNames(db: Db, tenantId: number): Promise<string[]> {
  const found = await db.$client.execute({ sql: "SELECT name FROM collectors WHERE tenant_id = ? AND kind = 'stream' ORDER BY name", args: [tenantId] });
  return found.rows.map((row) => String(row[0]));
}

/** The ledger entry, written in the same transaction as the change it records (the row recordAudit writes). */
function auditStatement(tenantId: number, actor: MergeActor, action: string, target: string, at: number, detail: Record<string, unknown>): InStatement {
  return {
    sql: "INSERT INTO audit_log (tenant_id, actor_user_id, actor, action, target, detail, at) VALUES (?, ?, ?, ?, ?, ?, ?)",
    args: [tenantId, actor.id, actor.label, action, target, JSON.stringify(detail), at],
  };
}

/**
 * Every collector of the tenant for a picker, by name: stream collectors, merges with the
 * inputs they hold samples of, and copies (filled by sample-file imports) with the collectors
 * they came from. Merges and copies count only when named, never with what they hold.
 */
export async function collectorChoices(db: Db, tenantId: number): Promise<{ name: string; kind: "stream" | "merge" | "copy"; inputs: string[] }[]> {
  const found = await db.$client.execute({
    sql: "SELECT c.name, c.kind, m.inputs, c.copy_of FROM collectors c LEFT JOIN merges m ON m.collector_id = c.id WHERE c.tenant_id = ? ORDER BY c.name",
    args: [tenantId],
  });
  return found.rows.map((row) => {
    const name = String(row[0]);
    if (String(row[1]) === "merge") return { name, kind: "merge" as const, inputs: row[2] === null ? [] : (JSON.parse(String(row[2])) as string[]) };
    if (row[3] !== null) return { name, kind: "copy" as const, inputs: JSON.parse(String(row[3])) as string[] };
    return { name, kind: "stream" as const, inputs: [] };
  });
}
