import { and, count, desc, eq, gte, isNull, lt, or, sql, type SQL } from "drizzle-orm";
import { z } from "zod";
import type { Db } from "~/db/client.server";
import { auditLog, memberships } from "~/db/schema.server";
import { describeDetail, ledgerTime, type DetailRow } from "./ledger-format";

export const LEDGER_PAGE_SIZE = 50;
const DAY_MS = 86_400_000;

const day = z
  .string()
  .regex(/^\d{4}-\d{2}-\d{2}$/, "must be a date like 2025-03-01")
  .refine((s) => !Number.isNaN(Date.parse(`${s}T00:00:00Z`)), "is not a calendar date");

/** The ledger's filters, as they travel in the URL (empty fields mean "any"). */
export const ledgerFilterSchema = z
  .object({
    action: z
      .string()
      .regex(/^[a-z][a-z0-9.-]{0,63}$/, "must be an action name such as member.role")
      .optional(),
    actor: z.string().trim().max(100, "must be at most 100 characters").optional(),
    from: day.optional(),
    to: day.optional(),
    page: z.coerce.number().int("must be a whole number").min(1, "must be 1 or more").max(1_000_000).default(1),
  })
  .refine((f) => !f.from || !f.to || f.from <= f.to, { path: ["to"], message: "must not be before the From date" });
export type LedgerFilter = z.output<typeof ledgerFilterSchema>;

/** Reads the filters from a URL's query; empty values count as unset, so a submitted blank form means "everything". */
export function parseLedgerFilter(params: URLSearchParams) {
  const input: Record<string, string> = {};
  for (const key of ["action", "actor", "from", "to", "page"]) {
    const value = params.get(key)?.trim();
    if (value) input[key] = value;
  }
  return ledgerFilterSchema.safeParse(input);
}

export interface LedgerRow {
  id: number;
  /** UTC to the second, as the console writes times ("2025-03-01 14:05:09 UTC"). */
  when: string;
  who: string;
  action: string;
  target: string | null;
  details: DetailRow[];
}

export interface LedgerPage {
  rows: LedgerRow[];
  total: number;
  page: number;
  pageSize: number;
  pages: number;
  /** Every action that occurs in this tenant's ledger, for the filter's choices. */
  actions: string[];
}

/**
 * One page of a tenant's ledger, newest first: the entries of the tenant itself and the
 * sign-ins (entries outside any tenant) of its current members. Tenant isolation is in the
 * query: nothing of another tenant, and no sign-in of a non-member, can match.
 */
export async function ledgerPage(db: Db, tenantId: number, filter: LedgerFilter): Promise<LedgerPage> {
  const scope = or(
    eq(auditLog.tenantId, tenantId),
    and(
      isNull(auditLog.tenantId),
      sql`${auditLog.actorUserId} IN (SELECT ${memberships.userId} FROM ${memberships} WHERE ${memberships.tenantId} = ${tenantId})`,
    ),
  )!;
  const conditions: SQL[] = [scope];
  if (filter.action) conditions.push(eq(auditLog.action, filter.action));
  // LIKE is case-insensitive for ASCII in SQLite; the person's text is matched literally.
  if (filter.actor) conditions.push(sql`${auditLog.actor} LIKE ${`%${escapeLike(filter.actor)}%`} ESCAPE '\\'`);
  if (filter.from) conditions.push(gte(auditLog.at, Date.parse(`${filter.from}T00:00:00Z`)));
  // The To day is included whole.
  if (filter.to) conditions.push(lt(auditLog.at, Date.parse(`${filter.to}T00:00:00Z`) + DAY_MS));
  const where = and(...conditions);

  const [{ total }] = await db.select({ total: count() }).from(auditLog).where(where);
  const rows = await db
    .select({ id: auditLog.id, at: auditLog.at, actor: auditLog.actor, action: auditLog.action, target: auditLog.target, detail: auditLog.detail })
    .from(auditLog)
    .where(where)
    .orderBy(desc(auditLog.at), desc(auditLog.id))
    .limit(LEDGER_PAGE_SIZE)
    .offset((filter.page - 1) * LEDGER_PAGE_SIZE);
  const actions = await db.selectDistinct({ action: auditLog.action }).from(auditLog).where(scope).orderBy(auditLog.action);

  return {
    rows: rows.map((r) => ({ id: r.id, when: ledgerTime(r.at), who: r.actor, action: r.action, target: r.target, details: describeDetail(r.detail) })),
    total,
    page: filter.page,
    pageSize: LEDGER_PAGE_SIZE,
    pages: Math.max(1, Math.ceil(total / LEDGER_PAGE_SIZE)),
    actions: actions.map((a) => a.action),
  };
}

function escapeLike(text: string): string {
  return text.replace(/[\\%_]/g, (c) => `\\${c}`);
}
