// `npm run demo`: Weir with the INVENTED demo scenario, in one command. Runs in demo mode
// (WEIR_DEMO=1: a production build served with the local fake GitHub and fake SMTP, refused
// together with real OAuth or mail credentials): builds the app when build/ is missing or
// older than its sources (while the database is migrated and seeded), seeds the demo
// tenants when they are missing (`seed.ts`), starts the server and prints the public DEMO
// keys with copy-pasteable requests.
import "./demo-env";
import { spawn } from "node:child_process";
import { readdirSync, statSync } from "node:fs";
import { join } from "node:path";
import { fileURLToPath } from "node:url";
import { closeDb, createDb } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import { loadEnv } from "~/env.server";
import { closeOnSignals, DEMO_BANNER, startServer } from "~/server/app.server";
import { DEMO_RIVERLINE_KEY, demoKeyLines } from "./demo-keys";
import { SeedError, seedDemo } from "./seed";

const HOUR_MS = 3600_000;
const ROOT = fileURLToPath(new URL("..", import.meta.url));
const startedAt = performance.now();
const seconds = () => ((performance.now() - startedAt) / 1000).toFixed(1);

// Demo mode and a production build (set in ./demo-env, imported first); variables set by hand
// (or in .env) still win for the rest, and the environment check refuses GITHUB_CLIENT_ID/SECRET
// or SMTP_URL beside demo mode.
const env = loadEnv();
console.log(DEMO_BANNER);

const build = buildIfStale(process.argv.includes("--rebuild"));
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
await build;

const server = await startServer({ env }).catch((error: unknown) => {
  console.error(error);
  process.exit(1);
});
// The server answers already; the day's kept records are read into its cache meanwhile
// (a second or so), and the examples below are printed once the first question will be quick.
const warmed = await server.warmed;
if (warmed) console.log(`Read the last day's ${warmed.reservoirs.toLocaleString("en-US")} windows (${warmed.records.toLocaleString("en-US")} kept records) into the query cache.`);

// Whole hours around the seeded day, with room for flows replayed from now on.
const from = new Date(Math.floor((Date.now() - 24 * HOUR_MS) / HOUR_MS) * HOUR_MS).toISOString();
const to = new Date(Math.ceil((Date.now() + HOUR_MS) / HOUR_MS) * HOUR_MS).toISOString();
const flow = { src: "198.51.100.10", dst: "203.0.113.130", sport: 51000, dport: 443, proto: 6, bytes: 120000, packets: 90, bgpSourceAsNumber: 64497, bgpDestinationAsNumber: 64504 };

console.log(
  [
    "",
    `Weir demo running at ${server.url}  (invented data; documentation addresses only; started in ${seconds()} s)`,
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
    DEMO_BANNER,
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

/**
 * Runs `react-router build` when build/ is missing or older than any source it is made of
 * (app/, the Vite and React Router configs, the lockfile), or when asked; resolves when the
 * build is there. Runs as a child process, so it overlaps the seed on a second core.
 */
function buildIfStale(force: boolean): Promise<void> {
  const built = mtimeOf(join(ROOT, "build/server/index.js"));
  const sources = Math.max(
    newestIn(join(ROOT, "app")),
    ...["vite.config.ts", "react-router.config.ts", "package-lock.json", "tsconfig.json"].map((f) => mtimeOf(join(ROOT, f))),
  );
  if (!force && built !== 0 && built >= sources) {
    console.log("Production build is up to date (build/).");
    return Promise.resolve();
  }
  console.log(built === 0 ? "Building the app (no build/ yet) …" : force ? "Building the app (--rebuild) …" : "Building the app (sources changed since the last build) …");
  const t0 = performance.now();
  return new Promise((resolve) => {
    const child = spawn(process.execPath, [join(ROOT, "node_modules/@react-router/dev/bin.js"), "build"], { cwd: ROOT, stdio: ["ignore", "pipe", "pipe"] });
    const output: Buffer[] = [];
    child.stdout.on("data", (chunk: Buffer) => output.push(chunk));
    child.stderr.on("data", (chunk: Buffer) => output.push(chunk));
    child.once("exit", (code) => {
      if (code === 0) {
        console.log(`Built the app in ${((performance.now() - t0) / 1000).toFixed(1)} s.`);
        return resolve();
      }
      process.stderr.write(Buffer.concat(output));
      console.error(`demo: react-router build failed (exit ${code}); see the output above`);
      process.exit(1);
    });
  });
}

function mtimeOf(path: string): number {
  try {
    return statSync(path).mtimeMs;
  } catch {
    return 0;
  }
}

/** The newest modification time of any file under `dir`. */
function newestIn(dir: string): number {
  let newest = 0;
  for (const entry of readdirSync(dir, { withFileTypes: true, recursive: true })) {
    if (entry.isFile()) newest = Math.max(newest, mtimeOf(join(entry.parentPath, entry.name)));
  }
  return newest;
}
