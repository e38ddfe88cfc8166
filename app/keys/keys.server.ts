import { and, asc, desc, eq } from "drizzle-orm";
import { z } from "zod";
import type { Db } from "~/db/client.server";
import { apiKeys, collectors } from "~/db/schema.server";
import { collectorNameSchema } from "~/tenants.server";
import { SCOPE_CHOICES } from "./scope";

/** The visible part of a key (`weir_<8 hex>`), the only handle the console has on it. */
const keyPrefixSchema = z.string({ error: "is missing" }).regex(/^weir_[0-9a-f]{8}$/, "must be weir_ followed by 8 hex digits");

/** The two things the Keys form posts, told apart by `intent`. */
export const keyActionSchema = z.discriminatedUnion(
  "intent",
  [
    z.object({
      intent: z.literal("create"),
      // Trimmed first: a stray space from a paste is not what anyone means by a name.
      collector: z.string({ error: "is required" }).trim().min(1, "is required").pipe(collectorNameSchema),
      scope: z.enum(SCOPE_CHOICES, { error: "must be ingest, query or both" }),
    }),
    z.object({ intent: z.literal("revoke"), prefix: keyPrefixSchema }),
  ],
  { error: "The form must say whether to create or revoke a key." },
);

/**
 * The collector-name rule for the browser's check as the admin types, derived from
 * collectorNameSchema itself: that schema lives in a server-only module, which the client
 * bundle may not import, and copying its pattern would let the two drift apart.
 */
export function collectorNameRule(): { pattern: string; message: string } {
  const { pattern } = z.toJSONSchema(collectorNameSchema) as { pattern?: string };
  const message = collectorNameSchema.safeParse("").error?.issues[0]?.message;
  if (!pattern || !message) throw new Error("collectorNameSchema is expected to be a single regex check");
  return { pattern, message };
}

export interface KeyRow {
  prefix: string;
  scopes: string;
  collector: string;
  createdBy: string | null;
  createdAt: number;
  lastUsedAt: number | null;
  revokedAt: number | null;
}

/** A tenant's keys, newest first; never the hash, which the console has no use for. */
export function listTenantKeys(db: Db, tenantId: number): Promise<KeyRow[]> {
  return db
    .select({
      prefix: apiKeys.prefix,
      scopes: apiKeys.scopes,
      collector: collectors.name,
      createdBy: apiKeys.createdBy,
      createdAt: apiKeys.createdAt,
      lastUsedAt: apiKeys.lastUsedAt,
      revokedAt: apiKeys.revokedAt,
    })
    .from(apiKeys)
    .innerJoin(collectors, eq(collectors.id, apiKeys.collectorId))
    .where(eq(apiKeys.tenantId, tenantId))
    .orderBy(desc(apiKeys.createdAt), desc(apiKeys.id));
}

/** One key of a tenant by its prefix, or undefined when the tenant has none such. */
export async function findTenantKey(
  db: Db,
  tenantId: number,
  prefix: string,
): Promise<Pick<KeyRow, "prefix" | "collector" | "scopes" | "revokedAt"> | undefined> {
  const [row] = await db
    .select({ prefix: apiKeys.prefix, collector: collectors.name, scopes: apiKeys.scopes, revokedAt: apiKeys.revokedAt })
    .from(apiKeys)
    .innerJoin(collectors, eq(collectors.id, apiKeys.collectorId))
    .where(and(eq(apiKeys.tenantId, tenantId), eq(apiKeys.prefix, prefix)));
  return row;
}

/** The names of a tenant's stream collectors (keys cannot send to a merge), for the form's suggestions. */
export async function listCollectorNames(db: Db, tenantId: number): Promise<string[]> {
  const rows = await db
    .select({ name: collectors.name })
    .from(collectors)
    .where(and(eq(collectors.tenantId, tenantId), eq(collectors.kind, "stream")))
    .orderBy(asc(collectors.name));
  return rows.map((r) => r.name);
}
