import { createHash, randomBytes, timingSafeEqual } from "node:crypto";
import { and, eq, isNull } from "drizzle-orm";
import type { Db } from "~/db/client.server";
import { apiKeys, collectors, tenants, type KeyScopes } from "~/db/schema.server";

export type Scope = "ingest" | "query";

/**
 * Keys look like `weir_<8 hex>_<32 base64url>`: the first two parts are the
 * visible prefix (stored, shown in lists), the last carries 192 random bits.
 * Only the SHA-256 of the whole key is stored (a fast hash is enough for a
 * random 192-bit secret; common practice for API tokens).
 */
const KEY_PATTERN = /^(weir_[0-9a-f]{8})_([A-Za-z0-9_-]{32})$/;

export function hashKey(key: string): string {
  return createHash("sha256").update(key).digest("hex");
}

export function scopesFor(choice: "ingest" | "query" | "both"): KeyScopes {
  return choice === "both" ? "ingest,query" : choice;
}

export interface CreatedKey {
  id: number;
  prefix: string;
  /** The whole key: shown once, never stored. */
  key: string;
}

/** Creates a key for one collector of one tenant. `key` may be given (demo data only). */
export async function createApiKey(
  db: Db,
  input: { tenantId: number; collectorId: number; scopes: KeyScopes; createdBy?: string | null; key?: string },
): Promise<CreatedKey> {
  // The visible prefix has 32 random bits, so two keys may one day draw the same one: draw again.
  for (let attempt = 0; ; attempt++) {
    const key = input.key ?? `weir_${randomBytes(4).toString("hex")}_${randomBytes(24).toString("base64url")}`;
    const match = KEY_PATTERN.exec(key);
    if (!match) throw new Error("malformed API key");
    const taken = await db.select({ id: apiKeys.id }).from(apiKeys).where(eq(apiKeys.prefix, match[1]));
    if (taken.length > 0 && input.key === undefined && attempt < 5) continue;
    const [row] = await db
      .insert(apiKeys)
      .values({ tenantId: input.tenantId, collectorId: input.collectorId, prefix: match[1], hash: hashKey(key), scopes: input.scopes, createdBy: input.createdBy ?? null })
      .returning({ id: apiKeys.id });
    return { id: row.id, prefix: match[1], key };
  }
}

/** Revokes the key with that prefix; false when there is none or it was already revoked. */
export async function revokeApiKey(db: Db, prefix: string, tenantId?: number): Promise<boolean> {
  const where = tenantId === undefined ? eq(apiKeys.prefix, prefix) : and(eq(apiKeys.prefix, prefix), eq(apiKeys.tenantId, tenantId));
  const rows = await db.update(apiKeys).set({ revokedAt: Date.now() }).where(and(where, isNull(apiKeys.revokedAt))).returning({ id: apiKeys.id });
  return rows.length > 0;
}

export interface KeyPrincipal {
  keyId: number;
  prefix: string;
  scopes: Scope[];
  tenant: {
    id: number;
    slug: string;
    sampleSize: number;
    windowSeconds: number;
    weightAttribute: "bytes" | "packets";
    /** The SipHash key of coordinated draws when the tenant samples with coordinated priorities, else null. */
    coordinationKey: Uint8Array | null;
    /** tenants.retention_days and hourly_retention_days: ingest refuses starts retention would delete. */
    retentionDays: number;
    hourlyRetentionDays: number;
  };
  collector: { id: number; name: string };
}

/** The tenant's coordination key as bytes when coordinated priorities are on, else null. */
export function coordinationKeyOf(tenant: { coordinated: boolean; coordinationSecret: string | null }): Uint8Array | null {
  if (!tenant.coordinated || tenant.coordinationSecret === null) return null;
  return Uint8Array.from(Buffer.from(tenant.coordinationSecret, "hex"));
}

/** An API error a client caused: status, machine code and a message for people. */
export class ApiError extends Error {
  constructor(
    readonly status: number,
    readonly code: string,
    message: string,
    readonly extra: Record<string, unknown> = {},
  ) {
    super(message);
    this.name = "ApiError";
  }

  toResponse(headers?: HeadersInit): Response {
    return Response.json({ error: { code: this.code, message: this.message, ...this.extra } }, { status: this.status, headers });
  }
}

/**
 * Resolves `Authorization: Bearer <key>` to its tenant and collector, checking
 * the scope. Missing, malformed, unknown or revoked → 401; wrong scope → 403.
 * The stored hash is compared in constant time.
 */
export async function authenticateKey(db: Db, request: Request, scope: Scope): Promise<KeyPrincipal> {
  const header = request.headers.get("authorization");
  if (!header) throw new ApiError(401, "unauthenticated", "Send an API key as 'Authorization: Bearer <key>'.");
  const bearer = /^Bearer\s+(\S+)\s*$/i.exec(header);
  const match = bearer ? KEY_PATTERN.exec(bearer[1]) : null;
  if (!match) throw new ApiError(401, "unauthenticated", "The Authorization header must be 'Bearer <key>' with a Weir API key.");
  const [row] = await db
    .select({
      keyId: apiKeys.id,
      hash: apiKeys.hash,
      scopes: apiKeys.scopes,
      revokedAt: apiKeys.revokedAt,
      tenantId: tenants.id,
      slug: tenants.slug,
      sampleSize: tenants.sampleSize,
      windowSeconds: tenants.windowSeconds,
      weightAttribute: tenants.weightAttribute,
      coordinated: tenants.coordinated,
      coordinationSecret: tenants.coordinationSecret,
      retentionDays: tenants.retentionDays,
      hourlyRetentionDays: tenants.hourlyRetentionDays,
      collectorId: collectors.id,
      collectorName: collectors.name,
    })
    .from(apiKeys)
    .innerJoin(tenants, eq(tenants.id, apiKeys.tenantId))
    .innerJoin(collectors, eq(collectors.id, apiKeys.collectorId))
    .where(eq(apiKeys.prefix, match[1]));
  const presented = Buffer.from(hashKey(bearer![1]), "hex");
  const stored = row ? Buffer.from(row.hash, "hex") : Buffer.alloc(presented.length);
  if (!timingSafeEqual(presented, stored) || !row || row.revokedAt !== null) {
    throw new ApiError(401, "unauthenticated", "Unknown or revoked API key.");
  }
  const scopes = row.scopes.split(",") as Scope[];
  if (!scopes.includes(scope)) {
    throw new ApiError(403, "forbidden", `This key has scope '${row.scopes}'; this endpoint needs '${scope}'.`);
  }
  return {
    keyId: row.keyId,
    prefix: match[1],
    scopes,
    tenant: {
      id: row.tenantId,
      slug: row.slug,
      sampleSize: row.sampleSize,
      windowSeconds: row.windowSeconds,
      weightAttribute: row.weightAttribute,
      coordinationKey: coordinationKeyOf(row),
      retentionDays: row.retentionDays,
      hourlyRetentionDays: row.hourlyRetentionDays,
    },
    collector: { id: row.collectorId, name: row.collectorName },
  };
}

/** Records that a key was used, at most once a minute per key to spare the writer. */
export async function touchKey(db: Db, keyId: number, now = Date.now()): Promise<void> {
  const last = lastTouched.get(keyId) ?? 0;
  if (now - last < 60_000) return;
  lastTouched.set(keyId, now);
  await db.update(apiKeys).set({ lastUsedAt: now }).where(eq(apiKeys.id, keyId));
}
const lastTouched = new Map<number, number>();
