import { and, asc, eq } from "drizzle-orm";
import { randomBytes } from "node:crypto";
import { z } from "zod";
import type { Db } from "./db/client.server";
import { collectors, tenants, type Tenant } from "./db/schema.server";
import { WINDOW_SECONDS_CHOICES } from "./ingest/window";

/** Tenant slugs: lowercase letters, digits and dashes, as in a URL path segment. */
export const tenantSlugSchema = z
  .string()
  .regex(/^[a-z0-9](?:[a-z0-9-]{0,46}[a-z0-9])?$/, "must be 1–48 lowercase letters, digits or dashes, not starting or ending with a dash");

/** Collector names: what a person calls a router, site or script. */
export const collectorNameSchema = z
  .string()
  .regex(/^[A-Za-z0-9][A-Za-z0-9._:-]{0,63}$/, "must be 1–64 letters, digits, '.', '_', ':' or '-', starting with a letter or digit");

export const sampleSizeSchema = z.number().int().min(16, "must be at least 16").max(65_536, "must be at most 65536");
export const windowSecondsSchema = z
  .number()
  .int()
  .refine((s) => (WINDOW_SECONDS_CHOICES as readonly number[]).includes(s), `must be one of ${WINDOW_SECONDS_CHOICES.join(", ")} seconds`);

export const newTenantSchema = z.object({
  slug: tenantSlugSchema,
  name: z.string().trim().min(1).max(120).optional(),
  sampleSize: sampleSizeSchema.default(1024),
  windowSeconds: windowSecondsSchema.default(300),
  weightAttribute: z.enum(["bytes", "packets"]).default("bytes"),
  retentionDays: z.number().int().min(1).max(3650).default(30),
  /** M; at least N (retentionDays). Default: a year, or N when that is longer. */
  hourlyRetentionDays: z.number().int().min(1).max(3650).optional(),
  /** Coordinated priorities (app/sampling/coordinated.ts); the tenant's secret is made here. */
  coordinated: z.boolean().default(false),
}).refine((t) => t.hourlyRetentionDays === undefined || t.hourlyRetentionDays >= t.retentionDays, {
  path: ["hourlyRetentionDays"],
  message: "must be at least the fine-window days (retentionDays): hourly windows are made from fine ones",
});

export async function createTenant(db: Db, input: z.input<typeof newTenantSchema>): Promise<Tenant> {
  const t = newTenantSchema.parse(input);
  const [row] = await db
    .insert(tenants)
    .values({ slug: t.slug, name: t.name ?? t.slug, sampleSize: t.sampleSize, windowSeconds: t.windowSeconds, weightAttribute: t.weightAttribute, retentionDays: t.retentionDays,
      hourlyRetentionDays: Math.max(t.hourlyRetentionDays ?? 365, t.retentionDays),
      coordinated: t.coordinated,
      coordinationSecret: t.coordinated ? randomBytes(16).toString("hex") : null,
    })
    .returning();
  return row;
}

export function listTenants(db: Db): Promise<Tenant[]> {
  return db.select().from(tenants).orderBy(asc(tenants.slug));
}

export async function findTenantBySlug(db: Db, slug: string): Promise<Tenant | undefined> {
  const [row] = await db.select().from(tenants).where(eq(tenants.slug, slug));
  return row;
}

export async function findTenantById(db: Db, id: number): Promise<Tenant | undefined> {
  const [row] = await db.select().from(tenants).where(eq(tenants.id, id));
  return row;
}

/** A name that belongs to a merged collector was used where records are sent. */
export class MergedCollectorError extends Error {
  constructor(readonly collector: string) {
    super(`${collector} is a merged collector (made by a merge of other collectors); records and samples cannot be sent to it. Choose another name.`);
    this.name = "MergedCollectorError";
  }
}

/**
 * The stream collector of that name in the tenant, created when new. Throws
 * MergedCollectorError when the name belongs to a merge: its reservoirs are a merge's
 * output, and records sent there would mix with it.
 */
export async function ensureCollector(db: Db, tenantId: number, name: string): Promise<{ id: number; name: string }> {
  collectorNameSchema.parse(name);
  await db.insert(collectors).values({ tenantId, name }).onConflictDoNothing();
  const [row] = await db
    .select({ id: collectors.id, name: collectors.name, kind: collectors.kind })
    .from(collectors)
    .where(and(eq(collectors.tenantId, tenantId), eq(collectors.name, name)));
  if (row.kind !== "stream") throw new MergedCollectorError(row.name);
  return { id: row.id, name: row.name };
}
