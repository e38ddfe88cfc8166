import { and, asc, desc, eq } from "drizzle-orm";
import { z } from "zod";
import { recordAudit } from "~/audit.server";
import type { Db } from "~/db/client.server";
import { collectors, exporterClaims, exporters } from "~/db/schema.server";
import type { TemplateSummary } from "~/ipfix/types";
import { parseAddress } from "~/net/address";
import { collectorNameSchema, ensureCollector, MergedCollectorError } from "~/tenants.server";
import { ClaimIndex, claimRange, MAX_DOMAIN_ID, type ClaimRange } from "./claim-index";
import { claimDomainLabel, describeClaim } from "./format";

export { describeClaim };

/**
 * Exporter claims: which collector of which tenant the IPFIX / NetFlow v9 messages of an
 * exporter feed (app/exporters/claim-index.ts has the matching rule), and what the listeners
 * observed of each exporter (table `exporters`, written by the collection service), read per
 * tenant through the claims.
 */

// ---- input -------------------------------------------------------------------------------

/** An address or CIDR, parsed into a claim's range; the message says what is wrong. */
export const claimCidrSchema = z.string({ error: "is required" }).transform((text, ctx): ClaimRange => {
  try {
    return claimRange(text);
  } catch (error) {
    ctx.addIssue({ code: "custom", message: (error as Error).message });
    return z.NEVER;
  }
});

/**
 * An Observation Domain ID (IPFIX, RFC 7011 §3.1) or source id (NetFlow v9, RFC 3954 §5.1):
 * an unsigned 32-bit number, as a number or as text; empty or absent is null, every domain.
 */
export const domainIdSchema = z
  .union([z.number(), z.string(), z.null()])
  .optional()
  .transform((value, ctx): number | null => {
    const text = typeof value === "string" ? value.trim() : value;
    if (text === undefined || text === null || text === "") return null;
    const n = typeof text === "number" ? text : /^\d{1,10}$/.test(text) ? Number(text) : Number.NaN;
    if (!Number.isInteger(n) || n < 0 || n > MAX_DOMAIN_ID) {
      ctx.addIssue({
        code: "custom",
        message: `must be a whole number from 0 to ${MAX_DOMAIN_ID} (the exporter's observation domain id or NetFlow v9 source id), or empty for every domain`,
      });
      return z.NEVER;
    }
    return n;
  });

/** What a claim needs: the exporter's address or CIDR, optionally a domain, and the collector it feeds. */
export const claimInputSchema = z.object({
  cidr: claimCidrSchema,
  domain: domainIdSchema,
  // Trimmed first: a stray space from a paste is not what anyone means by a name.
  collector: z.string({ error: "is required" }).trim().min(1, "is required").pipe(collectorNameSchema),
});

/** The two things the Exporters page posts, told apart by `intent`. */
export const exporterActionSchema = z.discriminatedUnion(
  "intent",
  [
    claimInputSchema.extend({ intent: z.literal("claim") }),
    z.object({ intent: z.literal("release"), cidr: claimCidrSchema, domain: domainIdSchema }),
  ],
  { error: "The form must say whether to claim or release an exporter." },
);

// ---- refusals ----------------------------------------------------------------------------

export const CLAIM_ERROR_CODES = ["claim-invalid", "claim-overlap", "claim-duplicate", "claim-merged-collector", "claim-not-found", "claim-ambiguous"] as const;
export type ClaimErrorCode = (typeof CLAIM_ERROR_CODES)[number];

/**
 * Why a claim or a release was refused, with the HTTP status it answers and the form field
 * it concerns. Route modules match it by `code` (see `claimRefusal`), never with
 * `instanceof`: in the running product a class can exist twice, once per module graph.
 */
export class ClaimError extends Error {
  override name = "ClaimError";
  constructor(
    readonly code: ClaimErrorCode,
    message: string,
    readonly status: 400 | 404 | 409,
    readonly field?: "cidr" | "domain" | "collector",
  ) {
    super(message);
  }
}

/** The refusal carried by `error` when it is a claim refusal (matched on its code), else null. */
export function claimRefusal(error: unknown): { code: ClaimErrorCode; message: string; status: 400 | 404 | 409; field?: "cidr" | "domain" | "collector" } | null {
  if (typeof error !== "object" || error === null) return null;
  const { code, message, status, field } = error as Partial<ClaimError>;
  if (typeof code !== "string" || !(CLAIM_ERROR_CODES as readonly string[]).includes(code)) return null;
  return { code: code as ClaimErrorCode, message: String(message), status: status ?? 409, field };
}

