// A Weir server in its own process for the benchmark, so the load generator
// does not share its event loop. Prints a marker line with the URL (and, with
// BENCH_COLLECT=1, the IPFIX UDP port of its listener) when ready.
// BENCH_PRODUCTION=1 serves build/ as `npm start` does (OAuth and SMTP settings that are
// never contacted: nobody signs in); BENCH_WARM=0 skips the warm-up of recent windows.
import { startServer } from "~/server/app.server";
import { parseEnv } from "~/env.server";

const collect = process.env.BENCH_COLLECT === "1";
const production = process.env.BENCH_PRODUCTION === "1";
const server = await startServer({
  env: parseEnv({
    ...process.env,
    NODE_ENV: production ? "production" : "development",
    HOST: "127.0.0.1",
    PORT: "0",
    IPFIX_UDP_PORT: "0",
    NETFLOW_UDP_PORT: "0",
    IPFIX_TCP_PORT: "0",
    LOG_LEVEL: "silent",
    ...(production
      ? { SESSION_SECRET: "benchmark-session-secret-of-32-characters", GITHUB_CLIENT_ID: "Iv1.0123456789abcdef", GITHUB_CLIENT_SECRET: "0".repeat(40), SMTP_URL: "smtp://127.0.0.1:9" }
      : {}),
  }),
  // The listener on a free port; the benchmark claims 127.0.0.1 for its collector beforehand.
  collect: collect ? { ipfixUdpPort: 0 } : undefined,
  warm: process.env.BENCH_WARM !== "0",
});
process.stdout.write(`WEIR_BENCH_READY ${server.url}${collect ? ` ${server.collection.ports.ipfixUdp}` : ""}\n`);
process.once("SIGTERM", () => void server.close().then(() => process.exit(0)));
