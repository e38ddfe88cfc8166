import { randomBytes } from "node:crypto";
import { asc, count, eq, max, min, sql } from "drizzle-orm";
import { z } from "zod";
import { recordAudit } from "~/audit.server";
import type { Db } from "~/db/client.server";
import { reservoirs, tenants, WEIGHT_ATTRIBUTES } from "~/db/schema.server";
import { maxHourlySampleSize } from "~/sampling/rollup";
import { newTenantSchema, sampleSizeSchema, windowSecondsSchema } from "~/tenants.server";
import { SETTING_LABELS, type SettingField, type TenantSettings } from "./fields";

/** A whole number as a form posts it (text), checked by the tenant schema that owns its bounds. */
const wholeNumber = (inner: z.ZodType<number, number>) =>
  z
    .string({ error: "is required" })
    .trim()
    .min(1, "is required")
    .regex(/^-?\d+$/, "must be a whole number")
    .transform(Number)
    .pipe(inner);

const days = newTenantSchema.shape.retentionDays.unwrap();

/** The Settings form, with the same bounds as a tenant created by the CLI (newTenantSchema). */
const settingsFormSchema = z
  .object({
    sampleSize: wholeNumber(sampleSizeSchema),
    windowSeconds: wholeNumber(windowSecondsSchema),
    weightAttribute: z.enum(WEIGHT_ATTRIBUTES, { error: "must be bytes or packets" }),
    retentionDays: wholeNumber(days),
    hourlyRetentionDays: wholeNumber(days),
    // Blank: the tenant's k (stored as null, so a later change of k carries the roll-up along).
    hourlySampleSize: z
      .string({ error: "must be a whole number or blank" })
      .optional()
      .transform((v) => v?.trim() || null)
      .pipe(wholeNumber(sampleSizeSchema).nullable()),
    // A checkbox posts "on" when ticked and nothing otherwise.
    coordinated: z
      .enum(["on", "true"], { error: "must be ticked or not" })
      .optional()
      .transform((v) => v !== undefined),
  })
  .superRefine((s, ctx) => {
    if (s.hourlyRetentionDays < s.retentionDays) {
      ctx.addIssue({
        code: "custom",
        path: ["hourlyRetentionDays"],
        message: `must be at least ${s.retentionDays}, the days fine windows are kept: fine windows become hourly ones, which cannot go before them`,
      });
    }
    // Above the sum of the fine windows' k an hour has no more kept records to keep (app/sampling/rollup.ts).
    const most = maxHourlySampleSize(s.sampleSize, s.windowSeconds);
    if (s.hourlySampleSize !== null && s.hourlySampleSize > most) {
      ctx.addIssue({
        code: "custom",
        path: ["hourlySampleSize"],
        message:
          most === s.sampleSize
            ? `must be at most ${most}: hour-long windows are not rolled up, so it cannot exceed k`
            : `must be at most ${most}, the sum of the k of the ${3600 / s.windowSeconds} fine windows of an hour (${s.sampleSize} × ${3600 / s.windowSeconds}): more has nothing to keep`,
      });
    }
  });

export type SettingsParse = { ok: true; settings: TenantSettings } | { ok: false; fieldErrors: Partial<Record<SettingField, string>> };

/** Parses posted form fields; each failure is one message per field, worded to follow the field's label. */
export function parseSettingsForm(form: Record<string, unknown>): SettingsParse {
  const parsed = settingsFormSchema.safeParse(form, {
    // newTenantSchema's retention bounds carry zod's generic wording; say it the way the other fields do.
    error: (issue) =>
      issue.code === "too_small" ? `must be at least ${issue.minimum}` : issue.code === "too_big" ? `must be at most ${issue.maximum}` : undefined,
  });
  if (parsed.success) return { ok: true, settings: parsed.data };
  const fieldErrors: Partial<Record<SettingField, string>> = {};
  for (const issue of parsed.error.issues) {
    const field = issue.path[0];
    if (typeof field === "string" && field in SETTING_LABELS && !fieldErrors[field as SettingField]) fieldErrors[field as SettingField] = issue.message;
  }
  return { ok: false, fieldErrors };
}

export interface SettingChange {
  field: SettingField;
  old: number | string | boolean | null;
  new: number | string | boolean | null;
}

/**
 * Stores a tenant's new settings and records what changed in the ledger (settings.update,
 * old and new values of the changed fields only). Nothing changed → nothing written.
 * Ingest reads the tenant row on every batch, so the next window opened uses the new
 * k and length; a reservoir keeps the k and length it was created with.
 *
 * Turning coordinated priorities on makes the tenant's coordination secret (16 random bytes,
 * the SipHash key of app/sampling/coordinated.ts) when it has none, and never changes an
 * existing one: priorities drawn before and after stay comparable, so a later merge still
 * recognises the same flow.
 */
export async function updateTenantSettings(
  db: Db,
  tenant: { id: number } & TenantSettings,
  next: TenantSettings,
  actor: { id: number; label: string },
): Promise<SettingChange[]> {
  const fields = Object.keys(SETTING_LABELS) as SettingField[];
  const changes = fields.filter((f) => tenant[f] !== next[f]).map((f) => ({ field: f, old: tenant[f], new: next[f] }));
  if (changes.length === 0) return changes;
  const coordinationSecret = next.coordinated ? sql`coalesce(${tenants.coordinationSecret}, ${randomBytes(16).toString("hex")})` : undefined;
  await db
    .update(tenants)
    .set({ ...next, coordinationSecret })
    .where(eq(tenants.id, tenant.id));
  await recordAudit(db, {
    tenantId: tenant.id,
    actor,
    action: "settings.update",
    detail: {
      old: Object.fromEntries(changes.map((c) => [c.field, c.old])),
      new: Object.fromEntries(changes.map((c) => [c.field, c.new])),
    },
  });
  return changes;
}

export interface ReservoirShape {
  k: number;
  windowSeconds: number;
  reservoirs: number;
  firstWindowStart: number;
  lastWindowStart: number;
}

/** The tenant's stored reservoirs grouped by their own k and window length. */
export function reservoirShapes(db: Db, tenantId: number): Promise<ReservoirShape[]> {
  return db
    .select({
      k: reservoirs.k,
      windowSeconds: reservoirs.windowSeconds,
      reservoirs: count(),
      firstWindowStart: min(reservoirs.windowStart).mapWith(Number),
      lastWindowStart: max(reservoirs.windowStart).mapWith(Number),
    })
    .from(reservoirs)
    .where(eq(reservoirs.tenantId, tenantId))
    .groupBy(reservoirs.k, reservoirs.windowSeconds)
    .orderBy(asc(reservoirs.windowSeconds), asc(reservoirs.k));
}