/** The first problem of a parse as a ClaimError naming its field (`field` when the schema was a single field's). */
function invalid(error: z.ZodError, only?: "cidr" | "domain"): ClaimError {
  const issue = error.issues[0];
  const field = only ?? issue.path[0];
  const known = field === "cidr" || field === "domain" || field === "collector" ? field : undefined;
  // The CIDR's messages are whole sentences of their own ("… has host bits set; did you mean …?").
  const text = known === "cidr" ? `Address or CIDR: ${issue.message}` : `${known === "domain" ? "Observation domain" : known === "collector" ? "Collector" : "Input"} ${issue.message}`;
  return new ClaimError("claim-invalid", text, 400, known);
}

// ---- claim and release -------------------------------------------------------------------

export interface Actor {
  id: number | null;
  label: string;
}

export interface ClaimView {
  id: number;
  cidr: string;
  domainId: number | null;
  collector: string;
  createdBy: string;
  createdAt: number;
}

// A stored claim shares an address with the new one and a message could match both (the
// domains are equal, or one of them takes every domain): claim-index.ts `overlaps`, in SQL.
// BLOBs compare with memcmp in SQLite, the order of 16-byte addresses.
const CONFLICT = "c.first <= ?1 AND c.last >= ?2 AND (c.domain_id IS NULL OR ?3 IS NULL OR c.domain_id = ?3)";

/**
 * Claims an exporter (its address or a CIDR, optionally one observation domain) for a
 * collector of the tenant, creating the stream collector when it is new. Refused with a
 * ClaimError: a merged collector's name; a claim that overlaps another tenant's claim (its
 * CIDR is named, the tenant never is); the same CIDR and domain claimed again by this tenant.
 * Claims of one tenant may nest (the most specific wins). Writes an `exporter.claim` entry
 * to the Ledger.
 *
 * @example await claimExporter(db, { tenantId, collector: "pop-north", cidr: "192.0.2.1", domainId: null, actor })
 *          // { id, cidr: "192.0.2.1/32", domainId: null, collector: "pop-north", newCollector: true }
 */
export async function claimExporter(
  db: Db,
  input: { tenantId: number; collector: string; cidr: string; domainId?: number | string | null; actor: Actor },
): Promise<{ id: number; cidr: string; domainId: number | null; collector: string; newCollector: boolean }> {
  const parsed = claimInputSchema.safeParse({ cidr: input.cidr, domain: input.domainId ?? null, collector: input.collector });
  if (!parsed.success) throw invalid(parsed.error);
  const { cidr: range, domain: domainId, collector: name } = parsed.data;
  const { tenantId } = input;

  // Checked before the collector is made, so a refused claim leaves nothing behind.
  await refuseConflicts(db, tenantId, range, domainId);
  const [existing] = await db
    .select({ id: collectors.id })
    .from(collectors)
    .where(and(eq(collectors.tenantId, tenantId), eq(collectors.name, name)));
  let collector: { id: number; name: string };
  try {
    collector = await ensureCollector(db, tenantId, name);
  } catch (error) {
    // Same module graph as tenants.server (both are imported together), so instanceof holds here.
    if (error instanceof MergedCollectorError) throw new ClaimError("claim-merged-collector", error.message, 409, "collector");
    throw error;
  }

  // One statement checks and inserts, so two admins claiming overlapping ranges at once
  // cannot both succeed (SQLite runs a statement atomically).
  const createdAt = Date.now();
  const inserted = await db.$client.execute({
    sql:
      "INSERT INTO exporter_claims (tenant_id, collector_id, cidr, first, last, prefix_length, domain_id, created_by, created_at) " +
      "SELECT ?4, ?5, ?6, ?2, ?1, ?7, ?3, ?8, ?9 " +
      `WHERE NOT EXISTS (SELECT 1 FROM exporter_claims c WHERE ${CONFLICT} AND (c.tenant_id <> ?4 OR (c.cidr = ?6 AND c.domain_id IS ?3))) RETURNING id`,
    args: [Buffer.from(range.last), Buffer.from(range.first), domainId, tenantId, collector.id, range.cidr, range.prefixLength, input.actor.label, createdAt],
  });
  if (inserted.rows.length === 0) {
    await refuseConflicts(db, tenantId, range, domainId);
    throw new ClaimError("claim-overlap", `${describeClaim(range.cidr, domainId)} was claimed by someone else a moment ago; reload and try again.`, 409, "cidr");
  }
  const id = Number(inserted.rows[0][0]);
  await recordAudit(db, {
    tenantId,
    actor: input.actor,
    action: "exporter.claim",
    target: describeClaim(range.cidr, domainId),
    detail: { cidr: range.cidr, domain: domainId ?? "every", collector: collector.name, ...(existing ? {} : { newCollector: true }) },
  });
  return { id, cidr: range.cidr, domainId, collector: collector.name, newCollector: !existing };
}

