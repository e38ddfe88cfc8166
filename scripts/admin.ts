// `npm run admin -- <command>`: creates tenants, API keys and exporter claims from a shell, for bootstrapping
// a deployment and for scripts. Input errors print one line on stderr and exit 2, so a
// script can tell "you asked for something wrong" (2) from "something broke" (1).
import { parseArgs, type ParseArgsConfig } from "node:util";
import { and, asc, count, eq } from "drizzle-orm";
import { z } from "zod";
import { createApiKey, revokeApiKey, scopesFor } from "~/auth/api-keys.server";
import { closeDefaultDb, getDb, type Db } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import { apiKeys, collectors, tenants } from "~/db/schema.server";
import { recordAudit } from "~/audit.server";
import { emailSchema, ensureUserByEmail, roleSchema, setMembership } from "~/auth/users.server";
import {
  claimCidrSchema,
  claimExporter,
  claimRefusal,
  describeClaim,
  domainIdSchema,
  listClaims,
  listExportersForTenant,
  releaseExporter,
} from "~/exporters/claims.server";
import { loadEnv } from "~/env.server";
import { runRetention, type TenantRetentionReport } from "~/retention/rollup.server";
import { collectorNameSchema, createTenant, ensureCollector, findTenantBySlug, listTenants, MergedCollectorError, newTenantSchema } from "~/tenants.server";

const USAGE = `Usage: npm run admin -- <command> [options]

Commands:
  tenant create <slug> [--name TEXT] [--sample-size N] [--window-seconds S]
                       [--weight bytes|packets] [--retention-days N]
                       [--hourly-retention-days M] [--coordinated]
  tenant list
  key create <tenant> <collector> [--scope ingest|query|both]
                       Creates the collector when it is new. The key is shown once,
                       alone on the last line of stdout; only its SHA-256 is stored.
  key list <tenant>
  key revoke <prefix>  The prefix is the first part of a key, e.g. weir_1a2b3c4d.
  exporter claim <tenant> <collector> <address-or-cidr> [--domain N]
                       IPFIX / NetFlow v9 messages from that address (or any address
                       in the CIDR) feed the collector, created when it is new; with
                       --domain, only those of that observation domain (NetFlow v9:
                       source id). The most specific claim wins; claims of two
                       tenants may not overlap.
  exporter list <tenant>
                       The tenant's claims and the exporters seen for them.
  exporter release <tenant> <address-or-cidr> [--domain N]
                       Its messages are dropped and counted as unclaimed again.
  user grant <email> <tenant> <viewer|engineer|admin>
                       Gives a person a role in a tenant (bootstraps the first admin);
                       they sign in to the console with the GitHub account whose
                       verified primary e-mail this is.
  retention run [--tenant SLUG] [--now ISO-TIME]
                       Rolls fine windows older than each tenant's fine-window days up
                       into hourly windows and deletes windows older than its hourly
                       days (Settings), as the server does every RETENTION_INTERVAL_MINUTES.
                       --now runs as of another time (ISO 8601 with a timezone).

Defaults: --sample-size 1024, --window-seconds 300 (one of 60, 300, 900, 3600),
--weight bytes, --retention-days 30 (fine windows), --hourly-retention-days 365
(at least N), coordinated priorities off, --scope ingest.
The database is DATABASE_URL (default file:./data/weir.db), migrated first.
Exit status: 0 done, 2 bad command or input, 1 anything else.

Examples:
  KEY=$(npm run -s admin -- key create riverline pop-north | tail -1)
  npm run admin -- exporter claim riverline pop-north 192.0.2.1 --domain 0`;

/** A mistake in what was asked: one line on stderr, exit 2. */
class UsageError extends Error {}

type Values = Record<string, string | boolean | undefined>;

interface Command {
  args: string[];
  options: NonNullable<ParseArgsConfig["options"]>;
  run(db: Db, args: string[], values: Values): Promise<void>;
}

const COMMANDS: Record<string, Command> = {
  "tenant create": {
    args: ["slug"],
    options: {
      name: { type: "string" },
      "sample-size": { type: "string" },
      "window-seconds": { type: "string" },
      weight: { type: "string" },
      "retention-days": { type: "string" },
      "hourly-retention-days": { type: "string" },
      coordinated: { type: "boolean" },
    },
    run: tenantCreate,
  },
  "tenant list": { args: [], options: {}, run: tenantList },
  "key create": { args: ["tenant", "collector"], options: { scope: { type: "string" } }, run: keyCreate },
  "key list": { args: ["tenant"], options: {}, run: keyList },
  "key revoke": { args: ["prefix"], options: {}, run: keyRevoke },
  "exporter claim": { args: ["tenant", "collector", "address-or-cidr"], options: { domain: { type: "string" } }, run: exporterClaim },
  "exporter list": { args: ["tenant"], options: {}, run: exporterList },
  "exporter release": { args: ["tenant", "address-or-cidr"], options: { domain: { type: "string" } }, run: exporterRelease },
  "user grant": { args: ["email", "tenant", "role"], options: {}, run: userGrant },
  "retention run": { args: [], options: { tenant: { type: "string" }, now: { type: "string" } }, run: retentionRun },
};

