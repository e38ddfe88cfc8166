// `npm run seed [-- --reset]`: fills DATABASE_URL with the INVENTED demo scenario of
// `scenario.ts` (a day of flows for the fictional carrier "riverline" and its customer
// "tributary", documentation addresses only) and the public DEMO keys of `demo-keys.ts`.
// Demo data only: it refuses to run with NODE_ENV=production.
import { pathToFileURL } from "node:url";
import { parseArgs } from "node:util";
import { eq, inArray } from "drizzle-orm";
import { createApiKey, scopesFor } from "~/auth/api-keys.server";
import { closeDefaultDb, getDb, type Db } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import { apiKeys, tenants } from "~/db/schema.server";
import { loadEnv } from "~/env.server";
import { ReservoirManager } from "~/ingest/manager.server";
import type { FlowRecord } from "~/flow/record";
import { claimExporter } from "~/exporters/claims.server";
import { createMerge } from "~/merges/merges.server";
import { packClosedWindows } from "~/query/pack.server";
import { seededUniform } from "~/sampling/uniform";
import { createTenant, ensureCollector } from "~/tenants.server";
import { DEMO_KEYS, DEMO_MEMBERS, demoKeyLines } from "./demo-keys";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { DEMO_TENANTS, SITES, dayOfFlows } from "./scenario";

/** Seeds the scenario's flows; any fixed number does. */
export const SCENARIO_SEED = 1;
/** Exporters claimed in the demo (see the claims above the totals in seedDemo). */
const DEMO_CLAIMS: readonly { tenant: string; collector: string; cidr: string; domain?: number }[] = [
  { tenant: "riverline", collector: "pop-north", cidr: "192.0.2.1" },
  { tenant: "riverline", collector: "pop-south", cidr: "192.0.2.2", domain: 7 },
  { tenant: "riverline", collector: "lab-probe", cidr: "127.0.0.1" },
];

/** The demo merge of riverline's two PoPs. */
export const DEMO_MERGE = "both-pops";
/** Seeds the priorities u_i, so the kept samples are the same on every run too. */
const SAMPLING_SEED = 5;
// Large enough that per-batch overhead vanishes (the server is not running while the demo seeds, so a
// long transaction holds up nobody): 50 000 measured about 7% less CPU than 5 000.
const BATCH_RECORDS = 50_000;
const LIVE_RESERVOIRS = 16;

export class SeedError extends Error {
  override name = "SeedError";
}

export interface SeedOptions {
  /** The node id reservoirs are stored under, as the server would use (env NODE_ID). */
  node: string;
  /** The end of the seeded day; defaults to now. */
  now?: number;
  /** Deletes the demo tenants (and everything of theirs) first. */
  reset?: boolean;
  log?: (line: string) => void;
}

export interface SeedResult {
  status: "seeded" | "present";
  /** Flow records ingested per tenant/collector; empty when nothing was done. */
  collectors: { tenant: string; collector: string; records: number }[];
}

const DEMO_SLUGS = DEMO_TENANTS.map((t) => t.slug);

/** `weir_<8 hex>`, the stored visible part of a key. */
const keyPrefix = (key: string) => key.slice(0, "weir_".length + 8);

/**
 * Creates the demo tenants, their collectors, a day of scenario flows ending at `now`
 * (fed through `ReservoirManager.ingest` in batches, the path of the ingest API after
 * validation) and the demo keys, in that order: the keys come last, so their presence
 * marks a finished seed. Does nothing when the demo tenants are already complete;
 * throws a `SeedError` when they exist half-made or were made by hand.
 */
