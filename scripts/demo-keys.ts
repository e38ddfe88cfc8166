/**
 * DEMO DATA ONLY. These API keys are published in the repository, so anyone can use them:
 * `npm run seed` creates them for the invented demo tenants so the README, the console and
 * curl examples work out of the box. Never create them on a database that holds real
 * data; real keys come from `npm run admin -- key create` (random, shown once).
 *
 * They follow the key format of `app/auth/api-keys.server.ts`
 * (`weir_<8 hex>_<32 base64url>`), with "DEMO-ONLY" in the secret part so they stand out
 * in logs and shell history.
 */

export interface DemoKey {
  tenant: string;
  collector: string;
  scope: "ingest" | "query" | "both";
  key: string;
}

/** Ingest and query for riverline, as collector pop-north. */
export const DEMO_RIVERLINE_KEY = "weir_de000001_DEMO-ONLY-riverline-pop-north-01";

/** Query only, for tributary (its collector office-gw). */
export const DEMO_TRIBUTARY_KEY = "weir_de000002_DEMO-ONLY-tributary-office-gw-01";

/**
 * Ingest only, for riverline's collector north-archive: the README imports pop-north's
 * sample file with it (a key imports only into its own collector).
 */
export const DEMO_ARCHIVE_KEY = "weir_de000003_DEMO-ONLY-riverline-archive-0001";

export const DEMO_KEYS: readonly DemoKey[] = [
  { tenant: "riverline", collector: "pop-north", scope: "both", key: DEMO_RIVERLINE_KEY },
  { tenant: "tributary", collector: "office-gw", scope: "query", key: DEMO_TRIBUTARY_KEY },
  { tenant: "riverline", collector: "north-archive", scope: "ingest", key: DEMO_ARCHIVE_KEY },
];

/** The keys as lines for a terminal, with the warning that belongs beside them. */
export function demoKeyLines(): string[] {
  return [
    "DEMO KEYS (public, demo data only; never use them on a real deployment):",
    ...DEMO_KEYS.map((k) => `  ${`${k.tenant}/${k.collector}`.padEnd(20)} ${(k.scope === "both" ? "ingest+query" : k.scope).padEnd(13)} ${k.key}`),
  ];
}

/** Who may sign in to the demo console, and as what: the fake GitHub's invented accounts. */
export const DEMO_MEMBERS: readonly { email: string; tenant: string; role: "viewer" | "engineer" | "admin" }[] = [
  { email: "ada@example.com", tenant: "riverline", role: "admin" },
  { email: "eli@example.com", tenant: "riverline", role: "engineer" },
  { email: "vera@example.com", tenant: "riverline", role: "viewer" },
  { email: "oskar@example.org", tenant: "tributary", role: "admin" },
];