// ---- tenants -----------------------------------------------------------------------------

// The flag a person typed for each field of newTenantSchema, so errors name what they can fix.
const TENANT_FLAGS: Record<string, string> = {
  slug: "<slug>",
  name: "--name",
  sampleSize: "--sample-size",
  windowSeconds: "--window-seconds",
  weightAttribute: "--weight",
  retentionDays: "--retention-days",
  hourlyRetentionDays: "--hourly-retention-days",
};

function wholeNumber(values: Values, flag: string): number | undefined {
  const text = values[flag];
  if (typeof text !== "string") return undefined;
  if (!/^\d{1,9}$/.test(text)) throw new UsageError(`--${flag} must be a whole number, got '${text}'`);
  return Number(text);
}

function firstIssue(error: z.ZodError, flags: Record<string, string>): string {
  const issue = error.issues[0];
  const field = String(issue.path[0] ?? "");
  return `${flags[field] ?? field}: ${issue.message}`;
}

async function tenantCreate(db: Db, [slug]: string[], values: Values): Promise<void> {
  const parsed = newTenantSchema.safeParse({
    slug,
    name: values.name,
    sampleSize: wholeNumber(values, "sample-size"),
    windowSeconds: wholeNumber(values, "window-seconds"),
    weightAttribute: values.weight,
    retentionDays: wholeNumber(values, "retention-days"),
    hourlyRetentionDays: wholeNumber(values, "hourly-retention-days"),
    coordinated: values.coordinated === true,
  });
  if (!parsed.success) throw new UsageError(firstIssue(parsed.error, TENANT_FLAGS));
  if (await findTenantBySlug(db, slug)) throw new UsageError(`tenant '${slug}' already exists`);
  const t = await createTenant(db, parsed.data);
  console.log(
    `Created tenant ${t.slug} ("${t.name}"): k ${t.sampleSize}, ${formatWindow(t.windowSeconds)} windows, ` +
      `weight ${t.weightAttribute}, fine windows ${t.retentionDays} d, hourly until ${t.hourlyRetentionDays} d` +
      `${t.coordinated ? ", coordinated priorities" : ""}.`,
  );
}

async function tenantList(db: Db): Promise<void> {
  const all = await listTenants(db);
  if (all.length === 0) {
    console.log("No tenants yet. Create one with: npm run admin -- tenant create <slug>");
    return;
  }
  const counts = await db.select({ tenantId: collectors.tenantId, n: count() }).from(collectors).groupBy(collectors.tenantId);
  const collectorsOf = new Map(counts.map((c) => [c.tenantId, c.n]));
  printTable(
    ["SLUG", "NAME", "K", "WINDOW", "WEIGHT", "RETENTION", "COLLECTORS"],
    all.map((t) => [
      t.slug,
      t.name,
      String(t.sampleSize),
      formatWindow(t.windowSeconds),
      t.weightAttribute,
      `${t.retentionDays} d`,
      String(collectorsOf.get(t.id) ?? 0),
    ]),
  );
}

// ---- keys --------------------------------------------------------------------------------

const scopeSchema = z.enum(["ingest", "query", "both"]);

async function requireTenant(db: Db, slug: string) {
  const tenant = await findTenantBySlug(db, slug);
  if (!tenant) throw new UsageError(`no tenant '${slug}' (see: npm run admin -- tenant list)`);
  return tenant;
}