export async function seedDemo(db: Db, options: SeedOptions): Promise<SeedResult> {
  const log = options.log ?? (() => {});
  if (options.reset) {
    // Cascades to collectors, keys, reservoirs, kept records and ingest batches.
    const removed = await db.delete(tenants).where(inArray(tenants.slug, DEMO_SLUGS)).returning({ slug: tenants.slug });
    if (removed.length > 0) log(`Removed demo tenants: ${removed.map((t) => t.slug).join(", ")}`);
  } else {
    const present = await db.select({ slug: tenants.slug }).from(tenants).where(inArray(tenants.slug, DEMO_SLUGS));
    if (present.length > 0) {
      const keys = await db.select({ prefix: apiKeys.prefix }).from(apiKeys).where(inArray(apiKeys.prefix, DEMO_KEYS.map((k) => keyPrefix(k.key))));
      if (present.length === DEMO_SLUGS.length && keys.length > 0) {
        // A demo seeded before a key was added to DEMO_KEYS gets the new key, nothing else.
        const have = new Set(keys.map((k) => k.prefix));
        for (const demo of DEMO_KEYS.filter((k) => !have.has(keyPrefix(k.key)))) {
          const [tenant] = await db.select({ id: tenants.id }).from(tenants).where(eq(tenants.slug, demo.tenant));
          const collector = await ensureCollector(db, tenant.id, demo.collector);
          await createApiKey(db, { tenantId: tenant.id, collectorId: collector.id, scopes: scopesFor(demo.scope), createdBy: "seed (demo data)", key: demo.key });
          log(`Added the demo key of ${demo.tenant}/${demo.collector}.`);
        }
        log(`Demo tenants ${DEMO_SLUGS.join(", ")} already exist; nothing to do (--reset wipes and reseeds them).`);
        return { status: "present", collectors: [] };
      }
      throw new SeedError(
        `tenant ${present.map((t) => t.slug).join(", ")} exists but is not a complete demo seed; ` +
          "run with --reset to delete the demo tenants and seed them again",
      );
    }
  }

  const now = options.now ?? Date.now();
  const startedAt = performance.now();
  log(`Seeding a day of invented demo flows ending ${new Date(now).toISOString()} (documentation addresses only):`);
  // Flows arrive in time order, so a window is finished once the next has begun: keeping a
  // few live reservoirs instead of the whole day holds memory to tens of megabytes.
  const manager = new ReservoirManager(db, { node: options.node, uniform: seededUniform(SAMPLING_SEED), maxLive: LIVE_RESERVOIRS });
  const made = new Map<string, { id: number; sampleSize: number; windowSeconds: number; weightAttribute: "bytes" | "packets" }>();
  for (const t of DEMO_TENANTS) made.set(t.slug, await createTenant(db, t));

  const result: SeedResult = { status: "seeded", collectors: [] };
  for (const site of SITES) {
    const tenant = made.get(site.tenant)!;
    const collector = await ensureCollector(db, tenant.id, site.collector);
    let batch: FlowRecord[] = [];
    let records = 0;
    const send = async () => {
      await manager.ingest({ tenant, collector, records: batch, receivedAt: now });
      records += batch.length;
      batch = [];
    };
    for (const minute of dayOfFlows(site, now, SCENARIO_SEED)) {
      batch.push(...minute);
      if (batch.length >= BATCH_RECORDS) await send();
    }
    if (batch.length > 0) await send();
    result.collectors.push({ tenant: site.tenant, collector: site.collector, records });
    log(`  ${`${site.tenant}/${site.collector}`.padEnd(20)} ${records.toLocaleString("en-US").padStart(8)} flow records`);
  }

  // A merge of Riverline's two PoPs over the seeded day (each flow enters at one PoP only,
  // so their streams are disjoint), for the Merge page and for Slice by its name.
  const riverline = made.get("riverline")!;
  const dayStart = Math.ceil((now - 86_400_000) / 3_600_000) * 3_600_000;
  const dayEnd = Math.floor(now / 3_600_000) * 3_600_000;
  const merged = await createMerge(
    { db, manager, node: options.node },
    { id: riverline.id, sampleSize: riverline.sampleSize, coordinated: false },
    { name: DEMO_MERGE, collectors: ["pop-north", "pop-south"], from: dayStart, to: dayEnd, sampleSize: riverline.sampleSize, preview: false },
    { id: null, label: "seed (demo data)" },
  );
  log(`Merged riverline/pop-north and pop-south into '${DEMO_MERGE}': ${merged.plan.totals.windows} windows, ${merged.plan.totals.kept.toLocaleString("en-US")} kept records.`);

  // Console members: the invented accounts of the local fake GitHub (scripts/fakes/github.ts).
  for (const member of DEMO_MEMBERS) {
    const user = await ensureUserByEmail(db, member.email);
    await setMembership(db, user.id, made.get(member.tenant)!.id, member.role);
  }
  log(`Console members (sign in through the local fake GitHub): ${DEMO_MEMBERS.map((m) => `${m.email} ${m.role} in ${m.tenant}`).join("; ")}`);

  for (const demo of DEMO_KEYS) {
    const tenant = made.get(demo.tenant)!;
    const collector = await ensureCollector(db, tenant.id, demo.collector);
    await createApiKey(db, { tenantId: tenant.id, collectorId: collector.id, scopes: scopesFor(demo.scope), createdBy: "seed (demo data)", key: demo.key });
  }
  // Exporter claims: the PoP routers (documentation addresses; nothing sends from them in the
  // demo) and this machine's loopback for a lab probe, so `npm run export-ipfix -- --to
  // 127.0.0.1:4739` or softflowd on this machine feeds riverline's lab-probe.
  for (const claim of DEMO_CLAIMS) {
    await claimExporter(db, { tenantId: made.get(claim.tenant)!.id, collector: claim.collector, cidr: claim.cidr, domainId: claim.domain ?? null, actor: { id: null, label: "seed (demo data)" } });
  }
  log(`Exporter claims: ${DEMO_CLAIMS.map((c) => `${c.cidr}${c.domain === undefined ? "" : ` domain ${c.domain}`} → ${c.tenant}/${c.collector}`).join("; ")}`);

  // The closed windows packed now, as the server's packing timer would within a minute of its start.
  const packed = await packClosedWindows(db, { now, maxReservoirs: Number.MAX_SAFE_INTEGER });
  log(`Packed ${packed.reservoirs.toLocaleString("en-US")} closed windows (${packed.records.toLocaleString("en-US")} kept records) for cold queries.`);

  const total = result.collectors.reduce((sum, c) => sum + c.records, 0);
  log(`Seeded ${total.toLocaleString("en-US")} flow records in ${((performance.now() - startedAt) / 1000).toFixed(1)} s. Events worth slicing:`);
  for (const event of SITES.flatMap((site) => site.events)) log(`  ${event.description}`);
  return result;
}