async function refuseConflicts(db: Db, tenantId: number, range: ClaimRange, domainId: number | null): Promise<void> {
  const { rows } = await db.$client.execute({
    sql: `SELECT c.tenant_id, c.cidr, c.domain_id, k.name FROM exporter_claims c JOIN collectors k ON k.id = c.collector_id WHERE ${CONFLICT} ORDER BY c.prefix_length, c.id`,
    args: [Buffer.from(range.last), Buffer.from(range.first), domainId],
  });
  const wanted = describeClaim(range.cidr, domainId);
  for (const row of rows) {
    if (Number(row[0]) === tenantId) continue;
    // Named by its range only: which tenant holds it is that tenant's business.
    const theirs = describeClaim(String(row[1]), row[2] === null ? null : Number(row[2]));
    throw new ClaimError(
      "claim-overlap",
      `${wanted} overlaps ${theirs}, which another tenant of this deployment has claimed. Claims of two tenants may not overlap, ` +
        "or one exporter's records could feed both: claim a narrower range or another observation domain, or ask the deployment's operator.",
      409,
      "cidr",
    );
  }
  for (const row of rows) {
    const sameDomain = (row[2] === null ? null : Number(row[2])) === domainId;
    if (String(row[1]) === range.cidr && sameDomain) {
      throw new ClaimError("claim-duplicate", `${wanted} is already claimed for collector ${String(row[3])}. Release it first to claim it for another collector.`, 409, "cidr");
    }
  }
}

/**
 * Releases one of the tenant's claims, named by its address or CIDR and, when the tenant
 * claimed that range for several domains, the domain (null: the claim of every domain).
 * The exporter's messages are dropped and counted as unclaimed from then on. Writes an
 * `exporter.release` entry to the Ledger. Throws ClaimError when there is no such claim, or
 * when `domainId` is left out and the range is claimed for more than one domain.
 */
export async function releaseExporter(
  db: Db,
  input: { tenantId: number; cidr: string; domainId?: number | string | null; actor: Actor },
): Promise<{ cidr: string; domainId: number | null; collector: string }> {
  const cidr = claimCidrSchema.safeParse(input.cidr);
  if (!cidr.success) throw invalid(cidr.error, "cidr");
  let domainFilter: number | null | undefined;
  if (input.domainId !== undefined) {
    const domain = domainIdSchema.safeParse(input.domainId);
    if (!domain.success) throw invalid(domain.error, "domain");
    domainFilter = domain.data;
  }
  const range = cidr.data;
  const claims = (await listClaims(db, input.tenantId)).filter((c) => c.cidr === range.cidr && (domainFilter === undefined || c.domainId === domainFilter));
  if (claims.length === 0) {
    const what = domainFilter === undefined ? range.cidr : describeClaim(range.cidr, domainFilter);
    throw new ClaimError("claim-not-found", `This tenant has no claim on ${what}.`, 404, "cidr");
  }
  if (claims.length > 1) {
    const domains = claims.map((c) => claimDomainLabel(c.domainId)).join(", ");
    throw new ClaimError("claim-ambiguous", `${range.cidr} is claimed more than once (${domains}); say which observation domain to release.`, 409, "domain");
  }
  const [claim] = claims;
  const deleted = await db
    .delete(exporterClaims)
    .where(and(eq(exporterClaims.id, claim.id), eq(exporterClaims.tenantId, input.tenantId)))
    .returning({ id: exporterClaims.id });
  // Another admin released it between the read and the delete: the wanted state, nothing to record.
  if (deleted.length > 0) {
    await recordAudit(db, {
      tenantId: input.tenantId,
      actor: input.actor,
      action: "exporter.release",
      target: describeClaim(claim.cidr, claim.domainId),
      detail: { cidr: claim.cidr, domain: claim.domainId ?? "every", collector: claim.collector },
    });
  }
  return { cidr: claim.cidr, domainId: claim.domainId, collector: claim.collector };
}

