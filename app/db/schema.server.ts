import { sql } from "drizzle-orm";
import {
  blob,
  check,
  index,
  integer,
  primaryKey,
  real,
  sqliteTable,
  text,
  unique,
} from "drizzle-orm/sqlite-core";

// Times are integer epoch milliseconds throughout.

export const WEIGHT_ATTRIBUTES = ["bytes", "packets"] as const;
export type WeightAttribute = (typeof WEIGHT_ATTRIBUTES)[number];

export const KEY_SCOPES = ["ingest", "query", "ingest,query"] as const;
export type KeyScopes = (typeof KEY_SCOPES)[number];

export const tenants = sqliteTable(
  "tenants",
  {
    id: integer("id").primaryKey({ autoIncrement: true }),
    slug: text("slug").notNull().unique(),
    name: text("name").notNull(),
    sampleSize: integer("sample_size").notNull().default(1024),
    windowSeconds: integer("window_seconds").notNull().default(300),
    weightAttribute: text("weight_attribute", { enum: WEIGHT_ATTRIBUTES }).notNull().default("bytes"),
    /** N: fine windows (shorter than an hour) are kept this many days, then rolled up into hourly windows. */
    retentionDays: integer("retention_days").notNull().default(30),
    /** M: hourly windows are deleted once this many days old (M ≥ N, checked by the settings; M = N deletes fine windows without a roll-up). */
    hourlyRetentionDays: integer("hourly_retention_days").notNull().default(365),
    /**
     * k of the hourly windows a roll-up makes; null means the tenant's sample size. Up to the sum
     * of the inputs' k (a roll-up of twelve 5-minute windows keeps at most 12k records): larger
     * keeps intervals narrower at the cost of storage.
     */
    hourlySampleSize: integer("hourly_sample_size"),
    /**
     * Coordinated priorities: u_i comes from a keyed hash of the flow key
     * (app/sampling/coordinated.ts) instead of a random source, so the same flow exported by
     * two collectors gets the same priority and a merge counts it once.
     */
    coordinated: integer("coordinated", { mode: "boolean" }).notNull().default(false),
    /** The 16-byte SipHash key of the coordinated draws, hex; made when first needed and never changed. */
    coordinationSecret: text("coordination_secret"),
    createdAt: integer("created_at").notNull().$defaultFn(() => Date.now()),
  },
  (t) => [
    check("tenants_weight_attribute_check", sql`${t.weightAttribute} in ('bytes', 'packets')`),
    check("tenants_sample_size_check", sql`${t.sampleSize} > 0`),
    check("tenants_window_seconds_check", sql`${t.windowSeconds} > 0`),
  ],
);

export const COLLECTOR_KINDS = ["stream", "merge"] as const;
export type CollectorKind = (typeof COLLECTOR_KINDS)[number];

/**
 * A named source of records inside a tenant (a router, a site, a script): kind `stream`.
 * Kind `merge` is the stored result of a merge of other collectors (table `merges`); it is
 * queried only by name, since its records are already counted in its inputs.
 */
export const collectors = sqliteTable(
  "collectors",
  {
    id: integer("id").primaryKey({ autoIncrement: true }),
    tenantId: integer("tenant_id")
      .notNull()
      .references(() => tenants.id, { onDelete: "cascade" }),
    name: text("name").notNull(),
    kind: text("kind", { enum: COLLECTOR_KINDS }).notNull().default("stream"),
    createdAt: integer("created_at").notNull().$defaultFn(() => Date.now()),
    lastSeenAt: integer("last_seen_at"),
    /**
     * Set on a collector filled by sample-file imports (kind `copy` to readers; the column
     * `kind` stays `stream`): JSON array of the collector names the imported files' provenance
     * names. A copy holds records that may be counted elsewhere, so like a merge it is left out
     * of "every collector" and is not combined with the collector it came from unless asked.
     */
    copyOf: text("copy_of"),
    /** Records accepted with a start before the open window (late, within retention). */
    lateRecords: integer("late_records").notNull().default(0),
    /** Records refused for their times (in the future beyond the tolerance, before the floor, or older than retention). */
    timeRefusedRecords: integer("time_refused_records").notNull().default(0),
    /** Records accepted with a time ahead of the server's clock but within the tolerance (the exporter's clock runs ahead). */
    clockSkewedRecords: integer("clock_skewed_records").notNull().default(0),
    /** IPFIX information elements received and ignored (valid names Weir does not store), summed over records. */
    ignoredFields: integer("ignored_fields").notNull().default(0),
  },
  (t) => [unique("collectors_tenant_name_unique").on(t.tenantId, t.name), check("collectors_kind_check", sql`${t.kind} in ('stream', 'merge')`)],
);