const USAGE = `Usage: npm run seed [-- --reset]

Seeds the invented demo scenario (tenants ${DEMO_SLUGS.join(", ")}; a day of flows ending now;
documentation addresses only) and the public demo keys into DATABASE_URL.
Does nothing when the demo tenants exist already.

  --reset   delete the demo tenants (only those) and seed them again
  --help    show this text`;

async function main(): Promise<void> {
  let values: { reset?: boolean; help?: boolean };
  try {
    ({ values } = parseArgs({ options: { reset: { type: "boolean" }, help: { type: "boolean", short: "h" } }, strict: true }));
  } catch (error) {
    console.error(`seed: ${(error as Error).message}\n\n${USAGE}`);
    process.exitCode = 2;
    return;
  }
  if (values.help) {
    console.log(USAGE);
    return;
  }
  const env = loadEnv();
  if (env.NODE_ENV === "production") {
    console.error("seed: refusing to run with NODE_ENV=production: the demo keys are public");
    process.exitCode = 2;
    return;
  }
  try {
    const db = await getDb();
    await runMigrations(db);
    console.log(`Database: ${env.DATABASE_URL}`);
    await seedDemo(db, { node: env.NODE_ID, reset: values.reset, log: (line) => console.log(line) });
    console.log(["", ...demoKeyLines()].join("\n"));
  } catch (error) {
    if (!(error instanceof SeedError)) throw error;
    console.error(`seed: ${error.message}`);
    process.exitCode = 2;
  } finally {
    await closeDefaultDb();
  }
}

// Runs only as a script; `demo.ts` and the tests import `seedDemo`.
if (process.argv[1] && import.meta.url === pathToFileURL(process.argv[1]).href) await main();
