// `npm run demo`: Weir with the INVENTED demo scenario, in one command. Migrates
// DATABASE_URL, seeds the demo tenants when they are missing (`seed.ts`), then serves the
// app in development mode (Vite middleware, no build needed) and prints the public DEMO
// keys with copy-pasteable requests. Demo data only: refuses NODE_ENV=production.
import { closeDb, createDb } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import { loadEnv } from "~/env.server";
import { closeOnSignals, startServer } from "~/server/app.server";
import { DEMO_RIVERLINE_KEY, demoKeyLines } from "./demo-keys";
import { SeedError, seedDemo } from "./seed";

const HOUR_MS = 3600_000;

const env = loadEnv();
if (env.NODE_ENV === "production") {
  console.error("demo: refusing to run with NODE_ENV=production: the demo keys are public");
  process.exit(2);
}

const db = await createDb(env.DATABASE_URL, env.DATABASE_AUTH_TOKEN);
try {
  await runMigrations(db);
  await seedDemo(db, { node: env.NODE_ID, log: (line) => console.log(line) });
} catch (error) {
  if (!(error instanceof SeedError)) throw error;
  console.error(`demo: ${error.message} (npm run seed -- --reset)`);
  process.exit(2);
} finally {
  closeDb(db);
}

const server = await startServer({ env: { ...env, NODE_ENV: "development" } }).catch((error: unknown) => {
  console.error(error);
  process.exit(1);
});

// Whole hours around the seeded day, with room for flows replayed from now on.
const from = new Date(Math.floor((Date.now() - 24 * HOUR_MS) / HOUR_MS) * HOUR_MS).toISOString();
const to = new Date(Math.ceil((Date.now() + HOUR_MS) / HOUR_MS) * HOUR_MS).toISOString();
const flow = { src: "198.51.100.10", dst: "203.0.113.130", sport: 51000, dport: 443, proto: 6, bytes: 120000, packets: 90, bgpSourceAsNumber: 64497, bgpDestinationAsNumber: 64504 };

console.log(
  [
    "",
    `Weir demo running at ${server.url}  (invented data; documentation addresses only)`,
    "",
    `Console: ${server.url}/console — sign in through the local fake GitHub as ada-admin (admin), eli-engineer,`,
    "  vera-viewer (riverline) or oskar-outsider (tributary); nina-newcomer has no tenant until invited.",
    `  Caught e-mail (invitations): ${server.url}/dev/mail`,
    "",
    ...demoKeyLines(),
    "",
    "Send a flow (ingest scope):",
    `  curl -sS -X POST "${server.url}/api/v1/flows" \\`,
    `    -H "Authorization: Bearer ${DEMO_RIVERLINE_KEY}" \\`,
    `    -H "Content-Type: application/json" -H "Idempotency-Key: demo-$(date +%s)" \\`,
    `    --data '${JSON.stringify([flow])}'`,
    "",
    "Estimate bytes from 198.51.100.0/25 to port 443 over the day, per collector (query scope):",
    `  curl -sS "${server.url}/api/v1/estimate?from=${from}&to=${to}&src=198.51.100.0/25&dport=443&metric=bytes&groupBy=collector" \\`,
    `    -H "Authorization: Bearer ${DEMO_RIVERLINE_KEY}"`,
    "",
    "Live traffic for the console:",
    `  npm run replay -- --url ${server.url} --key ${DEMO_RIVERLINE_KEY} --rate 2000`,
    "",
    ...collectionLines(),
    "",
    "Ctrl-C stops the server.",
    "",
  ].join("\n"),
);

closeOnSignals(server);

/** The native-collection listeners and an exporter to try them with (the seed claims 127.0.0.1). */
function collectionLines(): string[] {
  const { ipfixUdp, netflowUdp, ipfixTcp } = server.collection.ports;
  if (ipfixUdp === undefined && netflowUdp === undefined && ipfixTcp === undefined) return ["Native collection: listeners off (IPFIX_UDP_PORT, NETFLOW_UDP_PORT, IPFIX_TCP_PORT are 0)."];
  const host = server.env.COLLECT_HOST ?? server.env.HOST;
  return [
    `Native collection: IPFIX/UDP ${ipfixUdp ?? "off"}, NetFlow v9/UDP ${netflowUdp ?? "off"}, IPFIX/TCP ${ipfixTcp ?? "off"} on ${host}; 127.0.0.1 is claimed for riverline/lab-probe.`,
    ...(ipfixUdp === undefined
      ? []
      : [
          `  npm run export-ipfix -- --to 127.0.0.1:${ipfixUdp} --rate 500                      # an exporter the demo claimed`,
          `  npm run export-ipfix -- --to 127.0.0.1:${ipfixUdp} --from 127.0.0.2 --duration 10  # an unclaimed one (Exporters page, admins)`,
        ]),
  ];
}