/** A tenant's claims in address order, with the collector each feeds. */
export async function listClaims(db: Db, tenantId: number): Promise<ClaimView[]> {
  return db
    .select({
      id: exporterClaims.id,
      cidr: exporterClaims.cidr,
      domainId: exporterClaims.domainId,
      collector: collectors.name,
      createdBy: exporterClaims.createdBy,
      createdAt: exporterClaims.createdAt,
    })
    .from(exporterClaims)
    .innerJoin(collectors, eq(collectors.id, exporterClaims.collectorId))
    .where(eq(exporterClaims.tenantId, tenantId))
    .orderBy(asc(exporterClaims.first), asc(exporterClaims.prefixLength), asc(exporterClaims.domainId), asc(exporterClaims.id));
}

// ---- for the collection service ----------------------------------------------------------

/** Every tenant's claims as an index for matching messages to collectors. */
export async function loadClaimIndex(db: Db): Promise<ClaimIndex> {
  const rows = await db
    .select({
      id: exporterClaims.id,
      tenantId: exporterClaims.tenantId,
      collectorId: exporterClaims.collectorId,
      first: exporterClaims.first,
      last: exporterClaims.last,
      prefixLength: exporterClaims.prefixLength,
      domainId: exporterClaims.domainId,
    })
    .from(exporterClaims);
  return new ClaimIndex(rows);
}

/**
 * Changes whenever a claim is made or removed (released, or gone with its collector or
 * tenant): the count falls on every removal, and ids only grow (AUTOINCREMENT), so a removal
 * followed by a new claim still moves the largest id. Claims are never updated in place.
 * The collection service polls it and reloads the index when it differs: route modules run
 * in another module graph than the service, so an in-process event would not reach it.
 */
export async function claimsFingerprint(db: Db): Promise<string> {
  const { rows } = await db.$client.execute("SELECT count(*), coalesce(max(id), 0) FROM exporter_claims");
  return `${Number(rows[0][0])}:${Number(rows[0][1])}`;
}

// ---- observed exporters ------------------------------------------------------------------

/** Rows of `exporters` kept at most (the most recently seen); app/collect prunes the rest. */
export const MAX_EXPORTER_ROWS = 10_000;
/** Exporters not heard from for this long are forgotten (their claims stay). */
export const EXPORTER_ROWS_KEPT_MS = 30 * 24 * 3600_000;

/** What the listeners have seen of one exporter (address, observation domain, transport). */
export interface ObservedExporter {
  address: string;
  /** -1 for messages too short to carry one. */
  domainId: number;
  transport: string;
  firstSeenAt: number;
  lastSeenAt: number;
  messages: number;
  records: number;
  recordsPerSecond: number;
  lost: number;
  lostUnit: string;
  waiting: number;
  droppedWaiting: number;
  malformed: number;
  lastError: string | null;
  unusable: number;
  unclaimedMessages: number;
  samplingInterval: number | null;
  templates: TemplateSummary[];
  enterpriseElements: { enterprise: number; id: number; count: number }[];
}

/** An observed exporter with the claim it matched and the collector that claim feeds. */
export interface ClaimedExporter extends ObservedExporter {
  claim: { id: number; cidr: string; domainId: number | null };
  collector: string;
}

/** The exporters seen from one source address that no claim matched. */
export interface UnclaimedExporter {
  address: string;
  firstSeenAt: number;
  lastSeenAt: number;
  messages: number;
  unclaimedMessages: number;
  records: number;
  /** One entry per (domain, transport) seen, lowest domain first. */
  domains: { domainId: number; transport: string; firstSeenAt: number; lastSeenAt: number; messages: number; unclaimedMessages: number; records: number }[];
}

/**
 * The observed exporters whose address and domain match one of this tenant's claims, with
 * the collector each feeds, by collector then address. Matching is the collection service's
 * own (ClaimIndex over every tenant's claims), so the page shows where records really go.
 */