async function keyCreate(db: Db, [slug, collectorName]: string[], values: Values): Promise<void> {
  const scope = scopeSchema.safeParse(values.scope ?? "ingest");
  if (!scope.success) throw new UsageError(`--scope must be ingest, query or both, got '${String(values.scope)}'`);
  const name = collectorNameSchema.safeParse(collectorName);
  if (!name.success) throw new UsageError(`<collector>: ${name.error.issues[0].message}`);
  const tenant = await requireTenant(db, slug);
  const [existing] = await db
    .select({ id: collectors.id })
    .from(collectors)
    .where(and(eq(collectors.tenantId, tenant.id), eq(collectors.name, collectorName)));
  let collector;
  try {
    collector = await ensureCollector(db, tenant.id, collectorName);
  } catch (error) {
    if (error instanceof MergedCollectorError) throw new UsageError(error.message);
    throw error;
  }
  const created = await createApiKey(db, { tenantId: tenant.id, collectorId: collector.id, scopes: scopesFor(scope.data), createdBy: "admin cli" });
  // The description goes to stderr so stdout holds the key alone: `$(… | tail -1)` and
  // plain `$(…)` both capture just the key.
  console.error(
    `Created ${scope.data === "both" ? "ingest+query" : scope.data} key ${created.prefix} for ${tenant.slug}/${collector.name}` +
      `${existing ? "" : " (new collector)"}. It is shown once; store it now.`,
  );
  console.log(created.key);
}

async function keyList(db: Db, [slug]: string[]): Promise<void> {
  const tenant = await requireTenant(db, slug);
  const rows = await db
    .select({
      prefix: apiKeys.prefix,
      scopes: apiKeys.scopes,
      collector: collectors.name,
      createdAt: apiKeys.createdAt,
      lastUsedAt: apiKeys.lastUsedAt,
      revokedAt: apiKeys.revokedAt,
    })
    .from(apiKeys)
    .innerJoin(collectors, eq(collectors.id, apiKeys.collectorId))
    .where(eq(apiKeys.tenantId, tenant.id))
    .orderBy(asc(apiKeys.createdAt), asc(apiKeys.id));
  if (rows.length === 0) {
    console.log(`No keys for ${tenant.slug}. Create one with: npm run admin -- key create ${tenant.slug} <collector>`);
    return;
  }
  printTable(
    ["PREFIX", "SCOPE", "COLLECTOR", "CREATED", "LAST USED", "REVOKED"],
    rows.map((k) => [
      k.prefix,
      k.scopes === "ingest,query" ? "ingest+query" : k.scopes,
      k.collector,
      formatTime(k.createdAt),
      k.lastUsedAt === null ? "never" : formatTime(k.lastUsedAt),
      k.revokedAt === null ? "-" : formatTime(k.revokedAt),
    ]),
  );
}

async function keyRevoke(db: Db, [prefix]: string[]): Promise<void> {
  const wholeKey = /^(weir_[0-9a-f]{8})_/.exec(prefix);
  // Never echo a whole key back: terminals and CI logs keep what is printed.
  if (wholeKey) throw new UsageError(`give only the key's prefix (${wholeKey[1]}), not the whole key`);
  if (!/^weir_[0-9a-f]{8}$/.test(prefix)) {
    throw new UsageError(`<prefix> must look like weir_1a2b3c4d (the first part of a key, as 'key list' shows), got '${prefix}'`);
  }
  const [key] = await db
    .select({ revokedAt: apiKeys.revokedAt, tenant: tenants.slug, collector: collectors.name })
    .from(apiKeys)
    .innerJoin(tenants, eq(tenants.id, apiKeys.tenantId))
    .innerJoin(collectors, eq(collectors.id, apiKeys.collectorId))
    .where(eq(apiKeys.prefix, prefix));
  if (!key) throw new UsageError(`no key with prefix ${prefix}`);
  if (key.revokedAt !== null || !(await revokeApiKey(db, prefix))) {
    throw new UsageError(`key ${prefix} (${key.tenant}/${key.collector}) is already revoked`);
  }
  console.log(`Revoked key ${prefix} (${key.tenant}/${key.collector}); requests with it now answer 401.`);
}

// ---- exporters ---------------------------------------------------------------------------

const CLI_ACTOR = { id: null, label: "admin CLI" };

/** --domain as given, checked: undefined when absent. */
function domainOption(values: Values): number | null | undefined {
  if (values.domain === undefined) return undefined;
  const parsed = domainIdSchema.safeParse(values.domain);
  if (!parsed.success) throw new UsageError(`--domain ${parsed.error.issues[0].message}, got '${String(values.domain)}'`);
  if (parsed.data === null) throw new UsageError("--domain needs a number; leave the option out to mean every domain");
  return parsed.data;
}

function cidrArgument(text: string): string {
  const parsed = claimCidrSchema.safeParse(text);
  if (!parsed.success) throw new UsageError(`<address-or-cidr>: ${parsed.error.issues[0].message}`);
  return parsed.data.cidr;
}