/**
 * Provenance of a merged collector: which collectors and windows went in, at what sample
 * size, who asked and when. One row per collector of kind `merge`.
 */
export const merges = sqliteTable(
  "merges",
  {
    id: integer("id").primaryKey({ autoIncrement: true }),
    tenantId: integer("tenant_id")
      .notNull()
      .references(() => tenants.id, { onDelete: "cascade" }),
    collectorId: integer("collector_id")
      .notNull()
      .unique()
      .references(() => collectors.id, { onDelete: "cascade" }),
    /** JSON array of the input collectors' names. */
    inputs: text("inputs").notNull(),
    fromMs: integer("from_ms").notNull(),
    toMs: integer("to_ms").notNull(),
    sampleSize: integer("sample_size").notNull(),
    /** True when the inputs were merged as coordinated samples (duplicates counted once). */
    coordinated: integer("coordinated", { mode: "boolean" }).notNull(),
    windows: integer("windows").notNull(),
    kept: integer("kept").notNull(),
    duplicatesDropped: integer("duplicates_dropped").notNull().default(0),
    /** A person's login or an API key prefix. */
    createdBy: text("created_by").notNull(),
    createdAt: integer("created_at").notNull().$defaultFn(() => Date.now()),
  },
  (t) => [index("merges_tenant_idx").on(t.tenantId, t.createdAt)],
);

/**
 * Keys are shown once at creation; only the SHA-256 of the whole key is kept, so a leaked
 * database does not leak usable keys. `prefix` is the short visible part that lets a person
 * tell keys apart in the console.
 */
export const apiKeys = sqliteTable(
  "api_keys",
  {
    id: integer("id").primaryKey({ autoIncrement: true }),
    tenantId: integer("tenant_id")
      .notNull()
      .references(() => tenants.id, { onDelete: "cascade" }),
    collectorId: integer("collector_id")
      .notNull()
      .references(() => collectors.id, { onDelete: "cascade" }),
    prefix: text("prefix").notNull().unique(),
    hash: text("hash").notNull().unique(),
    scopes: text("scopes", { enum: KEY_SCOPES }).notNull(),
    createdAt: integer("created_at").notNull().$defaultFn(() => Date.now()),
    createdBy: text("created_by"),
    lastUsedAt: integer("last_used_at"),
    revokedAt: integer("revoked_at"),
  },
  (t) => [check("api_keys_scopes_check", sql`${t.scopes} in ('ingest', 'query', 'ingest,query')`)],
);

/**
 * The persisted state of one priority sample (Duffield, Lund, Thorup, "Priority sampling
 * for estimation of arbitrary subset sums", J. ACM 54(6), 2007) for one
 * (tenant, collector, window, node). `node` is in the key so several Weir nodes can sample
 * the same collector at once without coordinating; estimates sum over their reservoirs.
 */
export const reservoirs = sqliteTable(
  "reservoirs",
  {
    id: integer("id").primaryKey({ autoIncrement: true }),
    tenantId: integer("tenant_id")
      .notNull()
      .references(() => tenants.id, { onDelete: "cascade" }),
    collectorId: integer("collector_id")
      .notNull()
      .references(() => collectors.id, { onDelete: "cascade" }),
    windowStart: integer("window_start").notNull(),
    windowSeconds: integer("window_seconds").notNull(),
    node: text("node").notNull(),
    k: integer("k").notNull(),
    // The (k+1)-th highest priority seen; 0 while at most k records were seen.
    tau: real("tau").notNull().default(0),
    // Exact count of every record seen in the window, kept or not.
    records: integer("records").notNull().default(0),
    // Exact sums over every record seen, as decimal text: they add up unsigned 64-bit
    // counters and can exceed SQLite's signed 64-bit INTEGER.
    bytes: text("bytes").notNull().default("0"),
    packets: text("packets").notNull().default("0"),
    // Next `kept_records.seq` to hand out; never reused within a reservoir.
    nextSeq: integer("next_seq").notNull().default(0),
    updatedAt: integer("updated_at").notNull().$defaultFn(() => Date.now()),
  },
  (t) => [
    unique("reservoirs_key_unique").on(t.tenantId, t.collectorId, t.windowStart, t.windowSeconds, t.node),
    index("reservoirs_tenant_window_idx").on(t.tenantId, t.windowStart),
  ],
);