export async function listExportersForTenant(db: Db, tenantId: number): Promise<ClaimedExporter[]> {
  const [index, observed, claims] = await Promise.all([loadClaimIndex(db), readObserved(db), listClaims(db, tenantId)]);
  const byId = new Map(claims.map((c) => [c.id, c]));
  const out: ClaimedExporter[] = [];
  for (const { exporter, address } of observed) {
    const target = address === null ? null : index.resolve(address, exporter.domainId);
    if (target === null || target.tenantId !== tenantId) continue;
    const claim = byId.get(target.claimId);
    if (!claim) continue;
    out.push({ ...exporter, claim: { id: claim.id, cidr: claim.cidr, domainId: claim.domainId }, collector: claim.collector });
  }
  return out.sort((a, b) => a.collector.localeCompare(b.collector) || compareExporters(a, b));
}

/**
 * Observed exporters no claim of any tenant matches, grouped by source address, most recently
 * seen first. Deployment-wide (they feed nobody yet); only admins are shown them, to claim.
 */
export async function listUnclaimedExporters(db: Db): Promise<UnclaimedExporter[]> {
  const [index, observed] = await Promise.all([loadClaimIndex(db), readObserved(db)]);
  const byAddress = new Map<string, UnclaimedExporter>();
  for (const { exporter: e, address } of observed) {
    if (address !== null && index.resolve(address, e.domainId) !== null) continue;
    let group = byAddress.get(e.address);
    if (!group) {
      group = { address: e.address, firstSeenAt: e.firstSeenAt, lastSeenAt: e.lastSeenAt, messages: 0, unclaimedMessages: 0, records: 0, domains: [] };
      byAddress.set(e.address, group);
    }
    group.firstSeenAt = Math.min(group.firstSeenAt, e.firstSeenAt);
    group.lastSeenAt = Math.max(group.lastSeenAt, e.lastSeenAt);
    group.messages += e.messages;
    group.unclaimedMessages += e.unclaimedMessages;
    group.records += e.records;
    group.domains.push({
      domainId: e.domainId,
      transport: e.transport,
      firstSeenAt: e.firstSeenAt,
      lastSeenAt: e.lastSeenAt,
      messages: e.messages,
      unclaimedMessages: e.unclaimedMessages,
      records: e.records,
    });
  }
  const groups = [...byAddress.values()];
  for (const g of groups) g.domains.sort((a, b) => a.domainId - b.domainId || a.transport.localeCompare(b.transport));
  return groups.sort((a, b) => b.lastSeenAt - a.lastSeenAt || a.address.localeCompare(b.address));
}

async function readObserved(db: Db): Promise<{ exporter: ObservedExporter; address: Uint8Array | null }[]> {
  const rows = await db
    .select({
      address: exporters.address,
      domainId: exporters.domainId,
      transport: exporters.transport,
      firstSeenAt: exporters.firstSeenAt,
      lastSeenAt: exporters.lastSeenAt,
      messages: exporters.messages,
      records: exporters.records,
      recordsPerSecond: exporters.recordsPerSecond,
      lost: exporters.lost,
      lostUnit: exporters.lostUnit,
      waiting: exporters.waiting,
      droppedWaiting: exporters.droppedWaiting,
      malformed: exporters.malformed,
      lastError: exporters.lastError,
      unusable: exporters.unusable,
      unclaimedMessages: exporters.unclaimedMessages,
      samplingInterval: exporters.samplingInterval,
      templates: exporters.templates,
      enterpriseElements: exporters.enterpriseElements,
    })
    .from(exporters)
    // The collection service keeps the table to this size (spoofed sources cannot grow it without bound).
    .orderBy(desc(exporters.lastSeenAt))
    .limit(MAX_EXPORTER_ROWS);
  return rows.map((row) => {
    let address: Uint8Array | null = null;
    try {
      address = parseAddress(row.address);
    } catch {
      // Written by the listeners from a socket's address, so always valid; an odd row feeds nobody.
    }
    return {
      address,
      exporter: { ...row, templates: jsonArray<TemplateSummary>(row.templates), enterpriseElements: jsonArray<{ enterprise: number; id: number; count: number }>(row.enterpriseElements) },
    };
  });
}

/** A JSON array column; anything else reads as empty, since the page must still show the exporter. */
function jsonArray<T>(text: string): T[] {
  try {
    const value: unknown = JSON.parse(text);
    return Array.isArray(value) ? (value as T[]) : [];
  } catch {
    return [];
  }
}

function compareExporters(a: ObservedExporter, b: ObservedExporter): number {
  return a.address.localeCompare(b.address, "en", { numeric: true }) || a.domainId - b.domainId || a.transport.localeCompare(b.transport);
}