/** A refused claim or release is a mistake in what was asked (exit 2); anything else is not. */
async function refusedAsUsage<T>(work: Promise<T>): Promise<T> {
  try {
    return await work;
  } catch (error) {
    const refusal = claimRefusal(error);
    if (refusal) throw new UsageError(refusal.message);
    throw error;
  }
}

async function exporterClaim(db: Db, [slug, collectorName, text]: string[], values: Values): Promise<void> {
  const name = collectorNameSchema.safeParse(collectorName);
  if (!name.success) throw new UsageError(`<collector>: ${name.error.issues[0].message}`);
  const cidr = cidrArgument(text);
  const domainId = domainOption(values) ?? null;
  const tenant = await requireTenant(db, slug);
  const claim = await refusedAsUsage(claimExporter(db, { tenantId: tenant.id, collector: collectorName, cidr, domainId, actor: CLI_ACTOR }));
  console.log(
    `Claimed ${describeClaim(claim.cidr, claim.domainId)} for ${tenant.slug}/${claim.collector}${claim.newCollector ? " (new collector)" : ""}. ` +
      "A running server applies it within a few seconds.",
  );
}

async function exporterList(db: Db, [slug]: string[]): Promise<void> {
  const tenant = await requireTenant(db, slug);
  const [claims, seen] = await Promise.all([listClaims(db, tenant.id), listExportersForTenant(db, tenant.id)]);
  if (claims.length === 0) {
    console.log(`No exporter claims for ${tenant.slug}. Claim one with: npm run admin -- exporter claim ${tenant.slug} <collector> <address-or-cidr>`);
    return;
  }
  printTable(
    ["CIDR", "DOMAIN", "COLLECTOR", "CLAIMED BY", "CLAIMED"],
    claims.map((c) => [c.cidr, c.domainId === null ? "every" : String(c.domainId), c.collector, c.createdBy, formatTime(c.createdAt)]),
  );
  console.log("");
  if (seen.length === 0) {
    console.log("No exporter has sent to these claims yet.");
    return;
  }
  printTable(
    ["EXPORTER", "DOMAIN", "TRANSPORT", "COLLECTOR", "CLAIM", "MESSAGES", "RECORDS", "LOST", "MALFORMED", "LAST SEEN"],
    seen.map((e) => [
      e.address,
      e.domainId < 0 ? "none" : String(e.domainId),
      e.transport,
      e.collector,
      e.claim.cidr,
      String(e.messages),
      String(e.records),
      `${e.lost} ${e.lostUnit}`,
      String(e.malformed),
      formatTime(e.lastSeenAt),
    ]),
  );
}

async function exporterRelease(db: Db, [slug, text]: string[], values: Values): Promise<void> {
  const cidr = cidrArgument(text);
  const domainId = domainOption(values);
  const tenant = await requireTenant(db, slug);
  const released = await refusedAsUsage(releaseExporter(db, { tenantId: tenant.id, cidr, domainId, actor: CLI_ACTOR }));
  console.log(
    `Released ${describeClaim(released.cidr, released.domainId)} of ${tenant.slug}/${released.collector}; ` +
      "its messages are dropped and counted as unclaimed once a running server applies it (within a few seconds).",
  );
}

// ---- people ------------------------------------------------------------------------------

async function userGrant(db: Db, [email, slug, role]: string[]): Promise<void> {
  const address = emailSchema.safeParse(email);
  if (!address.success) throw new UsageError(`<email> must be an e-mail address, got '${email}'`);
  const parsedRole = roleSchema.safeParse(role);
  if (!parsedRole.success) throw new UsageError(`<role> must be viewer, engineer or admin, got '${role}'`);
  const tenant = await requireTenant(db, slug);
  const user = await ensureUserByEmail(db, address.data);
  await setMembership(db, user.id, tenant.id, parsedRole.data);
  await recordAudit(db, { tenantId: tenant.id, actor: { id: null, label: "admin CLI" }, action: "member.grant", target: address.data, detail: { role: parsedRole.data } });
  console.log(`${address.data} is now ${parsedRole.data} in ${tenant.slug}${user.githubId === null ? " (they have not signed in yet)" : ""}.`);
}

// ---- retention ---------------------------------------------------------------------------

const isoTimeSchema = z.iso.datetime({ offset: true });