/**
 * The records a reservoir currently keeps (at most k per reservoir), one row each. `data`
 * holds priority, weight and every flow field in the fixed binary layout of
 * app/ingest/kept-codec.ts: the SQLite driver costs about a microsecond per bound value,
 * and one blob per batch (split into rows by SQL) is what keeps ingest fast. Counters stay
 * exact there (unsigned 64-bit).
 */
export const keptRecords = sqliteTable(
  "kept_records",
  {
    reservoirId: integer("reservoir_id")
      .notNull()
      .references(() => reservoirs.id, { onDelete: "cascade" }),
    seq: integer("seq").notNull(),
    data: blob("data", { mode: "buffer" }).notNull(),
  },
  (t) => [primaryKey({ columns: [t.reservoirId, t.seq] })],
);

/**
 * A closed reservoir's kept records once more, packed in query columns
 * (app/query/packed-columns.ts): a cold query of a day reads one blob per reservoir and
 * lays typed arrays over it, instead of reading one row per kept record and decoding each.
 * A copy for the estimate only (no priorities): `kept_records` stays the record of truth,
 * and a row here counts only while its `next_seq` equals the reservoir's (every change to
 * the kept set moves `next_seq`). Written by app/query/pack.server.ts.
 */
export const packedColumns = sqliteTable("packed_columns", {
  reservoirId: integer("reservoir_id")
    .primaryKey()
    .references(() => reservoirs.id, { onDelete: "cascade" }),
  nextSeq: integer("next_seq").notNull(),
  data: blob("data", { mode: "buffer" }).notNull(),
});

/**
 * One row per accepted ingest batch. `response` is the JSON answer, so a retry with the
 * same Idempotency-Key gets the same answer without counting the batch twice.
 */
export const ingestBatches = sqliteTable(
  "ingest_batches",
  {
    id: integer("id").primaryKey({ autoIncrement: true }),
    tenantId: integer("tenant_id")
      .notNull()
      .references(() => tenants.id, { onDelete: "cascade" }),
    collectorId: integer("collector_id")
      .notNull()
      .references(() => collectors.id, { onDelete: "cascade" }),
    // NULL for batches sent without the header; SQLite treats NULLs as distinct in UNIQUE.
    idempotencyKey: text("idempotency_key"),
    receivedAt: integer("received_at").notNull().$defaultFn(() => Date.now()),
    recordCount: integer("record_count").notNull(),
    // Sum of the batch's byte counters, decimal text for the same reason as reservoirs.bytes.
    bytes: text("bytes").notNull(),
    /** How the batch arrived (INGEST_SOURCES): a JSON body, an IPFIX file, or a listener's flush. */
    source: text("source").notNull().default("json"),
    response: text("response").notNull(),
  },
  (t) => [
    unique("ingest_batches_idempotency_unique").on(t.tenantId, t.idempotencyKey),
    index("ingest_batches_tenant_received_idx").on(t.tenantId, t.receivedAt),
  ],
);

export type Tenant = typeof tenants.$inferSelect;
export type NewTenant = typeof tenants.$inferInsert;
export type Collector = typeof collectors.$inferSelect;
export type NewCollector = typeof collectors.$inferInsert;
export type ApiKey = typeof apiKeys.$inferSelect;
export type NewApiKey = typeof apiKeys.$inferInsert;
export type Reservoir = typeof reservoirs.$inferSelect;
export type NewReservoir = typeof reservoirs.$inferInsert;
export type KeptRecord = typeof keptRecords.$inferSelect;
export type NewKeptRecord = typeof keptRecords.$inferInsert;
export type IngestBatch = typeof ingestBatches.$inferSelect;
export type Merge = typeof merges.$inferSelect;
export type NewIngestBatch = typeof ingestBatches.$inferInsert;

export const ROLES = ["viewer", "engineer", "admin"] as const;
export type Role = (typeof ROLES)[number];

/**
 * People who sign in to the console (through GitHub). A row may exist before the first
 * sign-in, made by `admin user grant` or an accepted invite, with only the e-mail known;
 * the first sign-in with that verified e-mail links the GitHub account.
 */
export const users = sqliteTable("users", {
  id: integer("id").primaryKey({ autoIncrement: true }),
  githubId: integer("github_id").unique(),
  login: text("login"),
  name: text("name"),
  email: text("email").notNull().unique(),
  avatarUrl: text("avatar_url"),
  createdAt: integer("created_at").notNull().$defaultFn(() => Date.now()),
  lastSignInAt: integer("last_sign_in_at"),
});

/** Who belongs to which tenant, with which role. */
export const memberships = sqliteTable(
  "memberships",
  {
    userId: integer("user_id")
      .notNull()
      .references(() => users.id, { onDelete: "cascade" }),
    tenantId: integer("tenant_id")
      .notNull()
      .references(() => tenants.id, { onDelete: "cascade" }),
    role: text("role", { enum: ROLES }).notNull(),
    createdAt: integer("created_at").notNull().$defaultFn(() => Date.now()),
  },
  (t) => [primaryKey({ columns: [t.userId, t.tenantId] }), check("memberships_role_check", sql`${t.role} in ('viewer', 'engineer', 'admin')`)],
);

/** An e-mailed invitation to join a tenant; only the hash of its token is kept, and it works once. */
export const invites = sqliteTable(
  "invites",
  {
    id: integer("id").primaryKey({ autoIncrement: true }),
    tenantId: integer("tenant_id")
      .notNull()
      .references(() => tenants.id, { onDelete: "cascade" }),
    email: text("email").notNull(),
    role: text("role", { enum: ROLES }).notNull(),
    tokenHash: text("token_hash").notNull().unique(),
    invitedBy: integer("invited_by").references(() => users.id, { onDelete: "set null" }),
    createdAt: integer("created_at").notNull().$defaultFn(() => Date.now()),
    expiresAt: integer("expires_at").notNull(),
    acceptedAt: integer("accepted_at"),
    acceptedBy: integer("accepted_by").references(() => users.id, { onDelete: "set null" }),
    revokedAt: integer("revoked_at"),
  },
  (t) => [index("invites_tenant_idx").on(t.tenantId, t.createdAt)],
);

/**
 * The ledger: who did what, when. `tenant_id` is null for events outside any tenant
 * (a sign-in). `actor` is a label that survives the user's deletion.
 */
export const auditLog = sqliteTable(
  "audit_log",
  {
    id: integer("id").primaryKey({ autoIncrement: true }),
    tenantId: integer("tenant_id").references(() => tenants.id, { onDelete: "cascade" }),
    actorUserId: integer("actor_user_id").references(() => users.id, { onDelete: "set null" }),
    actor: text("actor").notNull(),
    action: text("action").notNull(),
    target: text("target"),
    /** JSON object with the particulars (old and new values of a setting, a key prefix …). */
    detail: text("detail"),
    at: integer("at").notNull().$defaultFn(() => Date.now()),
  },
  (t) => [index("audit_log_tenant_at_idx").on(t.tenantId, t.at), index("audit_log_actor_at_idx").on(t.actorUserId, t.at)],
);

export type User = typeof users.$inferSelect;
export type Membership = typeof memberships.$inferSelect;
export type Invite = typeof invites.$inferSelect;
export type AuditEntry = typeof auditLog.$inferSelect;

/** Where an ingest batch came from (shown per collector on Intake). */
export const INGEST_SOURCES = ["json", "ipfix-file", "ipfix-udp", "ipfix-tcp", "netflow9-udp"] as const;
export type IngestSource = (typeof INGEST_SOURCES)[number];