async function retentionRun(db: Db, _args: string[], values: Values): Promise<void> {
  let now = Date.now();
  if (values.now !== undefined) {
    const parsed = isoTimeSchema.safeParse(values.now);
    if (!parsed.success) throw new UsageError(`--now must be an ISO 8601 time with a timezone, e.g. 2026-05-01T00:00:00Z, got '${String(values.now)}'`);
    now = Date.parse(parsed.data);
  }
  const slug = typeof values.tenant === "string" ? values.tenant : undefined;
  if (slug !== undefined) await requireTenant(db, slug);
  // No manager here: a server ingesting into the same database notices rewritten reservoirs and reloads them.
  const node = loadEnv().NODE_ID;
  const reports = await runRetention({ db, node }, now, { tenant: slug });
  console.log(`Retention as of ${formatTime(now)} (hourly windows written as node ${node}):`);
  if (reports.length === 0) console.log("No tenants yet.");
  for (const report of reports) printRetention(report);
  const failed = reports.filter((r) => r.error !== undefined);
  if (failed.length > 0) throw new Error(`retention failed for ${failed.map((r) => r.tenant).join(", ")}`);
}

function printRetention(r: TenantRetentionReport): void {
  const { rolledUp, deleted } = r;
  const plural = (n: number, noun: string) => `${n} ${noun}${n === 1 ? "" : "s"}`;
  console.log(`${r.tenant}  fine windows kept ${r.fineDays} d, hourly windows until ${r.hourlyDays} d old`);
  console.log(
    `  rolled up: ${plural(rolledUp.hours, "hour")}, ${plural(rolledUp.fineWindows, "fine window")} → ${plural(rolledUp.hourlyWindows, "hourly window")}, ` +
      `${plural(rolledUp.kept, "kept record")} (hours ended by ${formatTime(Date.parse(r.rollUpBefore))})`,
  );
  console.log(`  deleted:   ${plural(deleted.windows, "window")}, ${plural(deleted.kept, "kept record")} (ended by ${formatTime(Date.parse(r.deleteBefore))})`);
  if (r.error !== undefined) console.log(`  failed:    ${r.error}`);
}

// ---- output ------------------------------------------------------------------------------

function formatWindow(seconds: number): string {
  return seconds % 60 === 0 ? `${seconds / 60} min` : `${seconds} s`;
}

/** UTC to the minute: enough to tell keys apart, short enough for a table. */
function formatTime(ms: number): string {
  return `${new Date(ms).toISOString().slice(0, 16).replace("T", " ")}Z`;
}

function printTable(headers: string[], rows: string[][]): void {
  const widths = headers.map((h, i) => Math.max(h.length, ...rows.map((r) => r[i].length)));
  for (const line of [headers, ...rows]) {
    console.log(line.map((cell, i) => (i === line.length - 1 ? cell : cell.padEnd(widths[i]))).join("  "));
  }
}

// ---- main --------------------------------------------------------------------------------

async function main(argv: string[]): Promise<number> {
  if (argv.length === 0) {
    console.error(USAGE);
    return 2;
  }
  if (argv[0] === "--help" || argv[0] === "-h" || argv[0] === "help") {
    console.log(USAGE);
    return 0;
  }
  const name = argv.slice(0, 2).join(" ");
  const command = COMMANDS[name];
  if (!command) {
    console.error(`admin: unknown command '${name}'\n\n${USAGE}`);
    return 2;
  }
  try {
    let parsed;
    try {
      parsed = parseArgs({ args: argv.slice(2), options: { ...command.options, help: { type: "boolean", short: "h" } }, allowPositionals: true, strict: true });
    } catch (error) {
      // Node's own messages run long (and differ between versions); the option is what matters.
      const code = (error as { code?: string }).code;
      const option = /'([^']+)'/.exec((error as Error).message)?.[1];
      if (code === "ERR_PARSE_ARGS_UNKNOWN_OPTION" && option) throw new UsageError(`'${name}' has no option ${option}`);
      throw new UsageError((error as Error).message);
    }
    if (parsed.values.help) {
      console.log(USAGE);
      return 0;
    }
    const args = parsed.positionals;
    if (args.length < command.args.length) {
      throw new UsageError(`'${name}' needs ${command.args.map((a) => `<${a}>`).join(" ")}`);
    }
    if (args.length > command.args.length) throw new UsageError(`'${name}': unexpected argument '${args[command.args.length]}'`);
    const db = await getDb();
    await runMigrations(db);
    await command.run(db, args, parsed.values as Values);
    return 0;
  } catch (error) {
    if (!(error instanceof UsageError)) throw error;
    console.error(`admin: ${error.message}`);
    return 2;
  } finally {
    await closeDefaultDb();
  }
}

try {
  process.exitCode = await main(process.argv.slice(2));
} catch (error) {
  console.error("admin: failed:", error);
  process.exitCode = 1;
}