/**
 * An admin's claim of an exporter (RFC 7011 term: the device or probe that sends IPFIX or
 * NetFlow v9) for one collector of the tenant: messages whose source address lies in
 * [first, last] (a CIDR, IPv4-mapped 16-byte values as everywhere) and, when `domainId` is
 * set, whose Observation Domain ID (v9: source id) is that one, feed the collector. The most
 * specific claim wins (longest prefix, then a claim with a domain over one without); claims of
 * two tenants never overlap.
 */
export const exporterClaims = sqliteTable(
  "exporter_claims",
  {
    id: integer("id").primaryKey({ autoIncrement: true }),
    tenantId: integer("tenant_id")
      .notNull()
      .references(() => tenants.id, { onDelete: "cascade" }),
    collectorId: integer("collector_id")
      .notNull()
      .references(() => collectors.id, { onDelete: "cascade" }),
    /** The CIDR as normalised text, e.g. 192.0.2.1/32 or 2001:db8::/48. */
    cidr: text("cidr").notNull(),
    first: blob("first", { mode: "buffer" }).notNull(),
    last: blob("last", { mode: "buffer" }).notNull(),
    /** Prefix length on the 128-bit (IPv4-mapped) scale, for "most specific wins". */
    prefixLength: integer("prefix_length").notNull(),
    /** Observation Domain ID (IPFIX) or source id (NetFlow v9); null claims every domain. */
    domainId: integer("domain_id"),
    createdBy: text("created_by").notNull(),
    createdAt: integer("created_at").notNull().$defaultFn(() => Date.now()),
  },
  (t) => [index("exporter_claims_tenant_idx").on(t.tenantId), index("exporter_claims_first_idx").on(t.first)],
);

/**
 * What the listeners have seen of each exporter (source address, observation domain,
 * transport), claimed or not: counters since first seen and the templates in use, written
 * by the collection service every few seconds. Deployment-wide: which tenant an exporter
 * feeds is decided by the claims, when it is read.
 */
export const exporters = sqliteTable(
  "exporters",
  {
    id: integer("id").primaryKey({ autoIncrement: true }),
    /** The exporter's source address as text (RFC 5952 for IPv6, dotted for IPv4). */
    address: text("address").notNull(),
    /** Observation Domain ID / NetFlow v9 source id; -1 for messages too short to carry one. */
    domainId: integer("domain_id").notNull(),
    /** "ipfix-udp", "ipfix-tcp" or "netflow9-udp". */
    transport: text("transport").notNull(),
    firstSeenAt: integer("first_seen_at").notNull(),
    lastSeenAt: integer("last_seen_at").notNull(),
    messages: integer("messages").notNull().default(0),
    /** Flow records decoded (each direction of a biflow counts once). */
    records: integer("records").notNull().default(0),
    /** Records lost in transport per the sequence numbers (IPFIX: data records; v9: export packets, see lostUnit). */
    lost: integer("lost").notNull().default(0),
    lostUnit: text("lost_unit").notNull().default("records"),
    /** Data sets that arrived before their template (held, then decoded when it came, or dropped); sets, since a set's record count is unknown without its template. */
    waiting: integer("waiting").notNull().default(0),
    /** Of those, sets dropped because the template never came in time (buffer bounds, age, session end). */
    droppedWaiting: integer("dropped_waiting").notNull().default(0),
    /** Messages dropped as malformed; the last reason in lastError. */
    malformed: integer("malformed").notNull().default(0),
    /** Data records without addresses, protocol or positive counters. */
    unusable: integer("unusable").notNull().default(0),
    /** Messages dropped because no claim matched (counted while unclaimed). */
    unclaimedMessages: integer("unclaimed_messages").notNull().default(0),
    /** Records per second over the last interval written. */
    recordsPerSecond: real("records_per_second").notNull().default(0),
    /** Packet sampling interval announced in options records (counters are scaled by it), null when none. */
    samplingInterval: real("sampling_interval"),
    /** JSON: the templates in use, [{ id, options, fields: [name…], refreshedAt }]. */
    templates: text("templates").notNull().default("[]"),
    /** JSON: enterprise-specific elements skipped, [{ enterprise, id, count }]. */
    enterpriseElements: text("enterprise_elements").notNull().default("[]"),
    lastError: text("last_error"),
  },
  (t) => [unique("exporters_key_unique").on(t.address, t.domainId, t.transport)],
);

export type ExporterClaim = typeof exporterClaims.$inferSelect;
export type ExporterRow = typeof exporters.$inferSelect;

/**
 * The calibration report's raw material: every closed window is a free test of Weir's own
 * interval, since its exact totals are known. One row per (reservoir window, metric) checked:
 * the estimate and 95% interval of the window's total from its sample, the exact total, and
 * whether the interval covered it.
 */
export const windowChecks = sqliteTable(
  "window_checks",
  {
    id: integer("id").primaryKey({ autoIncrement: true }),
    tenantId: integer("tenant_id")
      .notNull()
      .references(() => tenants.id, { onDelete: "cascade" }),
    collectorId: integer("collector_id")
      .notNull()
      .references(() => collectors.id, { onDelete: "cascade" }),
    windowStart: integer("window_start").notNull(),
    windowSeconds: integer("window_seconds").notNull(),
    /** "bytes", "packets" or "flows". */
    metric: text("metric").notNull(),
    estimate: real("estimate").notNull(),
    low: real("low").notNull(),
    high: real("high").notNull(),
    /** The exact total, decimal text (unsigned 64-bit sums). */
    exact: text("exact").notNull(),
    covered: integer("covered", { mode: "boolean" }).notNull(),
    /** Which interval method answered (see app/sampling/interval.ts). */
    method: text("method").notNull(),
    checkedAt: integer("checked_at").notNull(),
  },
  (t) => [
    unique("window_checks_key_unique").on(t.tenantId, t.collectorId, t.windowStart, t.windowSeconds, t.metric),
    index("window_checks_tenant_window_idx").on(t.tenantId, t.windowStart),
  ],
);

export type WindowCheck = typeof windowChecks.$inferSelect;

/**
 * Every sample file imported into a tenant, by the SHA-256 of its bytes as received (after
 * gzip decoding): the same file again is refused, naming this row.
 */
export const sampleImports = sqliteTable(
  "sample_imports",
  {
    id: integer("id").primaryKey({ autoIncrement: true }),
    tenantId: integer("tenant_id")
      .notNull()
      .references(() => tenants.id, { onDelete: "cascade" }),
    collectorId: integer("collector_id")
      .notNull()
      .references(() => collectors.id, { onDelete: "cascade" }),
    /** SHA-256 of the file, hex. */
    digest: text("digest").notNull(),
    windows: integer("windows").notNull(),
    kept: integer("kept").notNull(),
    records: integer("records").notNull(),
    fromMs: integer("from_ms").notNull(),
    toMs: integer("to_ms").notNull(),
    /** A person's login or an API key prefix. */
    createdBy: text("created_by").notNull(),
    createdAt: integer("created_at").notNull().$defaultFn(() => Date.now()),
  },
  (t) => [unique("sample_imports_digest_unique").on(t.tenantId, t.digest)],
);

/**
 * The windows a tenant has imported, by their provenance in the file (origin collector, node,
 * window): a window of the same provenance imported again would count its records twice.
 */
export const importedWindows = sqliteTable(
  "imported_windows",
  {
    id: integer("id").primaryKey({ autoIncrement: true }),
    tenantId: integer("tenant_id")
      .notNull()
      .references(() => tenants.id, { onDelete: "cascade" }),
    importId: integer("import_id")
      .notNull()
      .references(() => sampleImports.id, { onDelete: "cascade" }),
    /** The collector and node named by the file for this window. */
    sourceCollector: text("source_collector").notNull(),
    sourceNode: text("source_node").notNull(),
    windowStart: integer("window_start").notNull(),
    windowSeconds: integer("window_seconds").notNull(),
  },
  (t) => [
    unique("imported_windows_provenance_unique").on(t.tenantId, t.sourceCollector, t.sourceNode, t.windowStart, t.windowSeconds),
    index("imported_windows_import_idx").on(t.importId),
  ],
);

export type SampleImport = typeof sampleImports.$inferSelect;
